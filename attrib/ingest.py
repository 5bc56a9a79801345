"""Ingest: read request and statement logs into the store, one transaction per file.

The flow per file: SHA-256 (a file already in the store is not read again) → format (given or
detected from the first lines) → the reader's records, streamed → chunks of statements are
fingerprinted together (``fingerprints.fingerprint_many``), their request ids taken from the trailing
sqlcommenter comment, their literal and bind values reduced to a keyed hash → each chunk is inserted
as an Arrow table. Nothing is held per file except one chunk at a time and a count per skip category.
After all files, :func:`attrib.join.link` links new statements to requests.
"""

from __future__ import annotations

import os
import shutil
import tempfile
import time
from collections import Counter, deque
from collections.abc import Callable, Iterable, Iterator, Sequence
from concurrent.futures import Future, ProcessPoolExecutor
from dataclasses import dataclass, field
from datetime import UTC, datetime
from hashlib import blake2b
from multiprocessing import get_context
from operator import attrgetter
from pathlib import Path
from types import ModuleType
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import duckdb
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from attrib import join, readers, sources
from attrib import store as _store
from attrib.comments import request_keys
from attrib.errors import AttribError, FormatError, StoreError, TimezoneError, UsageError
from attrib.records import ReadOptions, Reject, Request, Skip, Statement

DIALECTS = ("postgres", "mysql", "sqlite", "generic")
ID_SOURCES = ("comment", "field", "trace")
EXCERPT_MAX = 200
PROGRESS_EVERY = 20_000  # records between two progress reports
STAGE_PREFIX = "attrib-ingest-"  # + pid: staged statement chunks in the temporary directory
ALREADY = "already ingested (same SHA-256)"
NUL_REASON = "NUL bytes"

# Which (request id, trace id) columns of a staged chunk each id source offers.
_ID_COLUMNS = {
    "comment": ("c_req", "c_trace"),
    "field": ("f_req", None),
    "trace": (None, "f_trace"),
}


@dataclass
class IngestOptions:
    """Settings of one ingest run; each field is one ``attrib ingest`` option."""

    tz: str | None = None
    log_line_prefix: str | None = None
    request_fields: dict[str, str] = field(default_factory=dict)
    query_fields: dict[str, str] = field(default_factory=dict)
    access_format: str | None = None
    dialect: str | None = None
    comment_key: str = "request_id"
    id_sources: tuple[str, ...] = ID_SOURCES
    keep_raw: bool = False
    keep_rejected_text: bool = False
    requests_format: str | None = None
    queries_format: str | None = None
    chunk_size: int = 50_000
    workers: int = 0

    def __post_init__(self) -> None:
        if self.dialect is not None and self.dialect not in DIALECTS:
            raise UsageError(f"unknown dialect {self.dialect!r}; use one of {', '.join(DIALECTS)}")
        self.id_sources = parse_id_sources(self.id_sources)
        if self.chunk_size < 1:
            raise UsageError("chunk size must be at least 1")
        if self.workers < 0:
            raise UsageError("workers must be 0 (no pool) or more")
        if not self.comment_key:
            raise UsageError("--comment-key must not be empty")


@dataclass
class Progress:
    """Where an ingest is, passed to the progress callback (per chunk and once at each file's end)."""

    path: str
    lines: int
    bytes_done: int
    bytes_total: int
    seconds: float
    done: bool


@dataclass
class FileResult:
    """What happened to one input file."""

    path: str
    kind: str
    format: str
    status: str
    lines_read: int = 0
    requests: int = 0
    statements: int = 0
    skipped: int = 0
    rejected: int = 0
    seconds: float = 0.0


@dataclass
class IngestResult:
    """The files of one ingest run and the number of statements newly linked to requests."""

    files: list[FileResult]
    links_added: int = 0

    def summary(self) -> pd.DataFrame:
        """One row per file: file, format, lines, requests, statements, skipped, rejected, seconds."""
        rows = [
            {
                "file": r.path,
                "format": r.format,
                "lines": r.lines_read,
                "requests": r.requests,
                "statements": r.statements,
                "skipped": r.skipped,
                "rejected": r.rejected,
                "seconds": round(r.seconds, 2),
                "status": r.status,
            }
            for r in self.files
        ]
        columns = [
            "file",
            "format",
            "lines",
            "requests",
            "statements",
            "skipped",
            "rejected",
            "seconds",
            "status",
        ]
        return pd.DataFrame(rows, columns=columns)


ProgressCallback = Callable[[Progress], None]


def parse_tz(name: str | None) -> ZoneInfo | None:
    """The IANA zone ``name`` (None stays None); raises TimezoneError for an unknown zone.

    >>> parse_tz("Europe/Paris").key
    'Europe/Paris'
    """
    if name is None:
        return None
    try:
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError):
        raise TimezoneError(
            f"unknown time zone {name!r}; use an IANA name such as UTC or Europe/Berlin"
        ) from None


def parse_mapping(pairs: Iterable[str], option: str) -> dict[str, str]:
    """Turn ``OURS=THEIRS`` strings into a dict; raises UsageError for other shapes.

    >>> parse_mapping(["route=handler", "elapsed_ms=dur"], "--request-field")
    {'route': 'handler', 'elapsed_ms': 'dur'}
    """
    out = {}
    for pair in pairs:
        ours, sep, theirs = pair.partition("=")
        if not sep or not ours.strip() or not theirs.strip():
            raise UsageError(f"{option} {pair!r}: expected OURS=THEIRS, e.g. route=handler")
        out[ours.strip()] = theirs.strip()
    return out


def parse_id_sources(value: str | Sequence[str]) -> tuple[str, ...]:
    """Validate the order of request-id sources (``comment``, ``field``, ``trace``).

    >>> parse_id_sources("field,comment")
    ('field', 'comment')
    """
    items = [v.strip() for v in value.split(",")] if isinstance(value, str) else list(value)
    bad = [v for v in items if v not in ID_SOURCES]
    if bad or not items or len(set(items)) != len(items):
        raise UsageError(
            f"--id-sources {','.join(items)!r}: give each of {', '.join(ID_SOURCES)} at most once"
        )
    return tuple(items)


def param_hash(key: bytes, literals: Sequence[str] | None, params: Sequence[str] | None) -> int:
    """A keyed 64-bit hash of a statement's literal and bind values (unsigned int).

    Equal values give equal hashes within one store; the values cannot be read back.

    >>> param_hash(b"k", ("7",), None) == param_hash(b"k", ("7",), None)
    True
    >>> param_hash(b"k", ("7",), None) == param_hash(b"k", ("8",), None)
    False
    """
    return param_hashes(key, [literals], [params])[0]


def param_hashes(
    key: bytes,
    literals: Sequence[Sequence[str] | None],
    params: Sequence[Sequence[str] | None],
) -> list[int]:
    """:func:`param_hash` of many statements (one keyed hasher, copied per statement)."""
    base = blake2b(key=key, digest_size=8)
    out = []
    for lits, par in zip(literals, params, strict=True):
        text = repr((tuple(lits or ()), tuple(par) if par is not None else None))
        h = base.copy()
        h.update(text.encode("utf-8", "surrogatepass"))
        out.append(int.from_bytes(h.digest(), "big"))
    return out


def comment_ids(sqls: Sequence[str], key: str) -> tuple[list[str | None], list[str | None]]:
    """Request ids and trace ids of the trailing sqlcommenter comments of ``sqls``.

    Same result as :func:`attrib.comments.request_keys` per statement; each distinct comment is
    parsed once (the statements of one request usually share theirs).

    >>> comment_ids(["SELECT 1 /*request_id='a'*/", "SELECT 2 /*request_id='a'*/", "SELECT 3"], "request_id")
    (['a', 'a', None], [None, None, None])
    """
    cache: dict[str, tuple[str | None, str | None]] = {}
    req: list[str | None] = []
    trace: list[str | None] = []
    none = (None, None)
    for sql in sqls:
        tail = sql.rstrip(" \t\r\n;")
        if not tail.endswith("*/"):
            req.append(None)
            trace.append(None)
            continue
        start = tail.rfind("/*", 0, len(tail) - 2)
        if start < 0:
            ids = none
        else:
            body = tail[start:]
            ids = cache.get(body)  # type: ignore[assignment]
            if ids is None:
                ids = cache[body] = request_keys(body, key)
        req.append(ids[0])
        trace.append(ids[1])
    return req, trace


@dataclass
class Digest:
    """What a chunk of statements turns into before it is stored (computed in a worker if any)."""

    ids: list[str]
    templates: dict[str, Any]
    hashes: list[int]
    c_req: list[str | None]
    c_trace: list[str | None]


def digest_statements(
    sqls: list[str],
    params: list[tuple[str, ...] | None],
    dialect: str,
    key: bytes,
    comment_key: str | None,
) -> Digest:
    """Fingerprint a chunk of statements, hash their values and read their comment ids.

    Args:
        sqls: statement texts as logged.
        params: bind values per statement (or None).
        dialect: SQL dialect for the fingerprints.
        key: the store's salt (key of the parameter hash).
        comment_key: sqlcommenter key holding the request id; None to skip reading comments.

    Returns:
        A :class:`Digest` with one entry per statement, in order.
    """
    import fingerprints

    batch = fingerprints.fingerprint_many(sqls, dialect, with_literals=True, processes=1)
    hashes = param_hashes(key, batch.literals, params)
    if comment_key is None:
        none: list[str | None] = [None] * len(sqls)
        return Digest(list(batch.ids), dict(batch.templates), hashes, none, none)
    c_req, c_trace = comment_ids(sqls, comment_key)
    return Digest(list(batch.ids), dict(batch.templates), hashes, c_req, c_trace)


def ingest(
    con: duckdb.DuckDBPyConnection,
    requests: Iterable[str | os.PathLike[str]] = (),
    queries: Iterable[str | os.PathLike[str]] = (),
    options: IngestOptions | None = None,
    progress: ProgressCallback | None = None,
) -> IngestResult:
    """Read request and statement logs into the store, then link statements to requests.

    Each file is one transaction: it is stored completely or not at all. A file whose SHA-256 is
    already in the store is not read again.

    Args:
        con: a store connection (see :func:`attrib.store.connect`).
        requests: request log files or glob patterns.
        queries: statement log files or glob patterns.
        options: format, time zone, mapping and privacy settings.
        progress: called with a :class:`Progress` after each chunk and at each file's end.

    Returns:
        An :class:`IngestResult`; ``.summary()`` gives one row per file.
    """
    options = options or IngestOptions()
    if isinstance(requests, str | os.PathLike):  # one file given on its own
        requests = [requests]
    if isinstance(queries, str | os.PathLike):
        queries = [queries]
    plan = [(p, "requests", options.requests_format) for p in sources.expand(requests)]
    plan += [(p, "statements", options.queries_format) for p in sources.expand(queries)]
    for _path, kind, fmt in plan:  # unknown or misplaced formats fail before anything is read
        if fmt is not None:
            _check_kind(readers.get(fmt), kind, fmt)
    parse_tz(options.tz)
    remove_stale_staging()
    results = [ingest_file(con, path, kind, fmt, options, progress) for path, kind, fmt in plan]
    # always link: a run killed between a file's commit and this step left statements unlinked
    try:
        added = join.link(con)
    except duckdb.Error as exc:
        reason = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
        raise StoreError(
            f"linking statements to requests failed, the store could not be written ({reason}); "
            "make room and run the same ingest again"
        ) from exc
    return IngestResult(results, added)


def remove_stale_staging(tmp: str | None = None) -> int:
    """Delete staging folders left by killed ingests (their process is gone); return how many.

    An ingest stages statement chunks in ``attrib-ingest-<pid>-*`` folders of the temporary
    directory and deletes them when it ends; SIGKILL leaves them behind.
    """
    root = Path(tmp or tempfile.gettempdir())
    removed = 0
    for folder in root.glob(f"{STAGE_PREFIX}*-*"):
        pid_text = folder.name[len(STAGE_PREFIX) :].split("-", 1)[0]
        if not pid_text.isdigit() or not folder.is_dir():
            continue
        pid = int(pid_text)
        if pid == os.getpid() or _alive(pid):
            continue
        shutil.rmtree(folder, ignore_errors=True)
        removed += 1
    return removed


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # another user's process
        return True
    return True


def ingest_file(
    con: duckdb.DuckDBPyConnection,
    path: Path,
    kind: str,
    fmt: str | None,
    options: IngestOptions,
    progress: ProgressCallback | None = None,
) -> FileResult:
    """Ingest one file in one transaction (see :func:`ingest`)."""
    started = time.perf_counter()
    name = str(path)
    sha = sources.sha256(path)
    if con.execute("SELECT 1 FROM sources WHERE sha256 = ?", [sha]).fetchone():
        known = con.execute("SELECT format FROM sources WHERE sha256 = ?", [sha]).fetchone()[0]
        return FileResult(name, kind, known, ALREADY)
    head = sources.head(path)
    module: ModuleType | None
    if fmt is not None:
        module = readers.get(fmt)
    elif not head:
        module = None  # an empty file: nothing to detect, nothing to read
    else:
        module = readers.detect(head, kind, name)
    if module is not None:
        _check_kind(module, kind, module.NAME)
    fmt_name = module.NAME if module is not None else "empty"

    con.execute("BEGIN TRANSACTION")
    try:
        dialect = _dialect(
            con, options.dialect, fmt_name, module is not None and module.KIND != "requests"
        )
        source_id = con.execute("SELECT coalesce(max(source_id), 0) + 1 FROM sources").fetchone()[0]
        con.execute(
            "INSERT INTO sources VALUES (?, ?, ?, ?, ?, 0, 0, 0, 0, 0, 0, ?)",
            [source_id, name, sha, fmt_name, path.stat().st_size, _now()],
        )
        writer = _Writer(con, source_id, name, dialect, options)
        with sources.LineSource(path) as lines:
            if module is not None:
                read_options = ReadOptions(
                    tz=parse_tz(options.tz),
                    request_fields=dict(options.request_fields),
                    statement_fields=dict(options.query_fields),
                    access_format=options.access_format,
                    dialect=dialect,
                )
                if options.log_line_prefix is not None:
                    read_options.log_line_prefix = options.log_line_prefix
                nul: set[int] = set()
                records = module.read(_after_nul(lines, nul), read_options)
                _consume(records, writer, lines, progress, started, nul)
            else:  # nothing to detect a format from: empty, or NUL bytes where text should be
                _consume(_undetected(lines), writer, lines, progress, started)
            lines.drain()
            writer.finish()
            counts = writer.counts
            accounted = counts["ingested"] + counts["skipped"] + counts["rejected"]
            if accounted != lines.lines_read:
                raise AssertionError(
                    f"{name}: reader {fmt_name} accounted for {accounted} lines of "
                    f"{lines.lines_read} (ingested {counts['ingested']}, skipped "
                    f"{counts['skipped']}, rejected {counts['rejected']}); this is a bug"
                )
            lines_read = lines.lines_read
            if progress is not None:
                progress(
                    Progress(
                        name,
                        lines_read,
                        lines.size,
                        lines.size,
                        time.perf_counter() - started,
                        True,
                    )
                )
        con.execute(
            """UPDATE sources SET lines_read = ?, lines_ingested = ?, lines_skipped = ?,
                   lines_rejected = ?, requests = ?, statements = ? WHERE source_id = ?""",
            [
                lines_read,
                counts["ingested"],
                counts["skipped"],
                counts["rejected"],
                counts["requests"],
                counts["statements"],
                source_id,
            ],
        )
        con.execute("COMMIT")
    except AttribError as exc:
        _rollback(con)
        message = str(exc)
        if not message.startswith(name):
            raise type(exc)(f"{name}: {message}") from None
        raise
    except duckdb.Error as exc:  # e.g. a full disk: the store could not be written
        _rollback(con)
        reason = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
        raise StoreError(
            f"{name}: not stored, the store could not be written ({reason}); "
            "make room and run the same ingest again"
        ) from exc
    except BaseException:
        _rollback(con)
        raise
    finally:
        if "writer" in locals():
            writer.close()
    return FileResult(
        name,
        kind,
        fmt_name,
        "ingested",
        lines_read,
        counts["requests"],
        counts["statements"],
        counts["skipped"],
        counts["rejected"],
        time.perf_counter() - started,
    )


def _consume(
    records: Iterable[Any],
    writer: _Writer,
    lines: sources.LineSource,
    progress: ProgressCallback | None,
    started: float,
    nul: set[int] | None = None,
) -> None:
    """Dispatch a reader's records to the writer's buffers (the hot loop of ingest).

    ``nul`` holds the numbers of lines that had NUL bytes (see :func:`_after_nul`); a one-line skip
    or reject of such a line becomes a ``NUL bytes`` reject.
    """
    nul = nul if nul is not None else set()
    statements = writer.statements
    requests = writer.requests
    skips = writer.skips
    rejects = writer.rejects
    chunk = writer.chunk_size
    tick = PROGRESS_EVERY
    for rec in records:
        kind = type(rec)
        if kind is Statement:
            statements.append(rec)
            if len(statements) >= chunk:
                writer.flush_statements()
        elif kind is Request:
            requests.append(rec)
            if len(requests) >= chunk:
                writer.flush_requests()
        elif kind is Skip:
            if nul and rec.line in nul and rec.lines == 1:
                rejects.append(Reject(rec.line, NUL_REASON, "", 1))
            else:
                skips[rec.category] += rec.lines
        elif kind is Reject:
            if nul and rec.line in nul and rec.lines == 1:
                rec = Reject(rec.line, NUL_REASON, rec.excerpt, 1)
            rejects.append(rec)
            if len(rejects) >= chunk:
                writer.flush_rejects()
        else:
            raise TypeError(f"reader produced {kind.__name__}, not a record")
        tick -= 1
        if not tick:
            tick = PROGRESS_EVERY
            if progress is not None:
                elapsed = time.perf_counter() - started
                where = lines.position()
                progress(
                    Progress(str(lines.path), lines.lines_read, where, lines.size, elapsed, False)
                )


def _after_nul(lines: Iterable[tuple[int, str]], nul: set[int]) -> Iterator[tuple[int, str]]:
    """Give readers the text after the last NUL byte of a line, noting its number in ``nul``.

    A crashed server leaves runs of NUL bytes in a text log, and the next line it writes follows the
    run on the same physical line; that text is read, what came before the run is lost.
    """
    for number, text in lines:
        if "\x00" in text:
            nul.add(number)
            text = sources.after_nul(text)
        yield number, text


def _undetected(lines: Iterable[tuple[int, str]]) -> Iterator[Reject]:
    """Rejects for the lines of a file whose first lines held only NUL bytes (no format known)."""
    for number, text in lines:
        reason = NUL_REASON if "\x00" in text else "format not detected (only NUL bytes before)"
        yield Reject(number, reason, "", 1)


class _Writer:
    """Buffers one file's records and inserts them chunk by chunk as Arrow tables."""

    def __init__(
        self,
        con: duckdb.DuckDBPyConnection,
        source_id: int,
        name: str,
        dialect: str,
        options: IngestOptions,
    ) -> None:
        self.con = con
        self.source_id = source_id
        self.name = name
        self.dialect = dialect
        self.options = options
        self.chunk_size = options.chunk_size
        self.key = _store.salt(con)
        self.statements: list[Statement] = []
        self.requests: list[Request] = []
        self.rejects: list[Reject] = []
        self.skips: Counter[str] = Counter()
        self.counts = Counter(
            {"ingested": 0, "skipped": 0, "rejected": 0, "requests": 0, "statements": 0}
        )
        self.known_templates = {
            row[0] for row in con.execute("SELECT template_id FROM templates").fetchall()
        }
        self._seq = {"statements": (0, -1), "requests": (0, -1)}
        # Statement chunks are staged as Parquet files and inserted with one INSERT at the end:
        # DuckDB holds the rows of many small inserts of an open transaction in memory, but streams
        # one large INSERT ... SELECT (measured in tests/bench/bench_ingest.py).
        self._stage_dir: str | None = None
        self._staged: list[str] = []
        self._pending: deque[tuple[Future[Digest], list[Statement]]] = deque()
        self._pool: ProcessPoolExecutor | None = None
        if options.workers > 0:
            self._pool = ProcessPoolExecutor(options.workers, mp_context=get_context("spawn"))
        self._comment_key = options.comment_key if "comment" in options.id_sources else None
        self._id_sql = _id_expressions(options.id_sources)

    # -- statements -------------------------------------------------------------------------
    def flush_statements(self) -> None:
        """Fingerprint and store the buffered statements (via the pool when there is one)."""
        chunk, self.statements[:] = list(self.statements), []
        if not chunk:
            return
        sqls = [s.sql for s in chunk]
        params = [s.params for s in chunk]
        args = (sqls, params, self.dialect, self.key, self._comment_key)
        if self._pool is None:
            self._store_statements(chunk, digest_statements(*args))
            return
        self._pending.append((self._pool.submit(digest_statements, *args), chunk))
        while len(self._pending) > self.options.workers:
            future, done = self._pending.popleft()
            self._store_statements(done, future.result())

    def _store_statements(self, chunk: list[Statement], digest: Digest) -> None:
        new = [fp for tid, fp in digest.templates.items() if tid not in self.known_templates]
        if new:
            table = pa.table(
                {
                    "template_id": pa.array([fp.id for fp in new], pa.string()),
                    "template": pa.array([fp.template for fp in new], pa.string()),
                    "command": pa.array([fp.command for fp in new], pa.string()),
                    "tables": pa.array([list(fp.tables) for fp in new], pa.list_(pa.string())),
                    "parsed": pa.array([bool(fp.parsed) for fp in new], pa.bool_()),
                }
            )
            self._insert(
                "INSERT INTO templates SELECT * FROM _chunk WHERE template_id NOT IN "
                "(SELECT template_id FROM templates)",
                table,
            )
            self.known_templates.update(fp.id for fp in new)
        (line, start, duration, rows, f_req, f_trace, session, user, database, error) = zip(
            *map(_STATEMENT_FIELDS, chunk), strict=True
        )
        table = pa.table(
            {
                "line": pa.array(line, pa.int64()),
                "seq": pa.array(self._seqs("statements", line), pa.int32()),
                "started_at": pa.array(start, pa.timestamp("us")),
                "duration_ms": pa.array(duration, pa.float64()),
                "rows": pa.array(rows, pa.int64()),
                "template_id": pa.array(digest.ids, pa.string()),
                "param_hash": pa.array(digest.hashes, pa.uint64()),
                "c_req": pa.array(digest.c_req, pa.string()),
                "c_trace": pa.array(digest.c_trace, pa.string()),
                "f_req": pa.array(f_req, pa.string()),
                "f_trace": pa.array(f_trace, pa.string()),
                "session": pa.array(session, pa.string()),
                "db_user": pa.array(user, pa.string()),
                "db_name": pa.array(database, pa.string()),
                "error": pa.array(error, pa.string()),
                "raw_sql": pa.array(
                    [s.sql for s in chunk] if self.options.keep_raw else [None] * len(chunk),
                    pa.string(),
                ),
            }
        )
        if self._stage_dir is None:
            self._stage_dir = tempfile.mkdtemp(prefix=f"{STAGE_PREFIX}{os.getpid()}-")
        staged = os.path.join(self._stage_dir, f"{len(self._staged):06d}.parquet")
        pq.write_table(table, staged)
        self._staged.append(staged)
        lines = sum(map(_LINES, chunk))
        self.counts["ingested"] += lines
        self.counts["statements"] += len(chunk)

    # -- requests ---------------------------------------------------------------------------
    def flush_requests(self) -> None:
        """Store the buffered requests; a request id already stored becomes a reject."""
        chunk, self.requests[:] = list(self.requests), []
        if not chunk:
            return
        ids = sorted({r.request_id for r in chunk if r.request_id is not None})
        first: dict[str, tuple[str, int]] = {}
        if ids:
            self.con.register("_ids", pa.table({"request_id": pa.array(ids, pa.string())}))
            try:
                rows = self.con.execute(
                    """SELECT r.request_id, s.path, r.line FROM requests r
                       JOIN _ids USING (request_id) JOIN sources s USING (source_id)"""
                ).fetchall()
            finally:
                self.con.unregister("_ids")
            first = {rid: (path, line) for rid, path, line in rows}
        keep: list[Request] = []
        for r in chunk:
            rid = r.request_id
            if rid is not None:
                seen = first.get(rid)
                if seen is not None:
                    reason = f"duplicate request id (first seen in {seen[0]} line {seen[1]})"
                    self.rejects.append(Reject(r.line, reason, "", r.lines))
                    continue
                first[rid] = (self.name, r.line)
            keep.append(r)
        if keep:
            line = [r.line for r in keep]
            table = pa.table(
                {
                    "line": pa.array(line, pa.int64()),
                    "seq": pa.array(self._seqs("requests", line), pa.int32()),
                    "request_id": pa.array([r.request_id for r in keep], pa.string()),
                    "trace_id": pa.array([r.trace_id for r in keep], pa.string()),
                    "started_at": pa.array([r.start_us for r in keep], pa.timestamp("us")),
                    "elapsed_ms": pa.array([r.elapsed_ms for r in keep], pa.float64()),
                    "method": pa.array([r.method for r in keep], pa.string()),
                    "route": pa.array(
                        [r.route or r.path or "(unknown)" for r in keep], pa.string()
                    ),
                    # a path holds values (/users/ada@example.org): kept only with --keep-raw
                    "path": pa.array(
                        [r.path for r in keep] if self.options.keep_raw else [None] * len(keep),
                        pa.string(),
                    ),
                    "status": pa.array([r.status for r in keep], pa.int32()),
                }
            )
            self._insert(
                f"""INSERT INTO requests SELECT {self.source_id}, line, seq, request_id, trace_id,
                        started_at, elapsed_ms, method, route, path, status FROM _chunk""",
                table,
            )
            self.counts["ingested"] += sum(r.lines for r in keep)
            self.counts["requests"] += len(keep)
        if len(self.rejects) >= self.chunk_size:
            self.flush_rejects()

    # -- rejects, skips ---------------------------------------------------------------------
    def flush_rejects(self) -> None:
        """Store the buffered rejects (their text only with --keep-rejected-text)."""
        chunk, self.rejects[:] = list(self.rejects), []
        if not chunk:
            return
        keep_text = self.options.keep_rejected_text
        table = pa.table(
            {
                "line": pa.array([r.line for r in chunk], pa.int64()),
                "lines": pa.array([r.lines for r in chunk], pa.int32()),
                "reason": pa.array([r.reason for r in chunk], pa.string()),
                "excerpt": pa.array(
                    [r.excerpt[:EXCERPT_MAX] if keep_text else None for r in chunk], pa.string()
                ),
            }
        )
        self._insert(
            f"INSERT INTO rejects SELECT {self.source_id}, line, lines, reason, excerpt FROM _chunk",
            table,
        )
        self.counts["rejected"] += sum(r.lines for r in chunk)

    def finish(self) -> None:
        """Flush every buffer and wait for the pool; then the counts are final."""
        self.flush_statements()
        while self._pending:
            future, done = self._pending.popleft()
            self._store_statements(done, future.result())
        if self._staged:
            request_id, trace_id = self._id_sql
            self.con.execute(
                f"""INSERT INTO statements SELECT {self.source_id}, line, seq, started_at,
                        duration_ms, rows, template_id, param_hash, {request_id}, {trace_id},
                        session, db_user, db_name, error, raw_sql FROM read_parquet(?)""",
                [self._staged],
            )
        self.flush_requests()
        self.flush_rejects()
        if self.skips:
            cats = sorted(self.skips)
            table = pa.table(
                {
                    "category": pa.array(cats, pa.string()),
                    "lines": pa.array([self.skips[c] for c in cats], pa.int64()),
                }
            )
            self._insert(
                f"INSERT INTO skipped SELECT {self.source_id}, category, lines FROM _chunk", table
            )
            self.counts["skipped"] += sum(self.skips.values())

    def close(self) -> None:
        """Stop the worker pool, if any, and remove the staged chunks."""
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None
        if self._stage_dir is not None:
            shutil.rmtree(self._stage_dir, ignore_errors=True)
            self._stage_dir = None

    # -- helpers ----------------------------------------------------------------------------
    def _insert(self, sql: str, table: pa.Table) -> None:
        self.con.register("_chunk", table)
        try:
            self.con.execute(sql)
        finally:
            self.con.unregister("_chunk")

    def _seqs(self, table: str, line: Sequence[int]) -> list[int]:
        """Number records that share a line 0, 1, ... (continuing across chunks)."""
        seq, last = self._seq[table]
        out = []
        for n in line:
            seq = seq + 1 if n == last else 0
            last = n
            out.append(seq)
        self._seq[table] = (seq, last)
        return out


_LINES = attrgetter("lines")
_STATEMENT_FIELDS = attrgetter(
    "line",
    "start_us",
    "duration_ms",
    "rows",
    "request_id",
    "trace_id",
    "session",
    "user",
    "database",
    "error",
)


def _id_expressions(order: Sequence[str]) -> tuple[str, str]:
    """SQL for a statement's request id and trace id, taking sources in the given order.

    >>> _id_expressions(("field", "comment"))
    ('coalesce(f_req, c_req)', 'coalesce(c_trace)')
    """
    req = [_ID_COLUMNS[s][0] for s in order if _ID_COLUMNS[s][0]]
    trace = [_ID_COLUMNS[s][1] for s in order if _ID_COLUMNS[s][1]]
    return (
        f"coalesce({', '.join(req)})" if req else "CAST(NULL AS VARCHAR)",
        f"coalesce({', '.join(trace)})" if trace else "CAST(NULL AS VARCHAR)",
    )


def _check_kind(module: ModuleType, kind: str, fmt: str) -> None:
    if module.KIND not in (kind, "both"):
        option = "--requests" if module.KIND == "requests" else "--queries"
        raise FormatError(f"{fmt} is a {module.KIND} log format; give such files with {option}")


def _dialect(
    con: duckdb.DuckDBPyConnection, requested: str | None, fmt: str, statements: bool
) -> str:
    """The store's SQL dialect: set by the first statement log ingested, kept afterwards."""
    default = "mysql" if fmt == "mysql-slow" else "postgres"
    row = con.execute("SELECT value FROM meta WHERE key = 'dialect'").fetchone()
    wanted = requested or default
    if not statements:
        return row[0] if row else wanted
    if row is None:
        con.execute("INSERT INTO meta VALUES ('dialect', ?)", [wanted])
        return wanted
    stored = row[0]
    if wanted == stored:
        return stored
    if requested is None and fmt != "mysql-slow":
        return stored
    raise UsageError(
        f"this store holds {stored} statements; {wanted} statements need a store of their own"
    )


def _rollback(con: duckdb.DuckDBPyConnection) -> None:
    """Roll back the file's transaction; a failed COMMIT (full disk) has ended it already."""
    try:
        con.execute("ROLLBACK")
    except duckdb.TransactionException:
        pass


def _now() -> datetime:
    return datetime.now(UTC).replace(tzinfo=None)
