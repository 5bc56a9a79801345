"""Link statements to the requests that issued them (the ``links`` table).

Rules, in order, for each statement not linked yet:

1. its ``request_id`` equals a request's ``request_id`` (request ids are unique in the store: ingest
   rejects duplicates);
2. else its ``trace_id`` equals the ``trace_id`` of exactly one request: that request;
3. else, when several requests share the trace id, the one whose window ``[started_at, started_at +
   elapsed_ms]`` contains the statement's start, the latest-starting one when windows nest (the
   innermost request). When no window contains it, the statement stays unlinked.

Only statements without a link are considered, so requests ingested after their statements still get
them; links once made are never changed.
"""

from __future__ import annotations

import duckdb

_UNLINKED = """NOT EXISTS (SELECT 1 FROM links l
    WHERE l.source_id = s.source_id AND l.line = s.line AND l.seq = s.seq)"""

LINK_BY_REQUEST_ID = f"""
INSERT INTO links
SELECT s.source_id, s.line, s.seq, r.source_id, r.line, r.seq
FROM statements s JOIN requests r ON r.request_id = s.request_id
WHERE s.request_id IS NOT NULL AND {_UNLINKED}
"""

LINK_BY_TRACE_ID = f"""
INSERT INTO links
SELECT source_id, line, seq, req_source_id, req_line, req_seq FROM (
    SELECT s.source_id, s.line, s.seq,
           r.source_id AS req_source_id, r.line AS req_line, r.seq AS req_seq,
           count(*) OVER w AS candidates,
           s.started_at >= r.started_at
             AND s.started_at <= r.started_at
                 + to_microseconds(CAST(r.elapsed_ms * 1000 AS BIGINT)) AS inside,
           row_number() OVER (w ORDER BY inside DESC, r.started_at DESC,
                              r.source_id, r.line, r.seq) AS pick
    FROM statements s JOIN requests r ON r.trace_id = s.trace_id
    WHERE s.trace_id IS NOT NULL AND {_UNLINKED}
    WINDOW w AS (PARTITION BY s.source_id, s.line, s.seq)
)
WHERE pick = 1 AND (candidates = 1 OR inside)
"""


def link(con: duckdb.DuckDBPyConnection) -> int:
    """Link every unlinked statement that can be linked; return how many links were added."""
    con.execute("BEGIN TRANSACTION")
    try:
        by_id = con.execute(LINK_BY_REQUEST_ID).fetchone()[0]
        by_trace = con.execute(LINK_BY_TRACE_ID).fetchone()[0]
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise
    return int(by_id) + int(by_trace)
