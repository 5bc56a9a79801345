"""N+1 loops and redundant repeats on hand-built stores with planted patterns.

The "trips" store (invented for these tests: a trip planner), route /trips/{id}, four requests:

  request  first statement       then
  T1       P (trip), rows 3      L x3 (different params), then G x3 (same params)
  T2       P, rows 4             L x3
  T3       X (other template)    L x3
  T4       P, rows unknown       L x4

Call j of L (1-based) returns j rows and lasts 0.5 + 0.1 j ms, so its Theil-Sen line has intercept
0.5 ms (the fixed cost) and slope 0.1 ms per row. L calls are 0.5 ms apart (next start - previous
end) in T1-T3 and 1.5 ms apart in T4. G calls last 0.2 ms, 0.1 ms apart.
"""

from __future__ import annotations

import math
from datetime import datetime, timedelta

import networkx as nx
import pandas as pd
import pytest

from attrib import nplus1
from attrib.errors import UsageError
from tests.test_attribute import fill_huts

T0 = datetime(2026, 6, 1, 9, 0, 0)


def _insert_trips(con) -> None:
    requests, statements, links = [], [], []
    line = 0

    def stmt(req: int, at_ms: float, dur: float | None, rows, template: str, param) -> float:
        nonlocal line
        line += 1
        start = T0 + timedelta(minutes=req, microseconds=round(at_ms * 1000))
        statements.append((2, line, 0, start, dur, rows, template, param))
        links.append((2, line, 0, 1, req, 0))
        return at_ms + (dur or 0)

    plan = {1: ("P", 3, 3, 0.5), 2: ("P", 4, 3, 0.5), 3: ("X", 7, 3, 0.5), 4: ("P", None, 4, 1.5)}
    for req, (first, first_rows, loops, gap) in plan.items():
        requests.append((1, req, 0, f"T{req}", None, T0 + timedelta(minutes=req), 50.0, "GET",
                         "/trips/{id}", None, 200))  # fmt: skip
        end = stmt(req, 0.0, 2.0, first_rows, first, 100 + req)
        at = end + 1.0
        for j in range(1, loops + 1):
            end = stmt(req, at, 0.5 + 0.1 * j, j, "L", 1000 * req + j)
            at = end + gap
        if req == 1:
            at = end + 0.1
            for _ in range(3):
                end = stmt(req, at, 0.2, 1, "G", 77)
                at = end + 0.1
    con.executemany("INSERT INTO requests VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", requests)
    con.executemany(
        "INSERT INTO statements (source_id, line, seq, started_at, duration_ms, rows, template_id,"
        " param_hash) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
        statements,
    )
    con.executemany("INSERT INTO links VALUES (?, ?, ?, ?, ?, ?)", links)
    con.execute(
        "INSERT INTO templates VALUES ('P', 'SELECT * FROM trips WHERE id = ?', 'SELECT', ['trips'],"
        " true), ('L', 'SELECT * FROM legs WHERE trip_id = ?', 'SELECT', ['legs'], true),"
        " ('G', 'SELECT v FROM prefs WHERE k = ?', 'SELECT', ['prefs'], true),"
        " ('X', 'SELECT * FROM maps WHERE id = ?', 'SELECT', ['maps'], true)"
    )


@pytest.fixture
def trips(con):
    _insert_trips(con)
    return con


def _finding(df: pd.DataFrame, child: str, kind: str) -> dict:
    rows = df[(df["child_template_id"] == child) & (df["kind"] == kind)]
    assert len(rows) == 1
    return rows.iloc[0].to_dict()


def test_find_planted_loop_every_column(trips):
    df = nplus1.find(trips)
    assert list(df.columns) == nplus1.NPLUS1_COLUMNS
    assert list(zip(df["child_template_id"], df["kind"], strict=True)) == [
        ("L", "n_plus_one"),  # saving 9 ms
        ("G", "redundant"),  # saving 0.6 ms
    ]
    loop = _finding(df, "L", "n_plus_one")
    expected = {
        "route": "/trips/{id}",
        "child_template": "SELECT * FROM legs WHERE trip_id = ?",
        "parent_template_id": "P",  # right before the first L in T1, T2, T4; X only in T3
        "parent_template": "SELECT * FROM trips WHERE id = ?",
        "requests": 4,
        "repeats_mean": (3 + 3 + 3 + 4) / 4,
        "repeats_max": 4,
        # P's rows known in T1 (3 = 3 calls, a match) and T2 (4 != 3); unknown in T4
        "parent_rows_match_share": 0.5,
        # beyond the first call: 0.7 + 0.8 in T1-T3, 0.7 + 0.8 + 0.9 in T4
        "wasted_ms_total": 3 * 1.5 + 2.4,
        "fixed_cost_ms": 0.5,  # Theil-Sen intercept of 0.5 + 0.1 × rows
        "gap_ms_median": 0.5,  # per-request mean gaps 0.5, 0.5, 0.5, 1.5
        # (3-1) + (3-1) + (3-1) + (4-1) = 9 extra calls × (0.5 fixed + 0.5 gap)
        "saving_ms_estimate": 9.0,
    }
    for column, value in expected.items():
        got = loop[column]
        assert got == (pytest.approx(value) if isinstance(value, float) else value), column


def test_find_redundant_repeats_every_column(trips):
    rep = _finding(nplus1.find(trips), "G", "redundant")
    assert rep["parent_template_id"] == "L"  # the last L call precedes the first G
    assert rep["child_template"] == "SELECT v FROM prefs WHERE k = ?"
    assert (rep["requests"], rep["repeats_mean"], rep["repeats_max"]) == (1, 3.0, 3)
    assert rep["parent_rows_match_share"] == 1.0  # that L call returned 3 rows, G ran 3 times
    assert rep["wasted_ms_total"] == pytest.approx(0.4)
    assert math.isnan(rep["fixed_cost_ms"])  # a cache drops whole calls; no fit needed
    assert rep["gap_ms_median"] == pytest.approx(0.1)
    assert rep["saving_ms_estimate"] == pytest.approx(0.4 + 2 * 0.1)


def test_find_min_repeats_threshold_keeps_only_longer_runs(trips):
    df = nplus1.find(trips, min_repeats=4)
    assert len(df) == 1
    loop = df.iloc[0]
    # only T4 (4 calls): parent P with unknown rows; 3 extra calls × (0.5 fixed + 1.5 gap)
    assert (loop["child_template_id"], loop["requests"], loop["repeats_max"]) == ("L", 1, 4)
    assert loop["parent_template_id"] == "P" and math.isnan(loop["parent_rows_match_share"])
    assert loop["gap_ms_median"] == pytest.approx(1.5)
    assert loop["saving_ms_estimate"] == pytest.approx(3 * (0.5 + 1.5))


def test_find_min_repeats_below_two_is_a_usage_error(trips):
    with pytest.raises(UsageError, match="at least 2"):
        nplus1.find(trips, min_repeats=1)


def test_find_since_until_filter_on_request_start(trips):
    # T2 starts at 09:02, T3 at 09:03: only they remain, parent P (T2) and X (T3) tie 1-1 and
    # the smaller template id wins: P.
    df = nplus1.find(trips, since=datetime(2026, 6, 1, 9, 2), until=datetime(2026, 6, 1, 9, 4))
    loop = _finding(df, "L", "n_plus_one")
    assert loop["requests"] == 2 and loop["parent_template_id"] == "P"
    assert loop["parent_rows_match_share"] == 0.0  # T2: P returned 4 rows, L ran 3 times
    assert "G" not in set(df["child_template_id"])


def test_find_route_glob_and_exact(trips):
    assert len(nplus1.find(trips, route="/trips/*")) == 2
    assert nplus1.find(trips, route="/trips/*", exact_route=True).empty
    assert nplus1.find(trips, route="/other").empty


def test_find_top_keeps_largest_saving(trips):
    assert list(nplus1.find(trips, top=1)["child_template_id"]) == ["L"]


def test_find_on_huts_store_separates_loop_and_repeat(con):
    # See tests/test_attribute.py: R1 runs b three times with params 11, 12, 13 after h (3 rows);
    # R3 runs c three times with param 7 after s (10 rows), the third with no duration.
    fill_huts(con)
    df = nplus1.find(con)
    assert list(zip(df["route"], df["kind"], df["child_template_id"], strict=True)) == [
        ("/huts/{id}", "n_plus_one", "b"),
        ("/search", "redundant", "c"),
    ]
    loop, rep = df.iloc[0], df.iloc[1]
    # b: durations 2, 2, 2, 3, 3 with 1 row each: constant rows -> fixed cost = median = 2 ms;
    # gaps 1 ms; saving 2 × (2 + 1) = 6; wasted 2 + 2
    assert loop["parent_template_id"] == "h" and loop["parent_rows_match_share"] == 1.0
    assert (loop["fixed_cost_ms"], loop["gap_ms_median"]) == (2.0, pytest.approx(1.0))
    assert loop["wasted_ms_total"] == 4.0 and loop["saving_ms_estimate"] == pytest.approx(6.0)
    # c: wasted 1 + NULL = 1; gaps (10 - 6) - (1 + 1) = 2 over 2 gaps = 1; saving 1 + 2 × 1
    assert rep["parent_template_id"] == "s" and rep["parent_rows_match_share"] == 0.0
    assert rep["wasted_ms_total"] == 1.0 and rep["saving_ms_estimate"] == pytest.approx(3.0)


def test_find_on_huts_store_with_two_repeats_adds_second_request(con):
    fill_huts(con)
    loop = _finding(nplus1.find(con, min_repeats=2), "b", "n_plus_one")
    # R1 (3 calls after h with 3 rows) and R2 (2 calls after h with 2 rows): both match
    assert (loop["requests"], loop["repeats_mean"], loop["repeats_max"]) == (2, 2.5, 3)
    assert loop["parent_rows_match_share"] == 1.0 and loop["wasted_ms_total"] == 7.0
    assert loop["saving_ms_estimate"] == pytest.approx(3 * (2 + 1))


def test_find_null_param_hash_counts_as_its_own_value(con):
    con.execute(
        "INSERT INTO requests VALUES (1, 1, 0, 'a', NULL, '2026-06-01 09:00:00', 9, 'GET', '/n',"
        " NULL, 200)"
    )
    rows = [(i, "A", None) for i in range(1, 4)]  # A: NULL, NULL, NULL -> same params
    rows += [(4, "B", None), (5, "B", 5), (6, "B", 5)]  # B: NULL, 5, 5 -> two parameter sets
    for line, tpl, ph in rows:
        con.execute(
            "INSERT INTO statements (source_id, line, seq, started_at, duration_ms, template_id,"
            " param_hash) VALUES (2, ?, 0, TIMESTAMP '2026-06-01 09:00:00' + to_milliseconds(?),"
            " 1, ?, ?)",
            [line, line * 2, tpl, ph],
        )
        con.execute("INSERT INTO links VALUES (2, ?, 0, 1, 1, 0)", [line])
    df = nplus1.find(con)
    kinds = dict(zip(df["child_template_id"], df["kind"], strict=True))
    assert kinds == {"A": "redundant", "B": "n_plus_one"}
    assert df["child_template"].isna().all()  # no templates rows: names stay empty


def test_find_empty_store_gives_empty_listing(con):
    df = nplus1.find(con)
    assert df.empty and list(df.columns) == nplus1.NPLUS1_COLUMNS


def test_parent_graphs_weights_edges_by_requests_and_kind():
    edges = pd.DataFrame(
        {
            "route": ["/a", "/a", "/a"],
            "parent_template_id": ["p", None, "p"],
            "child_template_id": ["c", "c", "c"],
            "kind": ["n_plus_one", "n_plus_one", "redundant"],
            "requests": [5, 7, 2],
        }
    )
    g = nplus1.parent_graphs(edges)["/a"]
    assert isinstance(g, nx.DiGraph)
    assert g["p"]["c"] == {"weight": 7, "n_plus_one": 5, "redundant": 2}
    assert g[nplus1.START]["c"]["weight"] == 7
    # most often the loop starts the request: no parent
    assert nplus1.pick_parent(g, "c", "n_plus_one") is None
    assert nplus1.pick_parent(g, "c", "redundant") == "p"


def test_pick_parent_breaks_ties_by_total_weight_then_id():
    g = nx.DiGraph()
    g.add_edge("b", "c", weight=5, n_plus_one=2)
    g.add_edge("a", "c", weight=2, n_plus_one=2)
    g.add_edge("z", "c", weight=5, n_plus_one=2)
    assert nplus1.pick_parent(g, "c", "n_plus_one") == "b"
    assert nplus1.pick_parent(nx.DiGraph([("x", "y")]), "missing", "n_plus_one") is None


def test_fixed_costs_sample_is_bounded_and_deterministic(trips):
    first = nplus1.fixed_costs(trips, ["L", "G", "nothing"], sample=5)
    again = nplus1.fixed_costs(trips, ["L", "G", "nothing"], sample=5)
    assert first == again
    assert first["L"].n == 5 and first["L"].method == "theil-sen"
    assert first["L"].fixed_ms == pytest.approx(0.5)  # any 5 points of an exact line
    assert first["G"].method == "median" and first["G"].fixed_ms == pytest.approx(0.2)
    assert math.isnan(first["nothing"].fixed_ms)
    assert nplus1.fixed_costs(trips, []) == {}


def test_find_with_positions_too_wide_to_pack_uses_struct_order(con):
    # A statement at seq 70000 does not fit the packed HUGEINT order key (16 bits for seq), so the
    # order falls back to a STRUCT; the findings must not change.
    fill_huts(con)
    assert "HUGEINT" in nplus1._order_key(con)
    packed = nplus1.find(con)
    con.execute(
        "INSERT INTO statements (source_id, line, seq, started_at, duration_ms, template_id)"
        " VALUES (2, 99, 70000, '2026-05-04 11:00:00', 1, 'zz')"
    )
    assert nplus1._order_key(con).startswith("{{")
    pd.testing.assert_frame_equal(nplus1.find(con), packed)


def test_find_parent_survives_millisecond_log_times_that_reorder_by_start(tmp_path):
    """PostgreSQL stamps the END of a statement in milliseconds; start = end - duration can put a
    later statement before an earlier one (seen on real PostgreSQL 15 output). Log order wins."""
    import attrib
    from fingerprints import fingerprint

    tag = " /*request_id='r1'*/"
    bunks = "SELECT id FROM bunks WHERE hut_id = 4"
    per_bunk = "SELECT count(*) FROM bookings WHERE bunk_id = {}"
    lines = [
        f"2026-11-30 09:00:00.005 UTC [77] app@huts LOG:  duration: 0.100 ms  statement: {bunks}{tag}",
        *(
            f"2026-11-30 09:00:00.00{5 + i} UTC [77] app@huts LOG:  duration: 0.300 ms  "
            f"statement: {per_bunk.format(i)}{tag}"
            for i in range(3)
        ),
    ]
    (tmp_path / "pg.log").write_text("\n".join(lines) + "\n")
    (tmp_path / "req.jsonl").write_text(
        '{"timestamp": "2026-11-30T09:00:00.010Z", "request_id": "r1", "method": "GET", '
        '"route": "/huts/{id}/bunks", "path": "/huts/4/bunks", "status": 200, "elapsed_ms": 9}\n'
    )
    with attrib.open(tmp_path / "s.duckdb") as s:
        s.ingest(requests=[tmp_path / "req.jsonl"], queries=[tmp_path / "pg.log"])
        found = s.nplus1()
    assert len(found) == 1
    assert found.iloc[0]["child_template_id"] == fingerprint(per_bunk.format(1)).id
    assert found.iloc[0]["parent_template_id"] == fingerprint(bunks).id
