"""Compare: corrections for many tests, Mann-Whitney and bootstrap against scipy, verdicts, warnings."""

from __future__ import annotations

from datetime import datetime, timedelta

import numpy as np
import pandas as pd
import pytest
from scipy import stats as scipy_stats

from attrib.compare import (
    benjamini_hochberg,
    change_intervals,
    compare,
    holm,
    mann_whitney,
    route_mix_distance,
    traffic_warnings,
)
from attrib.errors import UsageError
from attrib.windows import parse_window
from tests.test_whatif import fill_store, loop_request, plain_request

MONDAY = datetime(2026, 11, 23, 8, 0)  # 09:00 in Europe/Zurich (UTC+1)
NEXT_MONDAY = datetime(2026, 11, 30, 8, 0)


def test_holm_matches_worked_example():
    # Worked example of the Holm-Bonferroni method (Wikipedia article "Holm-Bonferroni method",
    # from memory): p = 0.01, 0.04, 0.03, 0.005 at alpha = 0.05. Sorted: 0.005 <= 0.05/4 and
    # 0.01 <= 0.05/3 are rejected; 0.03 > 0.05/2 stops the procedure. Adjusted p-values by hand:
    # 4 * 0.005 = 0.02, 3 * 0.01 = 0.03, max(0.03, 2 * 0.03) = 0.06, max(0.06, 1 * 0.04) = 0.06.
    adj = holm([0.01, 0.04, 0.03, 0.005])
    np.testing.assert_allclose(adj, [0.03, 0.06, 0.06, 0.02])
    assert list(adj <= 0.05) == [True, False, False, True]


def test_holm_ignores_missing_p_values_and_caps_at_one():
    adj = holm([0.5, np.nan, 0.4])
    assert np.isnan(adj[1])
    np.testing.assert_allclose(adj[[0, 2]], [0.8, 0.8])
    assert holm([0.9, 0.8])[0] == 1.0


def test_benjamini_hochberg_matches_scipy_false_discovery_control():
    # Reference: scipy.stats.false_discovery_control(method="bh").
    p = np.random.default_rng(4).uniform(0, 0.2, 25) ** 2
    np.testing.assert_allclose(benjamini_hochberg(p), scipy_stats.false_discovery_control(p))


def test_mann_whitney_matches_scipy_and_reports_direction():
    rng = np.random.default_rng(8)
    before, after = rng.lognormal(4.0, 0.5, 300), rng.lognormal(3.8, 0.5, 250)
    p, direction = mann_whitney(before, after)
    ref = scipy_stats.mannwhitneyu(before, after, alternative="two-sided", method="asymptotic")
    assert p == pytest.approx(ref.pvalue, rel=1e-12)
    assert direction == 1  # before tends to be larger


def test_change_intervals_agree_with_scipy_two_sample_bootstrap():
    # scipy.stats.bootstrap on two independent samples resamples each with rng.integers(0, n, (B, n)),
    # first sample first: the same scheme. Tolerance 0.25 bootstrap standard errors (about 4 Monte
    # Carlo sds of a 2.5% quantile from B = 2000 resamples; see test_whatif for the arithmetic).
    rng = np.random.default_rng(21)
    eb, ea = rng.lognormal(4.0, 0.4, 300), rng.lognormal(3.9, 0.4, 280)
    before = np.column_stack([np.full(300, 5.0), np.full(300, 2.0), eb])
    after = np.column_stack([np.full(280, 5.0), np.full(280, 2.0), ea])
    lo, hi = change_intervals(before, after, resamples=2000, seed=13)
    ref = scipy_stats.bootstrap(
        (eb, ea),
        lambda b, a, axis: np.median(a, axis=axis) - np.median(b, axis=axis),
        n_resamples=2000,
        method="percentile",
        rng=np.random.default_rng(13),
    )
    tol = 0.25 * ref.standard_error
    assert abs(lo[2] - ref.confidence_interval.low) <= tol
    assert abs(hi[2] - ref.confidence_interval.high) <= tol
    assert lo[0] == hi[0] == 0.0  # constant queries: no change in any resample


def test_route_mix_distance_identical_and_disjoint():
    a = pd.Series(["/a", "/b"])
    assert route_mix_distance(a, a) == 0.0
    assert route_mix_distance(a, pd.Series(["/c", "/d"])) == 1.0


# --- compare on stores --------------------------------------------------------------------------


def _week(start: datetime, *, batched: bool, n: int = 30, slow: float = 0.0) -> list[dict]:
    """n loop requests (a 10-call loop, or 1 call when batched) and n plain ones, 1 s apart."""
    rng = np.random.default_rng(int(start.timestamp()))
    reqs = []
    for i in range(n):
        elapsed = float(rng.uniform(60, 70)) if batched else float(rng.uniform(95, 110))
        reqs.append(
            loop_request(start + timedelta(seconds=i), loop=1 if batched else 10, elapsed=elapsed)
        )
        p = plain_request(start + timedelta(seconds=i, milliseconds=500))
        p["elapsed"] = float(rng.uniform(25, 35)) + slow
        reqs.append(p)
    return reqs


@pytest.fixture
def two_weeks(con):
    fill_store(con, _week(MONDAY, batched=False) + _week(NEXT_MONDAY, batched=True))
    return con


def _windows():
    return (
        parse_window("2026-11-23T09:00/2026-11-23T10:00", "Europe/Zurich"),
        parse_window("2026-11-30T09:00/2026-11-30T10:00", "Europe/Zurich"),
    )


def test_compare_batched_loop_is_fewer_and_faster_other_route_unchanged(two_weeks):
    before, after = _windows()
    result = compare(two_weeks, before=before, after=after, resamples=300)
    r = result.routes.set_index("route")
    loop = r.loc["/huts/{id}/bunks"]
    assert (loop["requests_before"], loop["requests_after"]) == (30, 30)
    assert loop["queries_per_request_before"] == 11 and loop["queries_per_request_after"] == 2
    # db ms per request: 5 + 10 + 0.1 * 55 = 20.5 with the loop, 5 + 1.1 = 6.1 with one call.
    assert (loop["db_ms_p50_before"], loop["db_ms_p50_after"]) == pytest.approx((20.5, 6.1))
    assert loop["queries_verdict"] == "fewer" and loop["elapsed_verdict"] == "faster"
    assert loop["queries_change"] == -9 == loop["queries_change_ci_low"]
    assert loop["elapsed_p50_change_ci_low"] <= loop["elapsed_p50_change"]
    assert loop["elapsed_p50_change"] <= loop["elapsed_p50_change_ci_high"] < 0
    plain = r.loc["/huts"]
    assert plain["queries_verdict"] == "unchanged" and plain["queries_p_value"] == 1.0
    assert plain["elapsed_verdict"] == "unchanged"
    assert result.warnings == []


def test_compare_p_value_equals_scipy_on_independently_built_samples(two_weeks):
    before, after = _windows()
    r = compare(two_weeks, before=before, after=after, resamples=50).routes.set_index("route")
    # The per-request elapsed times as inserted, rebuilt without attrib.
    b = [q["elapsed"] for q in _week(MONDAY, batched=False) if q["route"] == "/huts"]
    a = [q["elapsed"] for q in _week(NEXT_MONDAY, batched=True) if q["route"] == "/huts"]
    ref = scipy_stats.mannwhitneyu(b, a, alternative="two-sided", method="asymptotic")
    assert r.loc["/huts", "p_value"] == pytest.approx(ref.pvalue, rel=1e-12)
    assert r.loc["/huts", "elapsed_p50_before"] == pytest.approx(np.percentile(b, 50))


def test_compare_slower_route_is_detected(con):
    fill_store(con, _week(MONDAY, batched=False) + _week(NEXT_MONDAY, batched=False, slow=20))
    before, after = _windows()
    r = compare(con, before=before, after=after, resamples=50).routes.set_index("route")
    assert r.loc["/huts", "elapsed_verdict"] == "slower"
    assert r.loc["/huts/{id}/bunks", "queries_verdict"] == "unchanged"


def test_compare_templates_report_disappeared_and_appeared(con):
    reqs = _week(MONDAY, batched=False, n=3)
    later = _week(NEXT_MONDAY, batched=False, n=3)
    for q in later:
        q["statements"] = [("hut_v2" if s[0] == "hut" else s[0], *s[1:]) for s in q["statements"]]
    fill_store(con, reqs + later)
    before, after = _windows()
    t = compare(con, before=before, after=after, resamples=20).templates
    status = dict(zip(zip(t["route"], t["template_id"], strict=True), t["status"], strict=True))
    assert status[("/huts/{id}/bunks", "hut")] == "disappeared"
    assert status[("/huts/{id}/bunks", "hut_v2")] == "appeared"
    assert status[("/huts/{id}/bunks", "bunk")] == "both"
    bunk = t[(t["template_id"] == "bunk")].iloc[0]
    assert bunk["calls_per_request_before"] == bunk["calls_per_request_after"] == 10


def test_compare_two_stores_whole(tmp_path):
    from attrib import store

    a, b = store.connect(tmp_path / "a.duckdb"), store.connect(tmp_path / "b.duckdb")
    fill_store(a, _week(MONDAY, batched=False))
    fill_store(b, _week(NEXT_MONDAY, batched=True))
    r = compare(a, b, resamples=50).routes.set_index("route")
    assert r.loc["/huts/{id}/bunks", "queries_verdict"] == "fewer"
    a.close()
    b.close()


def test_compare_one_store_without_windows_raises_usage_error(two_weeks):
    with pytest.raises(UsageError, match="--before and --after"):
        compare(two_weeks)


def test_compare_empty_window_raises_usage_error(two_weeks):
    empty = parse_window("2020-01-01T00:00/2020-01-02T00:00", "UTC")
    with pytest.raises(UsageError, match="no requests on the before side"):
        compare(two_weeks, before=empty, after=_windows()[1])


def test_traffic_warnings_flag_volume_mix_and_weekday():
    t = pd.Timestamp("2026-11-23 08:00")
    rb = pd.DataFrame({"route": ["/a"] * 10, "started_at": [t] * 10})
    ra = pd.DataFrame({"route": ["/b"] * 30, "started_at": [t] * 30})
    before = parse_window("2026-11-23T09:00/2026-11-23T10:00", "Europe/Zurich")  # Monday
    after = parse_window("2026-11-24T09:00/2026-11-24T10:00", "Europe/Zurich")  # Tuesday
    text = " | ".join(traffic_warnings(rb, ra, before, after))
    assert "traffic differs" in text and "3.0x" in text
    assert "route mix differs" in text
    assert "Monday before, Tuesday after" in text


def test_store_compare_accepts_window_text_in_a_zone(tmp_path):
    import attrib

    with attrib.open(tmp_path / "s.duckdb") as s:
        fill_store(s.con, _week(MONDAY, batched=False) + _week(NEXT_MONDAY, batched=True))
        result = s.compare(
            "2026-11-23T09:00/2026-11-23T10:00",
            "2026-11-30T09:00/2026-11-30T10:00",
            tz="Europe/Zurich",
            resamples=20,
        )
        projected = s.whatif(batch=["bunk"], resamples=20)
    r = result.routes.set_index("route")
    assert r.loc["/huts/{id}/bunks", "queries_verdict"] == "fewer"
    assert r.loc["/huts/{id}/bunks", "requests_before"] == 30
    assert projected["route"].iloc[0] == "/huts/{id}/bunks"


def test_compare_route_on_one_side_only_has_no_verdict(con):
    later = _week(NEXT_MONDAY, batched=True, n=5)
    later.append({"route": "/trails/{id}", "start": NEXT_MONDAY, "elapsed": 9.0, "statements": []})
    fill_store(con, _week(MONDAY, batched=False, n=5) + later)
    before, after = _windows()
    r = compare(con, before=before, after=after, resamples=20).routes.set_index("route")
    trail = r.loc["/trails/{id}"]
    assert (trail["requests_before"], trail["requests_after"]) == (0, 1)
    assert pd.isna(trail["queries_verdict"]) and pd.isna(trail["elapsed_verdict"])
    assert np.isnan(trail["p_value"]) and np.isnan(trail["queries_change"])
    # The correction counts only the two routes that were tested (m = 2, not 3).
    tested = ["/huts", "/huts/{id}/bunks"]
    np.testing.assert_allclose(r.loc[tested, "p_adjusted"], holm(r.loc[tested, "p_value"]))


def test_compare_alpha_and_correction_decide_the_verdict(two_weeks):
    before, after = _windows()
    bh = compare(two_weeks, before=before, after=after, correction="bh", resamples=20)
    r = bh.routes.set_index("route")
    np.testing.assert_allclose(r["p_adjusted"], benjamini_hochberg(r["p_value"]))
    assert r.loc["/huts/{id}/bunks", "queries_verdict"] == "fewer"
    p = r.loc["/huts/{id}/bunks", "queries_p_adjusted"]
    strict = compare(two_weeks, before=before, after=after, alpha=p / 2, resamples=20)
    assert (
        strict.routes.set_index("route").loc["/huts/{id}/bunks", "queries_verdict"] == "unchanged"
    )


def test_compare_bad_alpha_or_correction_raises_usage_error(two_weeks):
    before, after = _windows()
    with pytest.raises(UsageError, match="--alpha"):
        compare(two_weeks, before=before, after=after, alpha=1.5)
    with pytest.raises(UsageError, match="unknown correction"):
        compare(two_weeks, before=before, after=after, correction="bonferroni")
