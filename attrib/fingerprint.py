"""Fingerprints of statements given as text, for `attrib fingerprint` (no store involved)."""

from __future__ import annotations

from collections.abc import Iterable

import pandas as pd

COLUMNS = ["id", "command", "parsed", "template"]


def split_statements(text: str) -> list[str]:
    """Split SQL text on ``;`` outside quotes and comments; blank pieces are dropped.

    >>> split_statements("SELECT ';' FROM t; -- a;b\\nUPDATE t SET x = 1;")
    ["SELECT ';' FROM t", '-- a;b\\nUPDATE t SET x = 1']
    """
    out: list[str] = []
    start = i = 0
    n = len(text)
    while i < n:
        ch = text[i]
        if ch in "'\"`":
            end = i + 1
            while end < n:
                if text[end] == ch:
                    if end + 1 < n and text[end + 1] == ch:  # doubled quote inside the string
                        end += 2
                        continue
                    break
                end += 2 if text[end] == "\\" and ch != '"' else 1
            i = end + 1
        elif text.startswith("--", i):
            end = text.find("\n", i)
            i = n if end < 0 else end + 1
        elif text.startswith("/*", i):
            end = text.find("*/", i + 2)
            i = n if end < 0 else end + 2
        elif ch == ";":
            out.append(text[start:i])
            i += 1
            start = i
        else:
            i += 1
    out.append(text[start:])
    return [piece.strip() for piece in out if piece.strip()]


def statements_from_lines(lines: Iterable[str]) -> list[str]:
    """One statement per non-blank line (line ends removed).

    >>> statements_from_lines(["SELECT 1\\n", "  \\n", "SELECT 2"])
    ['SELECT 1', 'SELECT 2']
    """
    return [line.rstrip("\r\n") for line in lines if line.strip()]


def fingerprint_statements(statements: Iterable[str], dialect: str = "postgres") -> pd.DataFrame:
    """Fingerprint statements: one row per statement, in order, with id, command, parsed, template.

    Args:
        statements: SQL texts.
        dialect: postgres, mysql, sqlite or generic.

    Returns:
        A DataFrame with columns ``id``, ``command``, ``parsed``, ``template`` (no literal values).
    """
    import fingerprints

    sqls = list(statements)
    if not sqls:
        return pd.DataFrame(columns=COLUMNS)
    batch = fingerprints.fingerprint_many(sqls, dialect, with_literals=False)
    rows = []
    for fid in batch.ids:
        fp = batch.templates[fid]
        rows.append((fp.id, fp.command, bool(fp.parsed), fp.template))
    return pd.DataFrame(rows, columns=COLUMNS)
