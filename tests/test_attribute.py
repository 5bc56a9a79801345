"""Route and template rankings on a small hand-built store; every expected value is worked out below.

The store (invented for these tests: a mountain-hut booking site):

requests (source 1)         route       started      elapsed
  R1 line 1                 /huts/{id}  10:00:00     100 ms
  R2 line 2                 /huts/{id}  10:00:01      50 ms
  R3 line 3                 /search     10:00:02      20 ms
  R4 line 4                 /search     10:00:03      10 ms   (no statements)

statements (source 2)  request  template  start (s)  duration  rows  param_hash
  line 1               R1       h         00.000     4         3     1
  line 2               R1       b         00.010     2         1     11
  line 3               R1       b         00.013     2         1     12
  line 4               R1       b         00.016     2         1     13
  line 5               R1       c         00.020     1         1     7
  line 6               R2       h         01.000     6         2     2
  line 7               R2       b         01.010     3         1     21
  line 8               R2       b         01.014     3         1     22
  line 9               R3       s         02.000     5         10    31
  line 10              R3       c         02.006     1         1     7
  line 11              R3       c         02.008     1         1     7
  line 12              R3       c         02.010     NULL      NULL  7
  line 13              -        h         05.000     8         1     3     (unlinked)

Per request: R1 5 queries, 11 ms, 3 templates; R2 3 queries, 12 ms, 2 templates; R3 4 queries,
7 ms (NULL counts 0), 2 templates; R4 0 queries. All statements: 11 + 12 + 7 + 8 = 38 ms.
"""

from __future__ import annotations

from datetime import datetime

import numpy as np
import pandas as pd
import pytest

from attrib import attribute
from attrib.attribute import NO_REQUEST, ROUTE_COLUMNS, TEMPLATE_COLUMNS
from attrib.errors import UsageError

HUTS_SQL = """
INSERT INTO requests VALUES
 (1, 1, 0, 'R1', NULL, '2026-05-04 10:00:00', 100, 'GET', '/huts/{id}', '/huts/7', 200),
 (1, 2, 0, 'R2', NULL, '2026-05-04 10:00:01', 50, 'GET', '/huts/{id}', '/huts/9', 200),
 (1, 3, 0, 'R3', NULL, '2026-05-04 10:00:02', 20, 'GET', '/search', '/search', 200),
 (1, 4, 0, 'R4', NULL, '2026-05-04 10:00:03', 10, 'GET', '/search', '/search', 200);
INSERT INTO templates VALUES
 ('h', 'SELECT * FROM huts WHERE id = ?', 'SELECT', ['huts'], true),
 ('b', 'SELECT * FROM beds WHERE hut_id = ?', 'SELECT', ['beds'], true),
 ('c', 'SELECT value FROM settings WHERE key = ?', 'SELECT', ['settings'], true),
 ('s', 'SELECT * FROM huts WHERE name LIKE ?', 'SELECT', ['huts'], true);
INSERT INTO statements (source_id, line, seq, started_at, duration_ms, rows, template_id, param_hash)
VALUES
 (2, 1, 0, '2026-05-04 10:00:00.000', 4, 3, 'h', 1),
 (2, 2, 0, '2026-05-04 10:00:00.010', 2, 1, 'b', 11),
 (2, 3, 0, '2026-05-04 10:00:00.013', 2, 1, 'b', 12),
 (2, 4, 0, '2026-05-04 10:00:00.016', 2, 1, 'b', 13),
 (2, 5, 0, '2026-05-04 10:00:00.020', 1, 1, 'c', 7),
 (2, 6, 0, '2026-05-04 10:00:01.000', 6, 2, 'h', 2),
 (2, 7, 0, '2026-05-04 10:00:01.010', 3, 1, 'b', 21),
 (2, 8, 0, '2026-05-04 10:00:01.014', 3, 1, 'b', 22),
 (2, 9, 0, '2026-05-04 10:00:02.000', 5, 10, 's', 31),
 (2, 10, 0, '2026-05-04 10:00:02.006', 1, 1, 'c', 7),
 (2, 11, 0, '2026-05-04 10:00:02.008', 1, 1, 'c', 7),
 (2, 12, 0, '2026-05-04 10:00:02.010', NULL, NULL, 'c', 7),
 (2, 13, 0, '2026-05-04 10:00:05.000', 8, 1, 'h', 3);
INSERT INTO links VALUES
 (2, 1, 0, 1, 1, 0), (2, 2, 0, 1, 1, 0), (2, 3, 0, 1, 1, 0), (2, 4, 0, 1, 1, 0), (2, 5, 0, 1, 1, 0),
 (2, 6, 0, 1, 2, 0), (2, 7, 0, 1, 2, 0), (2, 8, 0, 1, 2, 0),
 (2, 9, 0, 1, 3, 0), (2, 10, 0, 1, 3, 0), (2, 11, 0, 1, 3, 0), (2, 12, 0, 1, 3, 0);
"""


def fill_huts(con) -> None:
    """Fill a fresh store with the rows described in this module's docstring."""
    con.execute(HUTS_SQL)


@pytest.fixture
def huts(con):
    fill_huts(con)
    return con


def _row(df: pd.DataFrame, key: str, value: str) -> dict:
    rows = df[df[key] == value]
    assert len(rows) == 1, f"{key}={value!r}: {len(rows)} rows"
    return rows.iloc[0].to_dict()


def _check(row: dict, expected: dict) -> None:
    for column, value in expected.items():
        if isinstance(value, float):
            assert row[column] == pytest.approx(value, abs=1e-9), column
        else:
            assert row[column] == value, column


# --- routes -------------------------------------------------------------------------------------


def test_routes_every_column_matches_hand_computation(huts):
    df = attribute.routes(huts)
    assert list(df.columns) == ROUTE_COLUMNS
    assert list(df["route"]) == ["/huts/{id}", "/search"]  # db_share 23/38 before 7/38
    # /huts/{id}: R1 (5 queries, 11 ms, 100 ms elapsed, 3 templates), R2 (3, 12 ms, 50 ms, 2).
    # Type-7 percentiles of two values a <= b: p = a + q * (b - a).
    _check(
        _row(df, "route", "/huts/{id}"),
        {
            "requests": 2,
            "queries_per_request_mean": 4.0,
            "queries_per_request_p50": 4.0,
            "queries_per_request_p95": 3 + 0.95 * 2,  # 4.9
            "queries_per_request_max": 5,
            "db_ms_total": 23.0,
            "db_share": 23 / 38,
            "db_ms_per_request_p50": 11.5,
            "db_ms_per_request_p95": 11 + 0.95 * 1,
            "db_fraction_p50": (0.11 + 0.24) / 2,  # 11/100 and 12/50
            "db_fraction_aggregate": 23 / 150,
            "elapsed_ms_p50": 75.0,
            "elapsed_ms_p95": 50 + 0.95 * 50,
            "elapsed_ms_p99": 50 + 0.99 * 50,
            "distinct_templates_per_request_mean": 2.5,
            "repeat_fraction": (8 - 5) / 8,  # 8 statements, 3 + 2 distinct per request
        },
    )
    # /search: R3 (4 queries, 7 ms, 20 ms, 2 templates), R4 (no statements: 0 queries, 0 ms).
    _check(
        _row(df, "route", "/search"),
        {
            "requests": 2,
            "queries_per_request_mean": 2.0,
            "queries_per_request_p50": 2.0,
            "queries_per_request_p95": 0.95 * 4,
            "queries_per_request_max": 4,
            "db_ms_total": 7.0,
            "db_share": 7 / 38,
            "db_ms_per_request_p50": 3.5,
            "db_ms_per_request_p95": 0.95 * 7,
            "db_fraction_p50": (0.0 + 0.35) / 2,  # 0/10 and 7/20
            "db_fraction_aggregate": 7 / 30,
            "elapsed_ms_p50": 15.0,
            "elapsed_ms_p95": 10 + 0.95 * 10,
            "elapsed_ms_p99": 10 + 0.99 * 10,
            "distinct_templates_per_request_mean": 1.0,
            "repeat_fraction": (4 - 2) / 4,
        },
    )


def test_routes_since_filters_requests_and_share_denominator(huts):
    # From 10:00:01: R2, R3, R4; statements from then on: 12 + 7 + 8 (unlinked) = 27 ms.
    df = attribute.routes(huts, since=datetime(2026, 5, 4, 10, 0, 1))
    huts_row = _row(df, "route", "/huts/{id}")
    _check(huts_row, {"requests": 1, "db_ms_total": 12.0, "db_share": 12 / 27})


def test_routes_until_is_exclusive(huts):
    df = attribute.routes(huts, until=datetime(2026, 5, 4, 10, 0, 1))
    assert list(df["route"]) == ["/huts/{id}"]
    # Only R1; statements before 10:00:01 are lines 1-5: 11 ms.
    _check(_row(df, "route", "/huts/{id}"), {"requests": 1, "db_share": 1.0})


def test_routes_route_glob_keeps_matching_routes(huts):
    assert list(attribute.routes(huts, route="/hut*")["route"]) == ["/huts/{id}"]
    assert list(attribute.routes(huts, route="/search")["route"]) == ["/search"]
    assert attribute.routes(huts, route="/nothing*").empty


def test_routes_sort_and_top_reorder_and_cut(huts):
    df = attribute.routes(huts, sort="elapsed_ms_p50")  # 75 before 15
    assert list(df["route"]) == ["/huts/{id}", "/search"]
    df = attribute.routes(huts, sort="repeat_fraction")  # 0.5 before 0.375
    assert list(df["route"]) == ["/search", "/huts/{id}"]
    df = attribute.routes(huts, sort="repeat_fraction", reverse=True, top=1)
    assert list(df["route"]) == ["/huts/{id}"]
    df = attribute.routes(huts, sort="route")  # text sorts A-Z
    assert list(df["route"]) == ["/huts/{id}", "/search"]


def test_routes_unknown_sort_column_is_a_usage_error(huts):
    with pytest.raises(UsageError, match="cannot sort by 'nope'"):
        attribute.routes(huts, sort="nope")


def test_routes_since_after_until_is_a_usage_error(huts):
    with pytest.raises(UsageError, match="not before"):
        attribute.routes(huts, since=datetime(2026, 5, 5), until=datetime(2026, 5, 4))


def test_routes_empty_store_gives_empty_listing(con):
    df = attribute.routes(con)
    assert df.empty and list(df.columns) == ROUTE_COLUMNS


def test_routes_percentiles_match_numpy_linear_on_many_requests(con):
    # numpy.percentile default method "linear" is Hyndman & Fan (1996) type 7 (NumPy documentation,
    # numpy.percentile); DuckDB's quantile_cont must agree on an irregular sample.
    rng = np.random.default_rng(7)
    elapsed = rng.lognormal(3, 1, 97).round(3)
    queries = rng.integers(0, 9, 97)
    rows = [
        (1, i, 0, f"q{i}", None, f"2026-05-04 10:00:{i % 60:02d}", float(e), "GET", "/x", None, 200)
        for i, e in enumerate(elapsed)
    ]
    con.executemany("INSERT INTO requests VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", rows)
    owner = np.repeat(np.arange(len(queries)), queries)  # statement k belongs to request owner[k]
    calls = pd.DataFrame({"line": np.arange(1, len(owner) + 1), "req": owner})  # noqa: F841
    con.execute(
        "INSERT INTO statements (source_id, line, seq, started_at, duration_ms, template_id)"
        " SELECT 2, line, 0, TIMESTAMP '2026-05-04 10:00:00', 1, 't' FROM calls"
    )
    con.execute("INSERT INTO links SELECT 2, line, 0, 1, req, 0 FROM calls")
    row = attribute.routes(con).iloc[0]
    for q in (50, 95, 99):
        assert row[f"elapsed_ms_p{q}"] == pytest.approx(np.percentile(elapsed, q))
    assert row["queries_per_request_p95"] == pytest.approx(np.percentile(queries, 95))
    assert row["queries_per_request_mean"] == pytest.approx(queries.mean())


# --- templates ----------------------------------------------------------------------------------


def test_templates_every_column_matches_hand_computation(huts):
    df = attribute.templates(huts)
    assert list(df.columns) == TEMPLATE_COLUMNS
    assert list(df["template_id"]) == ["h", "b", "s", "c"]  # total 18, 12, 5, 3 ms
    ts = pd.Timestamp
    # h: lines 1, 6 (linked, R1 and R2) and 13 (unlinked): durations 4, 6, 8; rows 3, 2, 1.
    # Sorted durations [4, 6, 8]: p95 rank 2 * 0.95 = 1.9 -> 6 + 0.9 * 2; p99 -> 6 + 0.98 * 2.
    _check(
        _row(df, "template_id", "h"),
        {
            "template": "SELECT * FROM huts WHERE id = ?",
            "calls": 3,
            "calls_per_request": 1.0,  # 2 linked calls in 2 requests
            "total_ms": 18.0,
            "share": 18 / 38,
            "mean_ms": 6.0,
            "p50_ms": 6.0,
            "p95_ms": 7.8,
            "p99_ms": 7.96,
            "rows_per_call": 2.0,
            "routes": [
                {"route": "/huts/{id}", "share": pytest.approx(10 / 18)},
                {"route": NO_REQUEST, "share": pytest.approx(8 / 18)},
            ],
            "first_seen": ts("2026-05-04 10:00:00"),
            "last_seen": ts("2026-05-04 10:00:05"),
        },
    )
    # b: 3 calls in R1, 2 in R2; durations [2, 2, 2, 3, 3]: p95 rank 3.8 -> 3.
    _check(
        _row(df, "template_id", "b"),
        {
            "calls": 5,
            "calls_per_request": 2.5,
            "total_ms": 12.0,
            "share": 12 / 38,
            "mean_ms": 2.4,
            "p50_ms": 2.0,
            "p95_ms": 3.0,
            "p99_ms": 3.0,
            "rows_per_call": 1.0,
            "routes": [{"route": "/huts/{id}", "share": 1.0}],
            "first_seen": ts("2026-05-04 10:00:00.010"),
            "last_seen": ts("2026-05-04 10:00:01.014"),
        },
    )
    # c: 1 call in R1, 3 in R3 (one with NULL duration and rows: a call, but no time).
    _check(
        _row(df, "template_id", "c"),
        {
            "calls": 4,
            "calls_per_request": 2.0,
            "total_ms": 3.0,
            "share": 3 / 38,
            "mean_ms": 1.0,
            "p50_ms": 1.0,
            "p95_ms": 1.0,
            "rows_per_call": 1.0,
            "routes": [
                {"route": "/search", "share": pytest.approx(2 / 3)},
                {"route": "/huts/{id}", "share": pytest.approx(1 / 3)},
            ],
            "first_seen": ts("2026-05-04 10:00:00.020"),
            "last_seen": ts("2026-05-04 10:00:02.010"),
        },
    )
    _check(
        _row(df, "template_id", "s"),
        {"calls": 1, "calls_per_request": 1.0, "total_ms": 5.0, "share": 5 / 38, "p99_ms": 5.0},
    )


def test_templates_only_unlinked_calls_have_no_calls_per_request(con):
    fill_huts(con)
    df = attribute.templates(con, since=datetime(2026, 5, 4, 10, 0, 4))
    row = _row(df, "template_id", "h")  # only line 13, unlinked
    assert row["calls"] == 1 and np.isnan(row["calls_per_request"])
    assert row["routes"] == [{"route": NO_REQUEST, "share": 1.0}]


def test_templates_as_text_gives_compact_routes(huts):
    text = attribute.templates_as_text(attribute.templates(huts))
    assert _row(text, "template_id", "h")["routes"] == "/huts/{id} 56%, (no request) 44%"


def test_templates_sort_top_and_empty(huts, con):
    df = attribute.templates(huts, sort="calls", top=2)
    assert list(df["template_id"]) == ["b", "c"]  # 5 and 4 calls
    assert attribute.templates(huts, since=datetime(2027, 1, 1)).empty


def test_routes_text_marks_small_shares():
    assert attribute.routes_text([{"route": "/a", "share": 0.996}, {"route": "/b", "share": 0.004}])
    assert attribute.routes_text([{"route": "/b", "share": 0.004}]) == "/b <1%"


# --- one route ----------------------------------------------------------------------------------


def test_route_templates_every_column_matches_hand_computation(huts):
    n, df = attribute.route_templates(huts, "/huts/{id}")
    assert n == 2
    assert list(df["template_id"]) == ["b", "h", "c"]  # 12, 10, 1 ms of the route's 23
    _check(
        _row(df, "template_id", "b"),
        {
            "calls": 5,
            "calls_per_request": 2.5,
            "requests_share": 1.0,
            "total_ms": 12.0,
            "share": 12 / 23,
            "mean_ms": 2.4,
            "p50_ms": 2.0,
            "p95_ms": 3.0,
            "rows_per_call": 1.0,
        },
    )
    _check(
        _row(df, "template_id", "h"),
        {
            "calls": 2,
            "calls_per_request": 1.0,
            "requests_share": 1.0,
            "total_ms": 10.0,
            "share": 10 / 23,
            "mean_ms": 5.0,
            "p50_ms": 5.0,
            "p95_ms": 4 + 0.95 * 2,
            "rows_per_call": 2.5,
        },
    )
    _check(
        _row(df, "template_id", "c"),
        {"calls": 1, "calls_per_request": 0.5, "requests_share": 0.5, "share": 1 / 23},
    )


def test_route_detail_holds_templates_and_findings(huts):
    detail = attribute.route_detail(huts, "/huts/{id}")
    assert detail.requests == 2 and len(detail.templates) == 3
    assert list(detail.nplus1["child_template_id"]) == ["b"]  # R1 runs b three times


def test_route_detail_route_is_exact_not_a_pattern(huts):
    with pytest.raises(UsageError, match="no requests for route '/huts/\\*'"):
        attribute.route_detail(huts, "/huts/*")


def test_route_detail_route_with_no_statements_has_empty_listings(huts):
    detail = attribute.route_detail(huts, "/search", since=datetime(2026, 5, 4, 10, 0, 3))
    assert detail.requests == 1 and detail.templates.empty and detail.nplus1.empty


def test_templates_without_recorded_time_share_routes_by_calls(con):
    # Template n: 3 calls with no duration, 2 in R1 (/a) and 1 unlinked: shares by calls 2/3, 1/3.
    con.execute(
        "INSERT INTO requests VALUES (1, 1, 0, 'R1', NULL, '2026-05-04 10:00:00', 5, 'GET', '/a',"
        " NULL, 200)"
    )
    for line in (1, 2, 3):
        con.execute(
            "INSERT INTO statements (source_id, line, seq, started_at, template_id)"
            " VALUES (2, ?, 0, '2026-05-04 10:00:00', 'n')",
            [line],
        )
    con.execute("INSERT INTO links VALUES (2, 1, 0, 1, 1, 0), (2, 2, 0, 1, 1, 0)")
    row = attribute.templates(con).iloc[0]
    assert row["total_ms"] == 0.0 and np.isnan(row["share"]) and row["calls_per_request"] == 2.0
    assert row["routes"] == [
        {"route": "/a", "share": pytest.approx(2 / 3)},
        {"route": NO_REQUEST, "share": pytest.approx(1 / 3)},
    ]


def test_store_methods_return_the_same_listings_as_the_stage_functions():
    import attrib

    s = attrib.open(":memory:")
    fill_huts(s.con)
    pd.testing.assert_frame_equal(s.routes(top=1), attribute.routes(s.con, top=1))
    pd.testing.assert_frame_equal(s.templates(), attribute.templates(s.con))
    detail = s.route("/huts/{id}")
    assert isinstance(detail, attribute.RouteDetail)
    pd.testing.assert_frame_equal(
        detail.templates, attribute.route_templates(s.con, "/huts/{id}")[1]
    )
    assert list(s.nplus1(min_repeats=2)["requests"]) == [2, 1]
    s.close()
