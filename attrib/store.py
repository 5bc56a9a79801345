"""The store: one embedded DuckDB file holding requests, statements, templates and their sources.

This is the only module that creates or migrates tables. The schema is documented in docs/schema.md;
keep both in step. All times are UTC ``TIMESTAMP`` values.
"""

from __future__ import annotations

import os
import secrets
from collections.abc import Callable
from pathlib import Path

import duckdb

from attrib.errors import StoreError, StoreLockedError, StoreVersionError

SCHEMA_VERSION = 2

_V1 = """
CREATE TABLE meta (key VARCHAR PRIMARY KEY, value VARCHAR NOT NULL);
CREATE TABLE sources (
    source_id      INTEGER PRIMARY KEY,
    path           VARCHAR NOT NULL,
    sha256         VARCHAR NOT NULL UNIQUE,
    format         VARCHAR NOT NULL,
    bytes          BIGINT NOT NULL,
    lines_read     BIGINT NOT NULL,
    lines_ingested BIGINT NOT NULL,
    lines_skipped  BIGINT NOT NULL,
    lines_rejected BIGINT NOT NULL,
    requests       BIGINT NOT NULL,
    statements     BIGINT NOT NULL,
    ingested_at    TIMESTAMP NOT NULL
);
CREATE TABLE skipped (
    source_id INTEGER NOT NULL,
    category  VARCHAR NOT NULL,
    lines     BIGINT NOT NULL,
    PRIMARY KEY (source_id, category)
);
CREATE TABLE rejects (
    source_id INTEGER NOT NULL,
    line      BIGINT NOT NULL,
    lines     INTEGER NOT NULL,
    reason    VARCHAR NOT NULL,
    excerpt   VARCHAR
);
CREATE TABLE requests (
    source_id  INTEGER NOT NULL,
    line       BIGINT NOT NULL,
    seq        INTEGER NOT NULL,
    request_id VARCHAR,
    trace_id   VARCHAR,
    started_at TIMESTAMP NOT NULL,
    elapsed_ms DOUBLE NOT NULL,
    method     VARCHAR,
    route      VARCHAR NOT NULL,
    path       VARCHAR,
    status     INTEGER,
    PRIMARY KEY (source_id, line, seq)
);
CREATE TABLE statements (
    source_id   INTEGER NOT NULL,
    line        BIGINT NOT NULL,
    seq         INTEGER NOT NULL,
    started_at  TIMESTAMP NOT NULL,
    duration_ms DOUBLE,
    rows        BIGINT,
    template_id VARCHAR NOT NULL,
    param_hash  UBIGINT,
    request_id  VARCHAR,
    trace_id    VARCHAR,
    session     VARCHAR,
    db_user     VARCHAR,
    db_name     VARCHAR,
    error       VARCHAR,
    raw_sql     VARCHAR,
    PRIMARY KEY (source_id, line, seq)
);
CREATE TABLE templates (
    template_id VARCHAR PRIMARY KEY,
    template    VARCHAR NOT NULL,
    command     VARCHAR NOT NULL,
    tables      VARCHAR[] NOT NULL,
    parsed      BOOLEAN NOT NULL
);
CREATE TABLE links (
    source_id     INTEGER NOT NULL,
    line          BIGINT NOT NULL,
    seq           INTEGER NOT NULL,
    req_source_id INTEGER NOT NULL,
    req_line      BIGINT NOT NULL,
    req_seq       INTEGER NOT NULL,
    PRIMARY KEY (source_id, line, seq)
);
"""

# Version 2: requests, statements and links lose their PRIMARY KEY constraints. DuckDB keeps the
# index of a key in memory, and the rows of an open transaction too, so a multi-million-line file grew
# the ingest's memory with its size. Uniqueness of (source_id, line, seq) holds by construction (ingest
# numbers records per file; join links only unlinked statements).
_V2_TABLES = {
    "requests": """(
    source_id  INTEGER NOT NULL,
    line       BIGINT NOT NULL,
    seq        INTEGER NOT NULL,
    request_id VARCHAR,
    trace_id   VARCHAR,
    started_at TIMESTAMP NOT NULL,
    elapsed_ms DOUBLE NOT NULL,
    method     VARCHAR,
    route      VARCHAR NOT NULL,
    path       VARCHAR,
    status     INTEGER
)""",
    "statements": """(
    source_id   INTEGER NOT NULL,
    line        BIGINT NOT NULL,
    seq         INTEGER NOT NULL,
    started_at  TIMESTAMP NOT NULL,
    duration_ms DOUBLE,
    rows        BIGINT,
    template_id VARCHAR NOT NULL,
    param_hash  UBIGINT,
    request_id  VARCHAR,
    trace_id    VARCHAR,
    session     VARCHAR,
    db_user     VARCHAR,
    db_name     VARCHAR,
    error       VARCHAR,
    raw_sql     VARCHAR
)""",
    "links": """(
    source_id     INTEGER NOT NULL,
    line          BIGINT NOT NULL,
    seq           INTEGER NOT NULL,
    req_source_id INTEGER NOT NULL,
    req_line      BIGINT NOT NULL,
    req_seq       INTEGER NOT NULL
)""",
}


def _v2(con: duckdb.DuckDBPyConnection) -> None:
    """Rebuild the three row tables without primary keys, keeping every row."""
    for table, columns in _V2_TABLES.items():
        con.execute(f"CREATE TABLE {table}_v2 {columns}")
        con.execute(f"INSERT INTO {table}_v2 SELECT * FROM {table}")
        con.execute(f"DROP TABLE {table}")
        con.execute(f"ALTER TABLE {table}_v2 RENAME TO {table}")


MIGRATIONS: list[tuple[int, str, Callable[[duckdb.DuckDBPyConnection], None]]] = [
    (1, "initial schema", lambda con: con.execute(_V1)),
    (2, "no primary keys on requests, statements, links", _v2),
]


def connect(path: str | os.PathLike[str], *, read_only: bool = False) -> duckdb.DuckDBPyConnection:
    """Open (creating if needed) the store at ``path`` and bring its schema up to date.

    Args:
        path: the store file, or ``":memory:"``.
        read_only: open without writing; a store that needs migrating is refused then.

    Returns:
        A DuckDB connection whose tables follow docs/schema.md.
    """
    target = str(path)
    if read_only and target != ":memory:" and not Path(target).exists():
        raise StoreError(
            f"{target}: no such store; create it with `attrib ingest --store {target} ...`"
        )
    try:
        con = duckdb.connect(target, read_only=read_only)
    except duckdb.IOException as exc:
        if "lock" in str(exc).lower():
            raise StoreLockedError(
                f"{target}: another attrib process is using this store; wait for it to finish"
            ) from None
        raise StoreError(f"{target}: cannot open the store ({_first_line(exc)})") from None
    except duckdb.Error as exc:
        raise StoreError(f"{target}: not a DuckDB store ({_first_line(exc)})") from None
    try:
        _migrate(con, target, read_only)
    except BaseException:
        con.close()
        raise
    return con


def schema_version(con: duckdb.DuckDBPyConnection) -> int:
    """Return the schema version recorded in the store (0 for an empty file)."""
    has_meta = con.execute(
        "SELECT count(*) FROM information_schema.tables WHERE table_name = 'meta'"
    ).fetchone()[0]
    if not has_meta:
        return 0
    row = con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
    return int(row[0]) if row else 0


def salt(con: duckdb.DuckDBPyConnection) -> bytes:
    """Return this store's secret salt for parameter hashes."""
    row = con.execute("SELECT value FROM meta WHERE key = 'salt'").fetchone()
    return bytes.fromhex(row[0])


def _migrate(con: duckdb.DuckDBPyConnection, target: str, read_only: bool) -> None:
    current = schema_version(con)
    if current > SCHEMA_VERSION:
        raise StoreVersionError(
            f"{target}: store has schema version {current}, this attrib reads up to "
            f"{SCHEMA_VERSION}; upgrade attrib"
        )
    if current == SCHEMA_VERSION:
        return
    if read_only:
        raise StoreError(f"{target}: store needs upgrading; run any ingest on it first")
    con.execute("BEGIN TRANSACTION")
    try:
        for version, _name, step in MIGRATIONS:
            if version > current:
                step(con)
        if current == 0:
            con.execute(
                "INSERT INTO meta VALUES ('salt', ?), ('schema_version', ?)",
                [os.environ.get("ATTRIB_SALT") or secrets.token_hex(16), str(SCHEMA_VERSION)],
            )
        else:
            con.execute(
                "UPDATE meta SET value = ? WHERE key = 'schema_version'", [str(SCHEMA_VERSION)]
            )
        con.execute("COMMIT")
    except BaseException as exc:
        try:
            con.execute("ROLLBACK")
        except duckdb.TransactionException:
            pass  # a failed COMMIT (full disk) has ended the transaction already
        if isinstance(exc, duckdb.Error):
            raise StoreError(
                f"{target}: cannot create or upgrade the store ({_first_line(exc)}); "
                "nothing was changed"
            ) from exc
        raise


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__
