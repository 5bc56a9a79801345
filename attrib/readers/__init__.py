"""Log readers, one module per format, and format detection.

Each reader module defines:

- ``NAME``: the format name users pass with ``--format`` (e.g. ``"pg-stderr"``);
- ``KIND``: ``"requests"``, ``"statements"`` or ``"both"``;
- ``sniff(head: list[str]) -> bool``: True when the first lines (decoded, without line ends) look like
  this format;
- ``read(lines: Iterable[tuple[int, str]], options: ReadOptions) -> Iterator[Record]``: the records of
  one file, given ``(line_number, text)`` pairs numbered from 1, text without its line end. See
  :mod:`attrib.records` for the accounting rule every reader keeps.
"""

from __future__ import annotations

import importlib
from types import ModuleType

from attrib.errors import FormatError

# Order matters for detection: the most specific formats first.
_MODULES = {
    "otlp-json": "attrib.readers.otlp",
    "pg-jsonlog": "attrib.readers.pg_jsonlog",
    "pg-csvlog": "attrib.readers.pg_csvlog",
    "pg-stderr": "attrib.readers.pg_stderr",
    "mysql-slow": "attrib.readers.mysql_slow",
    "sql-jsonl": "attrib.readers.sql_jsonl",
    "access-log": "attrib.readers.access_log",
    "requests-jsonl": "attrib.readers.requests_jsonl",
    "requests-csv": "attrib.readers.requests_csv",
}


def formats(kind: str | None = None) -> list[str]:
    """Names of the formats that can be read (for ``kind``: "requests" or "statements")."""
    names = []
    for name in _MODULES:
        module = _load(name)
        if module is None:
            continue
        if kind is None or module.KIND in (kind, "both"):
            names.append(name)
    return names


def get(name: str) -> ModuleType:
    """Return the reader module for a format name, or raise FormatError."""
    module = _load(name) if name in _MODULES else None
    if module is None:
        raise FormatError(f"unknown format {name!r}; known formats: {', '.join(formats())}")
    return module


def detect(head: list[str], kind: str, source: str) -> ModuleType:
    """Pick the reader whose ``sniff`` accepts ``head`` among readers of ``kind``."""
    for name in formats(kind):
        module = get(name)
        if module.sniff(head):
            return module
    option = "--requests-format" if kind == "requests" else "--queries-format"
    raise FormatError(
        f"{source}: cannot tell the log format from its first lines; pass {option} "
        f"(one of: {', '.join(formats(kind))})"
    )


def _load(name: str) -> ModuleType | None:
    try:
        return importlib.import_module(_MODULES[name])
    except ModuleNotFoundError as exc:
        if exc.name == _MODULES[name]:
            return None
        raise
