"""Presentation of listings: a DataFrame as an aligned table, CSV or JSON text."""

from __future__ import annotations

import json
import math
from typing import Any

import pandas as pd

FORMATS = ("table", "csv", "json")


def render(df: pd.DataFrame, fmt: str = "table", *, max_width: int = 60) -> str:
    """Render ``df`` as text.

    Args:
        df: the listing; its column names are the keys of the JSON output.
        fmt: ``"table"`` (aligned, for people), ``"csv"`` or ``"json"`` (a list of objects).
        max_width: longest cell in a table before it is cut with an ellipsis.

    Returns:
        The text, ending with a newline.

    >>> print(render(pd.DataFrame({"route": ["/a"], "requests": [3]})), end="")
    route  requests
    -----  --------
    /a            3
    """
    if fmt == "json":
        return json.dumps(to_records(df), indent=2, ensure_ascii=False) + "\n"
    if fmt == "csv":
        return df.to_csv(index=False, lineterminator="\n")
    if fmt == "table":
        return _table(df, max_width)
    raise ValueError(f"unknown output format {fmt!r}; use one of {', '.join(FORMATS)}")


def to_records(df: pd.DataFrame) -> list[dict[str, Any]]:
    """Rows as JSON-ready dicts: NaN becomes null, timestamps ISO 8601, numpy scalars plain."""
    return [{k: _plain(v) for k, v in row.items()} for row in df.to_dict(orient="records")]


def _plain(value: Any) -> Any:
    if isinstance(value, pd.Timestamp):
        return value.isoformat()
    if hasattr(value, "tolist"):  # numpy scalars and arrays
        value = value.tolist()
    if isinstance(value, list):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, float) and (math.isnan(value) or math.isinf(value)):
        return None
    if value is pd.NaT or value is pd.NA:
        return None
    return value


def _cell(value: Any, max_width: int) -> str:
    value = _plain(value)
    if value is None:
        text = ""
    elif isinstance(value, float):
        text = f"{value:.4g}" if abs(value) < 1e-3 and value != 0 else f"{value:,.2f}"
        text = text.replace(",", "") if abs(value) < 10_000 else text
    elif isinstance(value, list | dict):
        text = json.dumps(value, ensure_ascii=False)
    else:
        text = str(value)
    text = text.replace("\n", " ").replace("\t", " ")
    return text if len(text) <= max_width else text[: max_width - 1] + "…"


def _table(df: pd.DataFrame, max_width: int) -> str:
    if df.empty:
        return "(no rows)\n"
    header = [str(c) for c in df.columns]
    rows = [[_cell(v, max_width) for v in row] for row in df.itertuples(index=False)]
    numeric = [pd.api.types.is_numeric_dtype(df[c]) for c in df.columns]
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(header)]

    def line(cells: list[str]) -> str:
        out = [
            c.rjust(w) if num else c.ljust(w)
            for c, w, num in zip(cells, widths, numeric, strict=True)
        ]
        return "  ".join(out).rstrip()

    parts = [line(header), line(["-" * w for w in widths])]
    parts += [line(r) for r in rows]
    return "\n".join(parts) + "\n"
