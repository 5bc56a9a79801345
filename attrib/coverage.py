"""How well statements and requests were linked, and whether the two logs' clocks agree.

All figures are SQL over the store. The clock check compares each linked statement's start with its
request's window ``[started_at, started_at + elapsed_ms]``: with both clocks in step, statements start
inside their request. A warning is raised when the median offset (statement start minus request start)
exceeds ``OFFSET_WARN_MS`` in either direction, or when more than ``OUTSIDE_WARN_SHARE`` of linked
statements start outside their request's window. Both thresholds are common practice, no source: a
request rarely waits a second before its first statement, and a few percent outside is what rounding
of log times (milliseconds, or whole seconds in some logs) can explain.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import duckdb
import pandas as pd

OFFSET_WARN_MS = 1000.0
OUTSIDE_WARN_SHARE = 0.05
EXAMPLES = 5

_LINKED = """(SELECT 1 FROM links l
    WHERE l.source_id = s.source_id AND l.line = s.line AND l.seq = s.seq)"""

_COUNTS = f"""
SELECT
    count(*) AS statements,
    count(*) FILTER (WHERE EXISTS {_LINKED}) AS linked,
    count(*) FILTER (WHERE s.request_id IS NULL AND s.trace_id IS NULL) AS no_id,
    count(*) FILTER (WHERE (s.request_id IS NOT NULL OR s.trace_id IS NOT NULL)
                     AND NOT EXISTS {_LINKED}) AS unmatched
FROM statements s
"""

_REQUESTS = """
SELECT count(*) AS requests,
       count(*) FILTER (WHERE NOT EXISTS (SELECT 1 FROM links l WHERE l.req_source_id = r.source_id
                                          AND l.req_line = r.line AND l.req_seq = r.seq))
FROM requests r
"""

_MISSING_IDS = f"""
SELECT s.request_id, count(*) AS statements, min(s.started_at) AS first_seen
FROM statements s
WHERE s.request_id IS NOT NULL AND NOT EXISTS {_LINKED}
  AND NOT EXISTS (SELECT 1 FROM requests r WHERE r.request_id = s.request_id)
GROUP BY s.request_id
"""

_OFFSETS = """
SELECT
    count(*) AS linked,
    median(epoch_us(s.started_at) - epoch_us(r.started_at)) / 1000.0 AS median_ms,
    avg(CASE WHEN s.started_at < r.started_at THEN 1 ELSE 0 END) AS before_share,
    avg(CASE WHEN epoch_us(s.started_at) > epoch_us(r.started_at) + r.elapsed_ms * 1000
        THEN 1 ELSE 0 END) AS after_share
FROM links l
JOIN statements s USING (source_id, line, seq)
JOIN requests r ON r.source_id = l.req_source_id AND r.line = l.req_line AND r.seq = l.req_seq
"""

_TEMPLATES = f"""
SELECT s.template_id, any_value(t.template) AS template, count(*) AS statements,
       count(*) FILTER (WHERE EXISTS {_LINKED}) AS linked,
       count(*) FILTER (WHERE s.request_id IS NULL AND s.trace_id IS NULL) AS no_id
FROM statements s LEFT JOIN templates t USING (template_id)
GROUP BY s.template_id
"""


@dataclass
class Coverage:
    """The coverage figures of a store.

    ``summary`` has ``metric``/``value`` rows; ``templates`` one row per template (statements, linked,
    linked share, statements with no id); ``no_id`` the templates most frequent among statements that
    carry no request id (background jobs, migrations, ...); ``missing_ids`` a few request ids seen in
    statements but absent from the request log; ``warnings`` plain sentences.
    """

    summary: pd.DataFrame
    templates: pd.DataFrame
    no_id: pd.DataFrame
    missing_ids: pd.DataFrame
    warnings: list[str] = field(default_factory=list)


def share(part: int | float, whole: int | float) -> float | None:
    """``part / whole``, or None when ``whole`` is 0.

    >>> share(1, 4), share(0, 0)
    (0.25, None)
    """
    return float(part) / whole if whole else None


def clock_warnings(median_ms: float | None, outside_share: float | None) -> list[str]:
    """Warnings about the clock offset between the web and database logs.

    >>> clock_warnings(1500.0, 0.01)[0][:40]
    'statements start a median 1500.0 ms afte'
    >>> clock_warnings(3.0, 0.01)
    []
    """
    out = []
    if median_ms is not None and abs(median_ms) > OFFSET_WARN_MS:
        direction = "after" if median_ms > 0 else "before"
        out.append(
            f"statements start a median {abs(median_ms):.1f} ms {direction} their request's start; "
            "the web and database clocks may disagree (check both logs' time zones)"
        )
    if outside_share is not None and outside_share > OUTSIDE_WARN_SHARE:
        out.append(
            f"{outside_share:.1%} of linked statements start outside their request's time window "
            f"(more than {OUTSIDE_WARN_SHARE:.0%}); the clocks or the request durations may be off"
        )
    return out


def coverage(con: duckdb.DuckDBPyConnection, top: int = 10) -> Coverage:
    """Compute the coverage figures of the store behind ``con``.

    Args:
        con: a store connection.
        top: how many templates to list among statements with no request id.

    Returns:
        A :class:`Coverage`.
    """
    statements, linked, no_id, unmatched = con.execute(_COUNTS).fetchone()
    requests, requests_alone = con.execute(_REQUESTS).fetchone()
    missing = con.execute(_MISSING_IDS).df()
    n_linked, median_ms, before, after = con.execute(_OFFSETS).fetchone()
    outside = None if before is None else float(before) + float(after)
    rows = [
        ("statements", statements),
        ("statements linked to a request", linked),
        ("share of statements linked", share(linked, statements)),
        ("statements with no request id", no_id),
        ("share of statements with no request id", share(no_id, statements)),
        ("statements whose id matches no request", unmatched),
        ("requests", requests),
        ("requests with no statements", requests_alone),
        ("request ids in statements but not in the request log", len(missing)),
        ("median statement start minus request start (ms)", _num(median_ms)),
        ("share of linked statements starting before their request", _num(before)),
        ("share of linked statements starting after request end", _num(after)),
    ]
    summary = pd.DataFrame(
        {
            "metric": [name for name, _ in rows],
            "value": pd.Series([_plain(v) for _, v in rows], dtype=object),
        }
    )
    templates = con.execute(_TEMPLATES).df()
    templates["linked_share"] = templates["linked"] / templates["statements"]
    templates = templates[
        ["template_id", "template", "statements", "linked", "linked_share", "no_id"]
    ]
    templates = templates.sort_values(
        ["statements", "template_id"], ascending=[False, True], ignore_index=True
    )
    no_id_top = templates[templates["no_id"] > 0][["template_id", "template", "no_id"]]
    no_id_top = no_id_top.rename(columns={"no_id": "statements"})
    no_id_top = no_id_top.sort_values(
        ["statements", "template_id"], ascending=[False, True], ignore_index=True
    ).head(top)
    no_id_top["share_of_no_id"] = no_id_top["statements"] / no_id if no_id else []
    missing = missing.sort_values(
        ["statements", "request_id"], ascending=[False, True], ignore_index=True
    ).head(EXAMPLES)
    warnings = clock_warnings(_num(median_ms), outside if n_linked else None)
    return Coverage(summary, templates, no_id_top, missing, warnings)


def _plain(value: object) -> int | float | None:
    if value is None:
        return None
    return int(value) if isinstance(value, int) else float(value)  # type: ignore[arg-type]


def _num(value: object) -> float | None:
    return None if value is None else float(value)  # type: ignore[arg-type]
