"""The percentile rule, the robust cost fit and the saving model, checked against numpy and scipy."""

from __future__ import annotations

import math

import duckdb
import numpy as np
import pytest
from scipy import stats as scipy_stats

from attrib import stats

# --- percentile ---------------------------------------------------------------------------------


def test_percentile_matches_numpy_linear_on_random_samples():
    # numpy.percentile with its default method "linear" is Hyndman & Fan (1996) definition 7
    # (NumPy documentation, numpy.percentile, "method" parameter).
    rng = np.random.default_rng(3)
    for n in (1, 2, 3, 10, 101, 1000):
        values = rng.lognormal(0, 1.5, n)
        for q in (0, 1, 25, 50, 90, 95, 99, 100):
            assert stats.percentile(values, q) == pytest.approx(
                np.percentile(values, q, method="linear"), rel=1e-12
            )


def test_percentile_matches_duckdb_quantile_cont():
    # DuckDB documents quantile_cont as the interpolated quantile; both sides must agree here.
    rng = np.random.default_rng(11)
    values = rng.normal(10, 3, 57).tolist()
    con = duckdb.connect()
    for q in (0.05, 0.5, 0.95, 0.99):
        got = con.execute(
            "SELECT quantile_cont(v, ?) FROM (SELECT unnest(?::DOUBLE[]) AS v)", [q, values]
        ).fetchone()[0]
        assert stats.percentile(values, q * 100) == pytest.approx(got, rel=1e-12)


def test_percentile_hand_worked_example_interpolates():
    # [1, 2, 3, 4], q = 95: h = 3 * 0.95 = 2.85 -> 3 + 0.85 * (4 - 3) = 3.85
    assert stats.percentile([4, 1, 3, 2], 95) == pytest.approx(3.85)


def test_percentile_ignores_missing_values():
    assert stats.percentile([None, 5.0, float("nan"), 1.0], 50) == 3.0


def test_percentile_empty_sample_is_nan():
    assert math.isnan(stats.percentile([], 50))


def test_percentile_outside_0_100_raises():
    with pytest.raises(ValueError, match="outside 0-100"):
        stats.percentile([1, 2], 101)


# --- Theil-Sen and the fixed cost ---------------------------------------------------------------


def test_theil_sen_matches_scipy_theilslopes_on_noisy_data():
    # scipy.stats.theilslopes(y, x), default method="separate" (SciPy documentation).
    rng = np.random.default_rng(5)
    for n in (5, 40, 200):
        x = rng.integers(0, 30, n).astype(float)
        y = 0.7 + 0.05 * x + rng.lognormal(-2, 1, n)
        slope, intercept = stats.theil_sen(x, y)
        ref = scipy_stats.theilslopes(y, x)
        assert slope == pytest.approx(ref.slope, rel=1e-12)
        assert intercept == pytest.approx(ref.intercept, rel=1e-12)


def test_theil_sen_ignores_an_outlier():
    # Points on y = 1 + 2x plus one wild value: 6 of the 10 pairwise slopes are exactly 2.
    slope, intercept = stats.theil_sen([0, 1, 2, 3, 4], [1, 3, 5, 7, 100])
    assert (slope, intercept) == (2.0, 1.0)


def test_theil_sen_needs_two_distinct_x():
    with pytest.raises(ValueError, match="two distinct x"):
        stats.theil_sen([3, 3], [1, 2])


def test_fit_fixed_cost_uses_theil_sen_intercept_when_rows_vary():
    rng = np.random.default_rng(9)
    rows = rng.integers(1, 100, 150).astype(float)
    durations = 0.4 + 0.01 * rows + rng.exponential(0.05, 150)
    fit = stats.fit_fixed_cost(durations.tolist(), rows.tolist())
    ref = scipy_stats.theilslopes(durations, rows)
    assert fit.method == "theil-sen" and fit.n == 150
    assert fit.fixed_ms == pytest.approx(ref.intercept) and fit.per_row_ms == pytest.approx(
        ref.slope
    )


def test_fit_fixed_cost_without_rows_is_the_median_duration():
    fit = stats.fit_fixed_cost([5.0, 1.0, 2.0, None])
    assert (fit.fixed_ms, fit.per_row_ms, fit.method, fit.n) == (2.0, 0.0, "median", 3)


def test_fit_fixed_cost_with_constant_rows_is_the_median_duration():
    fit = stats.fit_fixed_cost([2.0, 2.0, 3.0, 3.0, 9.0], [1, 1, 1, 1, None])
    assert (fit.fixed_ms, fit.method) == (3.0, "median")


def test_fit_fixed_cost_negative_intercept_is_floored_at_zero():
    # y = -1 + x exactly: Theil-Sen intercept -1, floored to 0.
    fit = stats.fit_fixed_cost([1.0, 2.0, 3.0, 4.0], [2, 3, 4, 5])
    assert fit.per_row_ms == pytest.approx(1.0) and fit.fixed_ms == 0.0


def test_fit_fixed_cost_with_no_durations_is_nan():
    assert math.isnan(stats.fit_fixed_cost([None, None], [1, 2]).fixed_ms)


def test_fit_fixed_cost_length_mismatch_raises():
    with pytest.raises(ValueError, match="same length"):
        stats.fit_fixed_cost([1.0, 2.0], [1])


# --- saving model -------------------------------------------------------------------------------


def test_loop_saving_is_extra_calls_times_fixed_cost_plus_gap():
    # 10 calls -> 1 batch: 9 × (0.5 ms fixed + 0.3 ms round trip) = 7.2 ms
    assert stats.loop_saving_ms(10, 0.5, 0.3) == pytest.approx(7.2)
    assert stats.loop_saving_ms(1, 5.0, 5.0) == 0.0


def test_loop_saving_floors_negative_inputs():
    assert stats.loop_saving_ms(3, -1.0, -2.0) == 0.0


def test_cache_saving_is_repeat_time_plus_gaps():
    # 3 identical calls, 4 ms spent in the 2 beyond the first, 0.5 ms between calls: 4 + 2 × 0.5
    assert stats.cache_saving_ms(3, 4.0, 0.5) == pytest.approx(5.0)


def test_saving_models_reject_zero_repeats():
    with pytest.raises(ValueError):
        stats.loop_saving_ms(0, 1.0, 1.0)
    with pytest.raises(ValueError):
        stats.cache_saving_ms(0, 1.0, 1.0)
