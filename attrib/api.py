"""The Python API: a Store object whose methods return pandas DataFrames.

Every CLI command calls one method here; the logic lives in the stage modules
(ingest, join, coverage, attribute, nplus1, ...).
"""

from __future__ import annotations

import os

import duckdb

from attrib import store as _store


class Store:
    """An attrib store (a DuckDB file) and the analyses over it.

    Args:
        path: the store file (created when missing unless ``read_only``), or ``":memory:"``.
        read_only: open without writing, so several readers can share the file.
    """

    def __init__(self, path: str | os.PathLike[str], *, read_only: bool = False) -> None:
        self.path = str(path)
        self.con: duckdb.DuckDBPyConnection = _store.connect(path, read_only=read_only)

    @property
    def schema_version(self) -> int:
        """The schema version recorded in the store."""
        return _store.schema_version(self.con)

    def close(self) -> None:
        """Close the store."""
        self.con.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # Analyses are added below, one method per CLI command.


def open(path: str | os.PathLike[str], *, read_only: bool = False) -> Store:  # noqa: A001
    """Open (or create) the store at ``path``; see :class:`Store`."""
    return Store(path, read_only=read_only)
