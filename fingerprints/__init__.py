"""SQL statement -> stable, literal-free template ("fingerprint"), fast in bulk.

>>> fp = fingerprint("SELECT name FROM huts WHERE id IN (1, 2, 3) /*request_id='r1'*/")
>>> fp.template, fp.command, fp.tables, fp.parsed
('SELECT name FROM huts WHERE id IN (?)', 'SELECT', ('huts',), True)
>>> fp.id == fingerprint("select NAME from huts where id in (7)").id
True

The rule (which statements share a template) is written out in docs/fingerprints.md. This package
depends on sqlglot only; it imports nothing from attrib, pandas or duckdb.
"""

from __future__ import annotations

import hashlib
import os
from collections.abc import Iterable
from dataclasses import dataclass, field

from fingerprints.errors import FingerprintError
from fingerprints.mask import LEXERS, Lexer, Masker, finish
from fingerprints.normalize import normalize

__all__ = [
    "Batch",
    "Fingerprint",
    "FingerprintError",
    "fingerprint",
    "fingerprint_many",
    "template_id",
    "DIALECTS",
]

DIALECTS = tuple(LEXERS)
MAX_STATEMENT = 1_000_000  # characters of a statement that are read (time stays bounded)
_RAW_CACHE_MAX = 200_000  # statements remembered by their text (comment cut off)


@dataclass(frozen=True)
class Fingerprint:
    """One template: ``id`` is the first 16 hex digits of BLAKE2b over the template text."""

    id: str
    template: str
    command: str
    tables: tuple[str, ...]
    parsed: bool


@dataclass
class Batch:
    """Fingerprints of many statements: ``ids[i]`` belongs to statement ``i``."""

    ids: list[str]
    templates: dict[str, Fingerprint]
    literals: list[tuple[str, ...]] | None = field(default=None)


def template_id(template: str) -> str:
    """The stable id of a template text (same on every machine, process and run).

    >>> template_id("SELECT ?")
    'c148796e1220075a'
    """
    data = template.encode("utf-8", "surrogatepass")
    return hashlib.blake2b(data, digest_size=8).hexdigest()


def _lexer(dialect: str) -> Lexer:
    try:
        return LEXERS[dialect]
    except (KeyError, TypeError):
        known = ", ".join(repr(d) for d in LEXERS)
        raise FingerprintError(f"unknown SQL dialect {dialect!r}; use one of {known}") from None


def _text(sql: object) -> str:
    if isinstance(sql, str):
        return sql
    if isinstance(sql, bytes | bytearray):
        return bytes(sql).decode("utf-8", "replace")
    return "" if sql is None else str(sql)


def _shapes(
    statements: list[str], dialect: str, with_literals: bool
) -> tuple[list[str], list[int], list[tuple[str, ...]] | None]:
    """Mask every statement; return distinct shapes, one shape index per statement, literals."""
    lexer = LEXERS[dialect]
    masker = Masker(lexer, with_literals)
    folds = lexer.folds_case
    mask = masker.mask
    raw: dict[str, tuple[int, tuple[str, ...]]] = {}
    by_mask: dict[str, int] = {}
    index: dict[str, int] = {}
    shapes: list[str] = []
    out: list[int] = []
    literals: list[tuple[str, ...]] | None = [] if with_literals else None
    none: tuple[str, ...] = ()
    for sql in statements:
        if sql.__class__ is not str:
            sql = _text(sql)
        if len(sql) > MAX_STATEMENT:
            sql = sql[:MAX_STATEMENT]  # bounded time; see docs/fingerprints.md
        key = sql
        if sql.endswith("*/"):
            # A trailing comment (sqlcommenter) differs per request: remember the text before it.
            cut = sql.rfind("/*")
            if cut > 0 and sql.find("*/", cut) == len(sql) - 2:
                key = sql[:cut]
        hit = raw.get(key)
        if hit is None:
            masked = mask(key)
            if masker.open and key is not sql:
                # The cut fell inside a string or comment: mask the whole statement instead.
                masked = mask(sql)
                key = sql
            i = by_mask.get(masked)
            if i is None:
                # finish() runs once per distinct masked text, not once per statement.
                s = finish(masked, folds)
                i = index.get(s)
                if i is None:
                    i = index[s] = len(shapes)
                    shapes.append(s)
                if len(by_mask) >= _RAW_CACHE_MAX:
                    by_mask.clear()
                by_mask[masked] = i
            hit = (i, masker.values if with_literals else none)
            if len(raw) >= _RAW_CACHE_MAX:
                raw.clear()
            raw[key] = hit
        out.append(hit[0])
        if literals is not None:
            literals.append(hit[1])
    return shapes, out, literals


_WORK: list[str] = []


def _init_worker(statements: list[str]) -> None:
    global _WORK
    _WORK = statements  # a forked worker inherits the list: nothing is pickled


def _work_chunk(args: tuple[int, int, str, bool]):
    start, stop, dialect, with_literals = args
    return _shapes(_WORK[start:stop], dialect, with_literals)


def _parallel(statements: list[str], dialect: str, with_literals: bool, processes: int):
    import multiprocessing

    n = len(statements)
    step = max(1, -(-n // (processes * 4)))  # a few chunks per process balance uneven load
    chunks = [(i, min(i + step, n), dialect, with_literals) for i in range(0, n, step)]
    ctx = multiprocessing.get_context("fork")
    with ctx.Pool(processes, initializer=_init_worker, initargs=(statements,)) as pool:
        results = pool.map(_work_chunk, chunks, chunksize=1)
    index: dict[str, int] = {}
    shapes: list[str] = []
    out: list[int] = []
    literals: list[tuple[str, ...]] | None = [] if with_literals else None
    for part_shapes, part_idx, part_lits in results:
        remap = []
        for s in part_shapes:
            i = index.get(s)
            if i is None:
                i = index[s] = len(shapes)
                shapes.append(s)
            remap.append(i)
        out.extend([remap[i] for i in part_idx])
        if literals is not None and part_lits is not None:
            literals.extend(part_lits)
    return shapes, out, literals


def _processes(n: int, processes: int | None) -> int:
    # Default 1: on the 2-core test machine two forked workers were slower than one process
    # (copy-on-write faults and sending results back cost more than they saved; see the docs).
    if processes is None or os.name != "posix" or n < 2:
        return 1
    return max(1, int(processes))


def fingerprint_many(
    statements: Iterable[str],
    dialect: str = "postgres",
    *,
    with_literals: bool = False,
    processes: int | None = None,
) -> Batch:
    """Fingerprint many statements: one fast masking pass each, sqlglot once per distinct shape.

    Args:
        statements: SQL texts (any str; never raises on content).
        dialect: "postgres", "mysql", "sqlite" or "generic".
        with_literals: also return each statement's literal tokens, in order, comments excluded.
        processes: worker processes (forked) for the masking pass; None means 1, which was
            the fastest on the 2-core machine we measured on (docs/fingerprints.md).

    Returns:
        A Batch with one id per statement and each distinct template once.

    >>> b = fingerprint_many(["SELECT 1", "select 2 /*x*/", "BEGIN"], with_literals=True)
    >>> b.ids[0] == b.ids[1] != b.ids[2], b.literals
    (True, [('1',), ('2',), ()])
    """
    lexer = _lexer(dialect)
    items = statements if isinstance(statements, list) else list(statements)
    workers = _processes(len(items), processes)
    if workers > 1 and len(items) >= 2 * workers:
        shapes, idx, literals = _parallel(items, dialect, with_literals, workers)
    else:
        shapes, idx, literals = _shapes(items, dialect, with_literals)
    templates: dict[str, Fingerprint] = {}
    shape_ids = []
    for s in shapes:
        norm = normalize(s, dialect, lexer.folds_case)
        fid = template_id(norm.template)
        if fid not in templates:
            templates[fid] = Fingerprint(fid, norm.template, norm.command, norm.tables, norm.parsed)
        shape_ids.append(fid)
    return Batch([shape_ids[i] for i in idx], templates, literals)


def fingerprint(sql: str, dialect: str = "postgres") -> Fingerprint:
    """Fingerprint one statement (same result as ``fingerprint_many([sql])``).

    >>> fingerprint("SAVEPOINT sp_41").template
    'SAVEPOINT ?'
    """
    batch = fingerprint_many([sql], dialect, processes=1)
    return batch.templates[batch.ids[0]]
