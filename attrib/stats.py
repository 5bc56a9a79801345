"""Small pure helpers: the percentile rule, the robust per-template cost fit and the saving model.

One percentile definition is used everywhere in attrib: linear interpolation between order statistics,
Hyndman and Fan (1996) definition 7. DuckDB's ``quantile_cont`` and ``numpy.percentile(method="linear")``
compute the same thing; :func:`percentile` is the version for values that are already in Python.
See docs/methods.md for every formula and its source.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

#: How many calls per template the cost fit looks at (drawn deterministically by the caller). The
#: Theil-Sen estimate looks at n(n-1)/2 pairs; 200 calls keep one fit to a few milliseconds, so a
#: listing with a hundred looping templates still fits them all in well under a second.
FIT_SAMPLE = 200


def percentile(values: Iterable[float | None], q: float) -> float:
    """The ``q``-th percentile (0-100) by linear interpolation between order statistics.

    Hyndman and Fan (1996) definition 7: sort the n values, take h = (n - 1) * q / 100, and
    interpolate between the values at ranks floor(h) and floor(h) + 1 (0-based). ``None`` and NaN
    values are ignored; no values give NaN.

    Args:
        values: the sample.
        q: the percentile, between 0 and 100.

    Returns:
        The percentile as a float, or NaN for an empty sample.

    >>> percentile([1, 2, 3, 4], 50)
    2.5
    >>> percentile([10, 20, 30, 40, 50], 95)
    48.0
    """
    if not 0 <= q <= 100:
        raise ValueError(f"percentile {q} is outside 0-100")
    xs = sorted(float(v) for v in values if v is not None and not math.isnan(float(v)))
    if not xs:
        return math.nan
    h = (len(xs) - 1) * q / 100.0
    lo = math.floor(h)
    hi = min(lo + 1, len(xs) - 1)
    return xs[lo] + (h - lo) * (xs[hi] - xs[lo])


@dataclass(frozen=True, slots=True)
class CostFit:
    """A template's per-call cost: duration ≈ fixed_ms + per_row_ms × rows.

    ``method`` is ``"theil-sen"`` when the fit used rows, ``"median"`` when rows were unknown or
    constant (then ``fixed_ms`` is the median duration and ``per_row_ms`` is 0). ``n`` is the number
    of calls the fit looked at.
    """

    fixed_ms: float
    per_row_ms: float
    method: str
    n: int


def fit_fixed_cost(
    durations: Sequence[float | None], rows: Sequence[float | None] | None = None
) -> CostFit:
    """Fit a template's duration against its rows with a robust line and return its fixed cost.

    Theil-Sen estimator (``scipy.stats.theilslopes``: slope = median of pairwise slopes, intercept =
    median(y) - slope × median(x)) over the calls whose duration and rows are both known. When fewer
    than two distinct row counts are known the fixed cost is the median duration instead. The fixed
    cost is floored at 0 (a negative intercept has no meaning as a cost).

    Args:
        durations: call durations in ms (None = not logged; ignored).
        rows: rows returned by the same calls, or None when the log has no row counts.

    Returns:
        A :class:`CostFit`; ``fixed_ms`` is NaN when no duration is known.

    >>> fit_fixed_cost([1.0, 2.0, 3.0], [0, 10, 20]).fixed_ms
    1.0
    >>> fit_fixed_cost([4.0, 2.0, 3.0]).method
    'median'
    """
    y = _floats(durations)
    x = np.full(len(y), np.nan) if rows is None else _floats(rows)
    if len(x) != len(y):
        raise ValueError("durations and rows must have the same length")
    known = ~np.isnan(y)
    if not known.any():
        return CostFit(math.nan, 0.0, "median", 0)
    both = known & ~np.isnan(x)
    if len(np.unique(x[both])) >= 2:
        slope, intercept = theil_sen(x[both], y[both])
        return CostFit(max(float(intercept), 0.0), float(slope), "theil-sen", int(both.sum()))
    return CostFit(max(float(np.median(y[known])), 0.0), 0.0, "median", int(known.sum()))


def theil_sen(x: Sequence[float], y: Sequence[float]) -> tuple[float, float]:
    """Theil-Sen line through (x, y): the median of pairwise slopes, and its intercept.

    Same definition as ``scipy.stats.theilslopes`` with its default ``method="separate"``: the
    slope is the median of (y_j - y_i) / (x_j - x_i) over pairs with x_j > x_i, the intercept is
    median(y) - slope × median(x). Computed with numpy broadcasting and without the confidence
    interval, which makes it several times faster. Needs at least two distinct x values.

    >>> theil_sen([0, 1, 2, 3, 4], [1, 3, 5, 7, 100])
    (2.0, 1.0)
    """
    xs = np.asarray(x, dtype=float)
    ys = np.asarray(y, dtype=float)
    i, j = _pairs(len(xs))
    dx, dy = xs[j] - xs[i], ys[j] - ys[i]
    # a pair with x_j < x_i gives the same slope as (j, i); pairs with equal x are left out
    keep = dx != 0
    if not keep.any():
        raise ValueError("theil_sen needs at least two distinct x values")
    slope = float(np.median(dy[keep] / dx[keep]))
    return slope, float(np.median(ys) - slope * np.median(xs))


def _floats(values: Sequence[float | None]) -> np.ndarray:
    if isinstance(values, np.ndarray):
        return values.astype(float)
    return np.array([np.nan if v is None else v for v in values], dtype=float)


@functools.lru_cache(maxsize=8)
def _pairs(n: int) -> tuple[np.ndarray, np.ndarray]:
    return np.triu_indices(n, k=1)


# --- the saving model -------------------------------------------------------------------------
# A loop of r calls to one template becomes one batched call; a redundant repeat becomes one cached
# call. Both are per request; the listings sum them over the requests of a finding.


def loop_saving_ms(repeats: float, fixed_ms: float, gap_ms: float) -> float:
    """Estimated saving when ``repeats`` calls of a template become one batched call.

    saving = (repeats - 1) × (fixed cost per call + application round trip between calls). The
    per-row part of the cost stays: the batch still returns every row.

    Args:
        repeats: calls of the template in one request (r ≥ 1).
        fixed_ms: the template's fixed cost per call (:func:`fit_fixed_cost`), ≥ 0.
        gap_ms: the median gap between consecutive calls (next start - previous end), ≥ 0.

    Returns:
        Milliseconds saved in that request.

    >>> loop_saving_ms(10, 0.5, 0.3)
    7.2
    """
    if repeats < 1:
        raise ValueError("repeats must be at least 1")
    return (repeats - 1) * (max(fixed_ms, 0.0) + max(gap_ms, 0.0))


def cache_saving_ms(repeats: float, repeat_ms: float, gap_ms: float) -> float:
    """Estimated saving when ``repeats`` identical calls become one call whose result is reused.

    saving = the duration of the calls beyond the first + (repeats - 1) × the round trip between
    calls: a cache keeps one call and drops the rest entirely.

    Args:
        repeats: calls with the same parameters in one request (r ≥ 1).
        repeat_ms: total duration of the calls beyond the first.
        gap_ms: the median gap between consecutive calls, ≥ 0.

    Returns:
        Milliseconds saved in that request.

    >>> cache_saving_ms(3, 4.0, 0.5)
    5.0
    """
    if repeats < 1:
        raise ValueError("repeats must be at least 1")
    return max(repeat_ms, 0.0) + (repeats - 1) * max(gap_ms, 0.0)
