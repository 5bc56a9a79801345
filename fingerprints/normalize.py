"""From a shape (literals masked) to the canonical template, with sqlglot, once per distinct shape.

Rules, applied in order to the parsed tree (``RULES``): masked values of any literal kind become one
placeholder, a sign on a masked value is dropped, IN lists and repeated VALUES rows keep one item,
names are normalised as the dialect compares them, window-frame and transaction keywords get one
case. The tree is then generated with sqlglot's generator for the same dialect (pretty=False), and
the mask ``'?'`` is written as ``?``.
"""

from __future__ import annotations

import logging
import re
from dataclasses import dataclass
from functools import lru_cache

from sqlglot import exp
from sqlglot.dialects.dialect import Dialect
from sqlglot.errors import ErrorLevel, SqlglotError

from fingerprints import fallback

MAX_PARSE_CHARS = 20_000  # longer shapes are not given to sqlglot (time), see docs
MAX_DEPTH = 200  # deeper bracket nesting is not given to sqlglot (recursion)

SQLGLOT_DIALECT = {"postgres": "postgres", "mysql": "mysql", "sqlite": "sqlite", "generic": ""}
_DML = {exp.Select: "SELECT", exp.Insert: "INSERT", exp.Update: "UPDATE", exp.Delete: "DELETE"}
_PREFIXED_MASK = re.compile(r"(?<![\w$])(?:[EeBbXxNn]|[Uu]&|_[A-Za-z0-9]+)'\?'")
_SAVEPOINT_SHAPES = frozenset(
    ("SAVEPOINT '?'", "RELEASE SAVEPOINT '?'", "ROLLBACK TO SAVEPOINT '?'")
)
_SAFE_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_$]*\Z")
_log = logging.getLogger("sqlglot")
_BACKTICK = re.compile(r"`((?:[^`]|``)*)`")
# Reserved words, which stay quoted when written quoted: PostgreSQL manual, Appendix C "SQL Key
# Words" (reserved in PostgreSQL), from memory, plus MySQL/MariaDB reserved words as listed by
# sqlglot's MySQL generator.
_RESERVED = frozenset(
    """ALL ANALYSE ANALYZE AND ANY ARRAY AS ASC ASYMMETRIC BOTH CASE CAST CHECK COLLATE COLUMN
    CONSTRAINT CREATE CURRENT_CATALOG CURRENT_DATE CURRENT_ROLE CURRENT_TIME CURRENT_TIMESTAMP
    CURRENT_USER DEFAULT DEFERRABLE DESC DISTINCT DO ELSE END EXCEPT FALSE FETCH FOR FOREIGN FROM
    GRANT GROUP HAVING IN INITIALLY INTERSECT INTO LATERAL LEADING LIMIT LOCALTIME LOCALTIMESTAMP
    NOT NULL OFFSET ON ONLY OR ORDER PLACING PRIMARY REFERENCES RETURNING SELECT SESSION_USER SOME
    SYMMETRIC SYSTEM_USER TABLE THEN TO TRAILING TRUE UNION UNIQUE USER USING VARIADIC WHEN WHERE
    WINDOW WITH""".split()
) | frozenset(w.upper() for w in Dialect.get_or_raise("mysql").generator_class.RESERVED_KEYWORDS)


@dataclass(frozen=True)
class Normalized:
    """What normalising one shape gives."""

    template: str
    command: str
    tables: tuple[str, ...]
    parsed: bool


def _is_mask(node: exp.Expr) -> bool:
    return isinstance(node, exp.Literal) and node.is_string and node.this == "?"


def mask_values(tree: exp.Expr, dialect: str) -> exp.Expr:
    """TRUE/FALSE/NULL where a value stands are masked (not after IS: ``x IS NULL`` is a test), and
    a sign on a masked value goes (``-5`` and ``5`` are both values)."""
    for node in list(tree.find_all(exp.Null, exp.Boolean)):
        if not isinstance(node.parent, exp.Is):
            node.replace(exp.Literal.string("?"))
    for node in list(tree.find_all(exp.Neg)):
        if _is_mask(node.this):
            node.replace(node.this)
    return tree


def collapse_lists(tree: exp.Expr, dialect: str) -> exp.Expr:
    """IN lists, ARRAY[...] constructors and multi-row VALUES keep one copy of each distinct item,
    so ``IN (?, ?, ?)``, ``ANY(ARRAY[?, ?])`` and ``VALUES (?, ?), (?, ?)`` lose their length."""
    for node in tree.find_all(exp.In, exp.Array, exp.Values):
        items = node.expressions
        if len(items) > 1:
            seen: dict[str, exp.Expr] = {}
            for item in items:
                seen.setdefault(item.sql(dialect=dialect), item)
            if len(seen) < len(items):
                node.set("expressions", list(seen.values()))
    return tree


def normalize_names(tree: exp.Expr, dialect: str) -> exp.Expr:
    """Names as the dialect compares them.

    PostgreSQL folds unquoted names to lower case, and ``"foo"`` is the same name as ``foo``
    (PostgreSQL manual, 4.1.1 Identifiers and Key Words); "generic" follows PostgreSQL. SQLite
    compares names case-insensitively whether quoted or not (SQLite documentation, "SQLite
    Keywords"). MySQL/MariaDB: quoting does not change how a name compares, and table names are
    case-sensitive on Linux (MariaDB manual, "Identifier Case-sensitivity"), so case is kept.
    """
    for ident in tree.find_all(exp.Identifier):
        name = ident.this
        if not isinstance(name, str):
            continue
        if dialect in ("postgres", "") and not ident.quoted:
            name = name.lower()
        elif dialect == "sqlite":
            name = name.lower()
        if ident.quoted and _SAFE_NAME.match(name) and name.upper() not in _RESERVED:
            if dialect in ("mysql", "sqlite") or name == name.lower():
                ident.set("quoted", False)
        ident.set("this", name)
    return tree


def keyword_case(tree: exp.Expr, dialect: str) -> exp.Expr:
    """Keywords that sqlglot keeps as written (window frames, transaction modes) in upper case."""
    for node in tree.find_all(exp.WindowSpec):
        for key in ("kind", "start", "start_side", "end", "end_side"):
            value = node.args.get(key)
            if isinstance(value, str):
                node.set(key, value.upper())
    for node in tree.find_all(exp.Transaction):
        modes = node.args.get("modes")
        if modes:
            node.set("modes", [m.upper() if isinstance(m, str) else m for m in modes])
    return tree


RULES = (mask_values, collapse_lists, normalize_names, keyword_case)


def command_of(tree: exp.Expr, shape: str) -> str:
    """SELECT/INSERT/UPDATE/DELETE from the tree; otherwise the statement's first word."""
    for kind, name in _DML.items():
        if isinstance(tree, kind):
            return name
    if isinstance(tree, exp.SetOperation):
        return "SELECT"
    return first_word(shape)


def first_word(shape: str) -> str:
    """The first word of a shape in upper case, or "other"."""
    word = shape.lstrip(" (").split(" ", 1)[0].split("(", 1)[0].upper()
    return word if word.isalpha() and word.isascii() else "other"


def tables_of(tree: exp.Expr) -> set[str]:
    """Names of tables read or written (schema-qualified when written so), CTE names excluded."""
    ctes = {cte.alias_or_name for cte in tree.find_all(exp.CTE)}
    out = set()
    for table in tree.find_all(exp.Table):
        name = table.name
        if not name or (not table.db and name in ctes):
            continue
        out.add(f"{table.db}.{name}" if table.db else name)
    return out


def _depth(shape: str) -> int:
    depth = deepest = 0
    for ch in shape:
        if ch == "(":
            depth += 1
            deepest = max(deepest, depth)
        elif ch == ")":
            depth -= 1
    return deepest


def _prepare(shape: str, dialect: str, folds_case: bool) -> str:
    """Prefixed masks (E'?', N'?', _utf8mb4'?') to plain masks, keyword case made uniform."""
    shape = _PREFIXED_MASK.sub("'?'", shape)
    if dialect == "generic" and "`" in shape:
        shape = _BACKTICK.sub(
            lambda m: '"' + m.group(1).replace("``", "`").replace('"', '""') + '"', shape
        )
    return fallback.recase(shape, fallback.keywords(dialect), folds_case)


def _quiet(dialect: str | None) -> dict:
    """``Expression.sql`` settings that do not log sqlglot's "not supported by" warnings to stderr."""
    return {"dialect": dialect, "pretty": False, "unsupported_level": ErrorLevel.IGNORE}


def _parse(text: str, dialect: str) -> list[exp.Expr] | None:
    import sqlglot

    disabled = _log.disabled
    _log.disabled = True  # sqlglot logs a warning for every statement it keeps as a Command
    try:
        trees = sqlglot.parse(text, read=SQLGLOT_DIALECT[dialect] or None)
    except (
        SqlglotError,
        RecursionError,
        ValueError,
        TypeError,
        KeyError,
        IndexError,
        AttributeError,
    ):
        return None
    finally:
        _log.disabled = disabled
    trees = [t for t in trees if t is not None]
    return trees or None


@lru_cache(maxsize=65_536)
def normalize(shape: str, dialect: str, folds_case: bool) -> Normalized:
    """Template, command and tables of one shape; falls back to tokens when sqlglot cannot parse.

    >>> normalize("SELECT A FROM T WHERE ID IN ('?')", "postgres", True).template
    'SELECT a FROM t WHERE id IN (?)'
    """
    kw = fallback.keywords(dialect)
    if not shape:
        return Normalized("", "other", (), False)
    if shape in _SAVEPOINT_SHAPES:
        # Savepoint statements are already canonical (mask.finish); sqlglot misreads them.
        return Normalized(shape[:-3] + "?", shape.split(" ", 1)[0], (), True)
    trees = None
    if len(shape) <= MAX_PARSE_CHARS and (
        shape.count("(") <= MAX_DEPTH or _depth(shape) <= MAX_DEPTH
    ):
        trees = _parse(_prepare(shape, dialect, folds_case), dialect)
    if trees is None:
        return Normalized(
            fallback.fallback_template(shape, kw, folds_case), first_word(shape), (), False
        )
    sqlglot_dialect = SQLGLOT_DIALECT[dialect]
    parts, tables = [], set()
    for tree in trees:
        if isinstance(tree, exp.Command):
            # Opaque to sqlglot (SET, SHOW, EXPLAIN, ...): its text is the shape, literals masked.
            parts.append(
                fallback.fallback_template(tree.sql(**_quiet(sqlglot_dialect)), kw, folds_case)
            )
            continue
        try:
            for rule in RULES:
                tree = rule(tree, sqlglot_dialect)
            parts.append(tree.sql(**_quiet(sqlglot_dialect)).replace("'?'", "?"))
        except (SqlglotError, RecursionError, ValueError, TypeError, KeyError, AttributeError):
            return Normalized(
                fallback.fallback_template(shape, kw, folds_case), first_word(shape), (), False
            )
        tables |= tables_of(tree)
    return Normalized(
        fallback.cap("; ".join(parts)), command_of(trees[0], shape), tuple(sorted(tables)), True
    )
