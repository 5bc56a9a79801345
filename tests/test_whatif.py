"""What-if projections: scenario parsing, the bootstrap, Amdahl's and Little's laws, closed-form stores.

The stores here are invented fixtures whose answers follow from the model by hand arithmetic (written next
to each assertion); the statistics are checked against scipy and the literature.
"""

from __future__ import annotations

import math
from datetime import datetime, timedelta

import numpy as np
import pandas as pd
import pytest
from scipy import stats as scipy_stats

from attrib.errors import UsageError
from attrib.whatif import (
    ALL_ROUTES,
    Scenario,
    amdahl_speedup,
    bootstrap_percentiles,
    busy_connections,
    parse_factor,
    whatif,
)

T0 = datetime(2026, 11, 30, 8, 0, 0)


def fill_store(con, requests) -> None:
    """Insert requests and their statements into an empty store.

    ``requests`` is a list of dicts: ``route``, ``start`` (datetime), ``elapsed`` (ms) and
    ``statements``: a list of (template_id, offset_ms from the request start, duration_ms, rows,
    param_hash). Every template gets a templates row; every statement is linked to its request.
    """
    reqs = pd.DataFrame(
        {
            "line": range(1, len(requests) + 1),
            "request_id": [f"r{i + 1}" for i in range(len(requests))],
            "started_at": [r["start"] for r in requests],
            "elapsed_ms": [float(r["elapsed"]) for r in requests],
            "route": [r["route"] for r in requests],
        }
    )
    stmts = pd.DataFrame(
        [
            (i + 1, req["start"] + timedelta(milliseconds=offset), float(d), rows, tid, ph)
            for i, req in enumerate(requests)
            for tid, offset, d, rows, ph in req.get("statements", [])
        ],
        columns=["req_line", "started_at", "duration_ms", "rows", "template_id", "param_hash"],
    )
    stmts.insert(0, "line", range(1, len(stmts) + 1))
    con.register("_fill_reqs", reqs)
    con.register("_fill_stmts", stmts)
    con.execute(
        "INSERT INTO requests (source_id, line, seq, request_id, started_at, elapsed_ms, route)"
        " SELECT 1, line, 0, request_id, started_at, elapsed_ms, route FROM _fill_reqs"
    )
    con.execute(
        "INSERT INTO statements (source_id, line, seq, started_at, duration_ms, rows, template_id,"
        " param_hash, request_id) SELECT 2, line, 0, started_at, duration_ms, rows, template_id,"
        " param_hash, 'r' || req_line FROM _fill_stmts"
    )
    con.execute("INSERT INTO links SELECT 2, line, 0, 1, req_line, 0 FROM _fill_stmts")
    con.execute(
        "INSERT INTO templates SELECT DISTINCT template_id, 'SELECT * FROM ' || template_id"
        " || ' WHERE id = ?', 'SELECT', ['t'], true FROM _fill_stmts"
    )
    con.unregister("_fill_reqs")
    con.unregister("_fill_stmts")


def loop_request(start: datetime, *, loop: int = 10, elapsed: float = 100.0) -> dict:
    """/huts/{id}/bunks: one 5 ms lookup `hut`, then `loop` calls of `bunk` with rows k = 1..loop.

    A `bunk` call lasts 1 + 0.1 k ms (fixed cost 1 ms, 0.1 ms per row); every statement starts 1 ms
    after the previous one ended. Database time = 5 + loop + 0.1 * loop (loop + 1) / 2.
    """
    stmts = [("hut", 0.0, 5.0, 1, 11)]
    t = 5.0
    for k in range(1, loop + 1):
        t += 1.0
        d = 1.0 + 0.1 * k
        stmts.append(("bunk", t, d, k, 100 + k))
        t += d
    return {"route": "/huts/{id}/bunks", "start": start, "elapsed": elapsed, "statements": stmts}


def plain_request(start: datetime) -> dict:
    return {
        "route": "/huts",
        "start": start,
        "elapsed": 30.0,
        "statements": [("hut_list", 1.0, 4.0, 20, 7)],
    }


@pytest.fixture
def huts(con):
    reqs = [loop_request(T0 + timedelta(seconds=i)) for i in range(10)]
    reqs += [plain_request(T0 + timedelta(seconds=i, milliseconds=500)) for i in range(5)]
    fill_store(con, reqs)
    return con


# --- parsing ------------------------------------------------------------------------------------


@pytest.mark.parametrize(("text", "divisor"), [("3x", 3.0), ("1.5X", 1.5), ("40%", 1 / 0.6)])
def test_parse_factor_accepts_times_and_percent(text, divisor):
    assert parse_factor(text) == pytest.approx(divisor)


@pytest.mark.parametrize("text", ["3", "x3", "0x", "100%", "150%", "-2x"])
def test_parse_factor_bad_text_raises_usage_error(text):
    with pytest.raises(UsageError):
        parse_factor(text)


def test_scenario_parse_without_changes_raises_usage_error():
    with pytest.raises(UsageError, match="no scenario"):
        Scenario.parse()


def test_scenario_parse_faster_without_equals_raises_usage_error():
    with pytest.raises(UsageError, match="TEMPLATE_ID=FACTOR"):
        Scenario.parse(faster=["abc"])


# --- pure laws ----------------------------------------------------------------------------------


def test_amdahl_speedup_matches_textbook_web_server_example():
    # Hennessy & Patterson, "Computer Architecture: A Quantitative Approach", ch. 1 (Amdahl's law):
    # a new processor 10 times faster on computation, the server busy computing 40% of the time:
    # speedup = 1 / (0.6 + 0.4 / 10) = 1 / 0.64 = 1.5625 (figures from memory).
    assert amdahl_speedup(0.4, 10) == pytest.approx(1.5625)


def test_amdahl_speedup_infinite_factor_is_the_ceiling():
    # Amdahl (1967): with the fraction p removed entirely, speedup = 1 / (1 - p).
    assert amdahl_speedup(0.75, math.inf) == pytest.approx(4.0)


def test_busy_connections_equals_time_average_of_statements_in_progress():
    # Little's law (Little 1961): L = lambda * W. Independent check: sweep the interval endpoints of
    # random statements and integrate the number in progress over the observed span.
    rng = np.random.default_rng(7)
    starts = np.sort(rng.uniform(0, 60_000, 500))  # ms
    durations = rng.exponential(40.0, 500)
    ends = starts + durations
    span_ms = ends.max() - starts.min()
    events = sorted([(s, 1) for s in starts] + [(e, -1) for e in ends])
    area, level, last = 0.0, 0, events[0][0]
    for t, step in events:
        area += level * (t - last)
        level, last = level + step, t
    sweep_mean = area / span_ms
    lam = len(starts) / (span_ms / 1000.0)  # statements per second
    assert busy_connections(lam, durations.mean()) == pytest.approx(sweep_mean, rel=1e-9)


def test_bootstrap_percentiles_agrees_with_scipy_percentile_bootstrap():
    # scipy.stats.bootstrap(method='percentile') draws rng.integers(0, n, (B, n)) and takes
    # quantiles of the bootstrap distribution. Same seed and B: the Monte Carlo error of a 2.5% or
    # 97.5% quantile from B = 2000 resamples is about sqrt(.025 * .975 / B) / phi(1.96) = 0.06
    # standard errors of the statistic; we allow 0.25 standard errors (about 4 Monte Carlo sds).
    data = np.random.default_rng(3).lognormal(3.0, 0.6, 400)
    for q in (50, 95):
        lo, hi = bootstrap_percentiles(data, (q,), resamples=2000, seed=11)
        ref = scipy_stats.bootstrap(
            (data,),
            lambda x, axis, q=q: np.percentile(x, q, axis=axis),
            n_resamples=2000,
            method="percentile",
            rng=np.random.default_rng(11),
        )
        tol = 0.25 * ref.standard_error
        assert abs(lo[0] - ref.confidence_interval.low) <= tol
        assert abs(hi[0] - ref.confidence_interval.high) <= tol


def test_bootstrap_percentiles_same_seed_same_interval_in_blocks():
    data = np.arange(1000.0)
    a = bootstrap_percentiles(data, (50, 99), resamples=300, seed=5)
    b = bootstrap_percentiles(data, (50, 99), resamples=300, seed=np.random.default_rng(5))
    np.testing.assert_array_equal(a[0], b[0])
    np.testing.assert_array_equal(a[1], b[1])


# --- projections on closed-form stores ----------------------------------------------------------


def _row(df, route):
    return df[df["route"] == route].iloc[0]


def test_whatif_batch_loop_saves_fixed_costs_and_gaps(huts):
    df = whatif(huts, Scenario(batch=("bunk",)), resamples=200)
    assert list(df["route"]) == ["/huts/{id}/bunks", ALL_ROUTES]
    r = _row(df, "/huts/{id}/bunks")
    # Per request: db = 5 + 10 * 1 + 0.1 * 55 = 20.5 ms; Theil-Sen on d = 1 + 0.1 rows gives a
    # fixed cost of 1 ms, so batching saves 9 * 1 ms of db time and 9 * 1 ms of gaps.
    assert r["requests"] == 10 and r["requests_affected"] == 10
    assert r["db_ms_per_request_before"] == pytest.approx(20.5)
    assert r["db_ms_per_request_after"] == pytest.approx(11.5)
    assert (r["db_ms_p50_before"], r["db_ms_p50_after"]) == pytest.approx((20.5, 11.5))
    assert r["elapsed_p50_before"] == pytest.approx(100.0)
    assert r["elapsed_p50_after"] == pytest.approx(82.0)
    assert r["elapsed_p99_after"] == pytest.approx(82.0)
    # Every request has the same value, so every resample does too.
    assert r["elapsed_p50_after_ci_low"] == pytest.approx(82.0)
    assert r["elapsed_p50_after_ci_high"] == pytest.approx(82.0)
    # Route span: first start to last end = 9 s + 100 ms; 90 ms saved in it.
    assert r["span_s"] == pytest.approx(9.1)
    assert r["db_ms_saved_per_hour"] == pytest.approx(90 / 9.1 * 3600)
    assert r["db_ms_saved_per_day"] == pytest.approx(90 / 9.1 * 86400)
    # Little: 205 ms of statements in 9.1 s -> 0.0225 busy connections; after 115 ms.
    assert r["busy_connections_before"] == pytest.approx(0.205 / 9.1)
    assert r["busy_connections_after"] == pytest.approx(0.115 / 9.1)
    # Amdahl: the loop and its removable gaps are (15.5 + 9) / 100 of the elapsed time and shrink
    # to 15.5 - 9 = 6.5 ms: speedup = 1 / (0.755 + 0.065) = 1 / 0.82.
    assert r["amdahl_fraction"] == pytest.approx(0.245)
    assert r["amdahl_speedup"] == pytest.approx(1 / 0.82)
    assert r["amdahl_elapsed_mean"] == pytest.approx(82.0)


def test_whatif_faster_divides_template_time(huts):
    r = _row(whatif(huts, Scenario(faster={"bunk": 2.0}), resamples=50), "/huts/{id}/bunks")
    # 15.5 ms of `bunk` per request halves: saves 7.75 ms; Amdahl with p = 0.155, s = 2.
    assert r["db_ms_per_request_after"] == pytest.approx(20.5 - 7.75)
    assert r["elapsed_p50_after"] == pytest.approx(100 - 7.75)
    assert r["amdahl_factor"] == pytest.approx(2.0)
    assert r["amdahl_speedup"] == pytest.approx(1 / (0.845 + 0.155 / 2))


def test_whatif_remove_then_overall_row_covers_every_route(huts):
    df = whatif(huts, Scenario(remove=("hut_list",)), resamples=50)
    r, total = _row(df, "/huts"), _row(df, ALL_ROUTES)
    assert r["db_ms_per_request_after"] == 0.0 and r["elapsed_p50_after"] == pytest.approx(26.0)
    assert math.isinf(r["amdahl_factor"])
    assert total["requests"] == 15 and total["requests_affected"] == 5
    # All routes: (10 * 20.5 + 5 * 4) / 15 ms before, 10 * 20.5 / 15 after.
    assert total["db_ms_per_request_before"] == pytest.approx(225 / 15)
    assert total["db_ms_per_request_after"] == pytest.approx(205 / 15)


def test_whatif_cache_drops_repeats_with_the_same_parameters(con):
    # Each request reads `price` four times, 5 ms apart from start to start: parameter hashes
    # 1, 1, 1, 2 lasting 4, 2, 1 and 3 ms.
    stmts = [
        ("price", 2.0 + 5.0 * k, d, 1, ph)
        for k, (ph, d) in enumerate([(1, 4.0), (1, 2.0), (1, 1.0), (2, 3.0)])
    ]
    fill_store(
        con,
        [
            {
                "route": "/cart",
                "start": T0 + timedelta(seconds=i),
                "elapsed": 50.0,
                "statements": stmts,
            }
            for i in range(4)
        ],
    )
    r = _row(whatif(con, Scenario(cache=("price",)), resamples=50), "/cart")
    # The 2nd and 3rd calls repeat the first one's parameters: their 2 + 1 ms go, the first call's
    # 4 ms stay. Gaps between consecutive calls: 7 - 6, 12 - 9, 17 - 13 = 1, 3, 4 ms, mean 8/3
    # (the figure attrib nplus1 reports); two dropped calls remove 2 * 8/3 ms of round trips.
    assert r["db_ms_per_request_before"] == pytest.approx(10.0)
    assert r["db_ms_per_request_after"] == pytest.approx(7.0)
    assert r["elapsed_p50_after"] == pytest.approx(50.0 - 3.0 - 16 / 3)


def test_whatif_cache_then_batch_applies_in_documented_order(huts):
    # All `bunk` calls have distinct parameters: the cache drops nothing, the batch does the rest.
    both = _row(
        whatif(huts, Scenario(batch=("bunk",), cache=("bunk",)), resamples=20), "/huts/{id}/bunks"
    )
    assert both["db_ms_per_request_after"] == pytest.approx(11.5)


def test_whatif_parallel_statements_floor_at_non_database_time(con):
    # Two 30 ms statements overlap inside a 40 ms request: db time (60) exceeds elapsed (40), so
    # the non-database time is taken as 0 and removing both cannot go below 0.
    fill_store(
        con,
        [
            {
                "route": "/map",
                "start": T0,
                "elapsed": 40.0,
                "statements": [("tile", 0.0, 30.0, 1, 1), ("tile", 5.0, 30.0, 1, 2)],
            }
        ],
    )
    r = _row(whatif(con, Scenario(remove=("tile",)), resamples=10), "/map")
    assert r["elapsed_p50_after"] == 0.0


def test_whatif_unknown_template_raises_usage_error(huts):
    with pytest.raises(UsageError, match="not in the store"):
        whatif(huts, Scenario(batch=("nope",)))


def test_whatif_large_route_bootstraps_a_capped_subsample(huts):
    df = whatif(huts, Scenario(batch=("bunk",)), resamples=20, bootstrap_cap=4)
    assert set(df["bootstrap_requests"]) == {4}


def test_whatif_same_seed_gives_same_intervals(con):
    rng = np.random.default_rng(2)
    fill_store(
        con,
        [
            loop_request(T0 + timedelta(seconds=i), elapsed=float(e))
            for i, e in enumerate(rng.uniform(60, 200, 40))
        ],
    )
    a = whatif(con, Scenario(batch=("bunk",)), resamples=100, seed=9)
    b = whatif(con, Scenario(batch=("bunk",)), resamples=100, seed=9)
    c = whatif(con, Scenario(batch=("bunk",)), resamples=100, seed=10)
    assert a.equals(b)
    assert not a["elapsed_p50_after_ci_low"].equals(c["elapsed_p50_after_ci_low"])
    r = _row(a, "/huts/{id}/bunks")
    assert r["elapsed_p50_after_ci_low"] <= r["elapsed_p50_after"] <= r["elapsed_p50_after_ci_high"]


def _sweep_mean_in_progress(starts, ends, t0, t1) -> float:
    """Time-average number of intervals in progress over [t0, t1], by sweeping the end points."""
    events = sorted([(s, 1) for s in starts] + [(e, -1) for e in ends])
    area, level, last = 0.0, 0, t0
    for t, step in events:
        area += level * (t - last)
        level, last = level + step, t
    return area / (t1 - t0)


def test_whatif_busy_connections_equal_sweep_over_the_stored_statements(con):
    # Little's law against the log itself: overlapping requests with overlapping statements; the
    # statements' intervals are read back from the store and swept over the observed span.
    rng = np.random.default_rng(12)
    reqs = []
    for _ in range(60):
        elapsed = float(rng.uniform(50, 200))
        n = int(rng.integers(1, 6))
        stmts = [
            ("q", float(o), float(rng.uniform(1, 30)), 1, int(k))
            for k, o in enumerate(np.sort(rng.uniform(0, elapsed - 31, n)))
        ]
        start = T0 + timedelta(milliseconds=float(rng.uniform(0, 5000)))
        reqs.append({"route": "/r", "start": start, "elapsed": elapsed, "statements": stmts})
    fill_store(con, reqs)
    row = _row(whatif(con, Scenario(faster={"q": 2.0}), resamples=10), ALL_ROUTES)
    # Times in ms relative to the first request start (integers in SQL, so no precision is lost).
    t0 = "(SELECT min(epoch_us(started_at)) FROM requests)"
    s = con.execute(
        f"SELECT (epoch_us(started_at) - {t0}) / 1000.0 AS start, duration_ms FROM statements"
    ).fetchnumpy()
    end = con.execute(
        f"SELECT max((epoch_us(started_at) - {t0}) / 1000.0 + elapsed_ms) FROM requests"
    ).fetchone()[0]
    starts, durations = np.asarray(s["start"], float), np.asarray(s["duration_ms"], float)
    expected = _sweep_mean_in_progress(starts, starts + durations, 0.0, end)
    assert row["busy_connections_before"] == pytest.approx(expected, rel=1e-9)
    # Twice as fast: every interval halves, so does the time-average.
    assert row["busy_connections_after"] == pytest.approx(expected / 2, rel=1e-9)


def test_whatif_empty_time_range_raises_usage_error(huts):
    with pytest.raises(UsageError, match="no requests"):
        whatif(huts, Scenario(batch=("bunk",)), since=datetime(2030, 1, 1))


def test_whatif_scenario_that_changes_nothing_leaves_only_the_total_row(huts):
    # `hut` runs once per request: batching it changes nothing.
    df = whatif(huts, Scenario(batch=("hut",)), resamples=10)
    assert list(df["route"]) == [ALL_ROUTES]
    total = df.iloc[0]
    assert total["requests_affected"] == 0
    assert total["db_ms_per_request_after"] == total["db_ms_per_request_before"]
