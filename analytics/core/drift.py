"""Alignment drift per vehicle, corner and angle: robust slope, shrinkage, step detection, forecast.

Conventions (DESIGN.md §3): angles in degrees (toe positive = toe-in, camber positive = top of
the wheel leaning outboard, ISO 8855), odometer in km, time in days (float days since a reference
date the caller chooses; :func:`days_since` converts dates). The same functions fit a drift over
odometer (``x`` in km, slope in deg/km) or over time (``x`` in days, slope in deg/day).

Data model
----------
Observations are the **as-found** readings of one vehicle, corner and angle, in time order. An
as-adjusted session (the technician reset the angle) starts a new *segment*; pass either
``adjusted_before`` (bool per reading: an adjustment happened between the previous reading and
this one) or ``segment`` (an integer id per reading, non-decreasing). **Only the current (last)
segment is used** for the slope. Within that segment a two-sided CUSUM (:mod:`.cusum`) on
standardised one-step-ahead (recursive least-squares) residuals looks for step changes (a kerb
strike); the fit then uses only the readings after the last detected step, so a step is not
mistaken for drift.

Methods
-------
* Slope: Theil–Sen (median of pairwise slopes over pairs with ``x_j > x_i``), intercept
  ``median(y) − slope·median(x)`` and Sen's (1968) confidence interval for the slope — the same
  definitions as ``scipy.stats.theilslopes(method="separate")``, vectorised over stacks of
  NaN-padded series.
* Residual scale: 1.4826·MAD of the fit residuals, floored by the caller's measurement
  repeatability ``measurement_sd`` (deg).
* Prediction band at ``x``: ``ŷ(x) ± z·sqrt(σ²(1 + 1/n) + se_b²·(x − x̃)²)`` with ``x̃ =
  median(x)``, ``se_b`` the slope's standard error and ``z`` the normal quantile (σ treated as
  known) — the ordinary-least-squares prediction interval with the Theil–Sen slope uncertainty
  put in place of σ²/Sxx.
* Shrinkage (:func:`shrink_slopes`): normal–normal empirical Bayes. Each vehicle's slope
  ``b_i ~ N(θ_i, v_i)``, ``θ_i ~ N(μ, τ²)`` across the platform's vehicles for that corner and
  angle; ``μ`` and ``τ²`` by the DerSimonian–Laird method of moments; the shrunk slope is the
  posterior mean ``μ + (1 − B_i)(b_i − μ)`` with ``B_i = v_i / (v_i + τ²)`` and its variance
  ``(1 − B_i)·v_i + B_i²·Var(μ̂)``. Vehicles with few readings (large ``v_i``) move furthest
  toward the pooled rate; a vehicle with no usable slope gets the pooled rate with variance
  ``τ² + Var(μ̂)``.
* Forecast (:func:`forecast_crossing`): the first ``x`` within a horizon where the band leaves
  ``[lower, upper]``: *early* = the conservative (nearer) band edge crosses, *likely* = the central
  line crosses, *late* = the whole band is past the limit. Dates follow from a daily-distance rate
  (:func:`daily_distance_rate`, Theil–Sen of odometer against days over the whole history).

Pure numpy/scipy; no Django.
"""

from __future__ import annotations

import datetime as dt
import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from .cusum import CUSUM_H, CUSUM_K, CusumStep, detect_steps

__all__ = [
    "DEFAULT_CONFIDENCE",
    "DRIFT_MODEL",
    "MIN_VEHICLES_FOR_POOLING",
    "Crossing",
    "CrossingForecast",
    "DistanceRate",
    "DriftFit",
    "LineTrend",
    "PooledRate",
    "ShrunkSlopes",
    "TheilSen",
    "current_segment_start",
    "daily_distance_rate",
    "days_since",
    "fit_drift",
    "forecast_crossing",
    "forecast_drift",
    "segment_ids",
    "shrink_drift",
    "shrink_slopes",
    "theil_sen",
    "theil_sen_stack",
]

#: Two-sided confidence level for slope intervals and prediction bands.
DEFAULT_CONFIDENCE: float = 0.95
#: Scale factor from the median absolute deviation to σ for normal data.
MAD_TO_SD: float = 1.4826
#: Fewest vehicles with a usable slope before slopes are pooled and shrunk.
MIN_VEHICLES_FOR_POOLING: int = 3
#: Below this many readings a vehicle's own residual scale is replaced by the pooled one
#: (if larger) when its slope's sampling variance is formed for shrinkage.
MIN_READINGS_OWN_SCALE: int = 5
#: Readings used to start the one-step-ahead predictions of the step detector.
STEP_WARMUP_READINGS: int = 4
#: Detrended differences beyond this many robust σ count as steps when σ is estimated.
STEP_DIFF_CLIP: float = 3.5
#: The step start is refined over Page's estimate ± this many readings ...
STEP_REFINE_BEFORE: int = 2
#: ... using at most this many readings after the alarm (two-phase least squares).
STEP_REFINE_AFTER: int = 5
#: Grid points over the forecast horizon before bisection refinement.
FORECAST_GRID_POINTS: int = 513
#: Bisection iterations refining a crossing inside one grid cell (cell / 2**40).
CROSSING_BISECTIONS: int = 40
#: Rows of a stack processed at once by :func:`theil_sen_stack` (memory bound: rows·n² floats).
STACK_CHUNK_ROWS: int = 1024
#: Model label carried into advice evidence.
DRIFT_MODEL: str = "Theil–Sen drift, empirical-Bayes shrinkage, two-sided CUSUM steps"


# --------------------------------------------------------------------------- validation helpers


def _check_confidence(confidence: float) -> float:
    if not (0.0 < confidence < 1.0):
        raise ValueError(f"confidence must be in (0, 1), got {confidence!r}")
    return float(confidence)


@functools.lru_cache(maxsize=64)
def _z(confidence: float) -> float:
    """Two-sided normal quantile for ``confidence`` (cached: forecasts call it per grid cell)."""
    return float(stats.norm.ppf(0.5 + _check_confidence(confidence) / 2.0))


def _as_1d(name: str, a: ArrayLike) -> NDArray[np.float64]:
    arr = np.asarray(a, dtype=float)
    if arr.ndim != 1:
        raise ValueError(f"{name} must have shape (n,), got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} must be finite")
    return arr


# --------------------------------------------------------------------------- Theil–Sen


@dataclass(frozen=True)
class TheilSen:
    """Theil–Sen fit of one series (units: y-units and y-units per x-unit).

    Attributes:
        slope: median pairwise slope.
        intercept: ``median(y) − slope·median(x)``.
        slope_low, slope_high: Sen's confidence interval for the slope at ``confidence``.
        x_ref, y_ref: ``median(x)``, ``median(y)``; the fitted line passes through them.
        n: number of readings used.
        confidence: two-sided level of the interval.
    """

    slope: float
    intercept: float
    slope_low: float
    slope_high: float
    x_ref: float
    y_ref: float
    n: int
    confidence: float

    @property
    def slope_se(self) -> float:
        """Standard error implied by the interval: width / (2·z)."""
        return (self.slope_high - self.slope_low) / (2.0 * _z(self.confidence))


@dataclass(frozen=True)
class TheilSenStack:
    """Vectorised :class:`TheilSen` for ``m`` series; every field has shape ``(m,)``.

    Rows without two distinct x values hold NaN.
    """

    slope: NDArray[np.float64]
    intercept: NDArray[np.float64]
    slope_low: NDArray[np.float64]
    slope_high: NDArray[np.float64]
    x_ref: NDArray[np.float64]
    y_ref: NDArray[np.float64]
    n: NDArray[np.int64]
    confidence: float


def _sorted_row_median(a: NDArray[np.float64], count: NDArray[np.int64]) -> NDArray[np.float64]:
    """Median of each row of ``a`` already sorted with NaN last; ``count`` valid entries/row."""
    out = np.full(a.shape[0], np.nan)
    ok = count > 0
    if not ok.any():
        return out
    lo = np.clip((count - 1) // 2, 0, None)
    hi = np.clip(count // 2, 0, None)
    rows = np.arange(a.shape[0])
    med = 0.5 * (a[rows, np.minimum(lo, a.shape[1] - 1)] + a[rows, np.minimum(hi, a.shape[1] - 1)])
    out[ok] = med[ok]
    return out


def _tie_sum(sorted_rows: NDArray[np.float64]) -> NDArray[np.int64]:
    """Σ over groups of equal values of t(t−1)(2t+5) (t: the group's size), per row of an array
    whose rows are sorted with NaN (padding) last; shape ``(m, n)`` → ``(m,)``."""
    m, w = sorted_rows.shape
    if not m or not w:
        return np.zeros(m, dtype=np.int64)
    valid = ~np.isnan(sorted_rows)
    new_run = np.ones((m, w), dtype=bool)
    new_run[:, 1:] = sorted_rows[:, 1:] != sorted_rows[:, :-1]
    run = np.cumsum(new_run.ravel()) - 1  # run number of each element, row-major
    t = np.bincount(run, weights=valid.ravel()).astype(np.int64)  # valid members per run
    row_of_run = np.repeat(np.arange(m), new_run.sum(axis=1))
    return np.bincount(row_of_run, weights=t * (t - 1) * (2 * t + 5), minlength=m).astype(np.int64)


def _theil_sen_chunk(
    x: NDArray[np.float64], y: NDArray[np.float64], z: float
) -> tuple[NDArray[np.float64], ...]:
    valid = np.isfinite(x) & np.isfinite(y)
    n = valid.sum(axis=1)
    # each unordered pair once (i < j): its slope dy/dx is the same number whichever point comes
    # first (x_i − x_j = −(x_j − x_i) and (−a)/(−b) = a/b exactly in IEEE arithmetic), so these
    # are the slopes of the pairs with x_i > x_j over all ordered pairs, half the values to sort
    i, j = np.triu_indices(x.shape[1], k=1)
    dx = x[:, i] - x[:, j]
    dy = y[:, i] - y[:, j]
    use = valid[:, i] & valid[:, j] & (dx != 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        slopes = np.where(use, dy / np.where(use, dx, 1.0), np.nan)
    m = x.shape[0]
    if not slopes.shape[1]:  # series of one point: no pair (one NaN column keeps the shapes)
        slopes = np.full((m, 1), np.nan)
    slopes = np.sort(slopes, axis=1)  # NaN sort last
    nt = use.sum(axis=1)
    slope = _sorted_row_median(slopes, nt)

    xs = np.sort(np.where(valid, x, np.nan), axis=1)
    ys = np.sort(np.where(valid, y, np.nan), axis=1)
    x_ref = _sorted_row_median(xs, n)
    y_ref = _sorted_row_median(ys, n)
    intercept = y_ref - slope * x_ref

    # Sen (1968) eq. 2.6, tie corrections: Σ over tie groups of t(t−1)(2t+5), the groups being
    # the runs of equal values in each row sorted (xs, ys above)
    ties_x = _tie_sum(xs)
    ties_y = _tie_sum(ys)
    sigsq = (n * (n - 1) * (2 * n + 5) - ties_x - ties_y) / 18.0
    sigma = np.sqrt(np.clip(sigsq, 0.0, None))
    zneg = -z  # scipy uses the lower-tail quantile
    ru = np.minimum(np.round((nt - zneg * sigma) / 2.0).astype(np.int64), nt - 1)
    rl = np.maximum(np.round((nt + zneg * sigma) / 2.0).astype(np.int64) - 1, 0)
    rows = np.arange(m)
    ok = nt > 0
    cols = max(slopes.shape[1] - 1, 0)
    low = np.where(ok, slopes[rows, np.clip(rl, 0, cols)], np.nan)
    high = np.where(ok, slopes[rows, np.clip(ru, 0, cols)], np.nan)
    return slope, intercept, low, high, x_ref, y_ref, n


def theil_sen_stack(
    x: ArrayLike, y: ArrayLike, confidence: float = DEFAULT_CONFIDENCE
) -> TheilSenStack:
    """Theil–Sen slope, intercept and Sen's slope interval for a stack of series.

    Args:
        x: shape ``(m, n)``, x-units (km or days); NaN pads series shorter than ``n``.
        y: shape ``(m, n)``, y-units (deg, mm, ...); NaN exactly where ``x`` is NaN.
        confidence: two-sided level of the slope interval.

    Returns:
        :class:`TheilSenStack` with fields of shape ``(m,)``; matches
        ``scipy.stats.theilslopes(y_row, x_row, confidence)`` row by row.
    """
    z = _z(confidence)
    xa = np.asarray(x, dtype=float)
    ya = np.asarray(y, dtype=float)
    if xa.ndim != 2 or xa.shape != ya.shape:
        raise ValueError(f"x and y must both have shape (m, n); got {xa.shape} and {ya.shape}")
    if np.any(np.isinf(xa)) or np.any(np.isinf(ya)):
        raise ValueError("x and y must not contain infinities (NaN marks padding)")
    if np.any(np.isnan(xa) != np.isnan(ya)):
        raise ValueError("x and y must be NaN-padded at the same positions")
    parts = [
        _theil_sen_chunk(xa[i : i + STACK_CHUNK_ROWS], ya[i : i + STACK_CHUNK_ROWS], z)
        for i in range(0, max(xa.shape[0], 1), STACK_CHUNK_ROWS)
    ]
    cat = [np.concatenate([p[j] for p in parts]) for j in range(7)]
    return TheilSenStack(
        slope=cat[0],
        intercept=cat[1],
        slope_low=cat[2],
        slope_high=cat[3],
        x_ref=cat[4],
        y_ref=cat[5],
        n=cat[6].astype(np.int64),
        confidence=confidence,
    )


def theil_sen(x: ArrayLike, y: ArrayLike, confidence: float = DEFAULT_CONFIDENCE) -> TheilSen:
    """Theil–Sen fit of one series.

    Args:
        x: shape ``(n,)``, x-units; at least two distinct values.
        y: shape ``(n,)``, y-units.
        confidence: two-sided level of Sen's slope interval.

    Raises:
        ValueError: shapes differ, non-finite values, or fewer than two distinct x.
    """
    xa = _as_1d("x", x)
    ya = _as_1d("y", y)
    if xa.shape != ya.shape:
        raise ValueError(f"x and y must have the same shape, got {xa.shape} and {ya.shape}")
    if np.unique(xa).size < 2:
        raise ValueError("Theil–Sen needs at least two distinct x values")
    s = theil_sen_stack(xa[None, :], ya[None, :], confidence)
    return TheilSen(
        slope=float(s.slope[0]),
        intercept=float(s.intercept[0]),
        slope_low=float(s.slope_low[0]),
        slope_high=float(s.slope_high[0]),
        x_ref=float(s.x_ref[0]),
        y_ref=float(s.y_ref[0]),
        n=int(s.n[0]),
        confidence=confidence,
    )


# --------------------------------------------------------------------------- trend and band


@dataclass(frozen=True)
class LineTrend:
    """A straight-line trend with a prediction band.

    ``ŷ(x) = y_ref + slope·(x − x_ref)``; band half-width
    ``z·sqrt(residual_sd²·(1 + 1/n) + slope_se²·(x − x_ref)²)``.

    Attributes:
        slope: y-units per x-unit (deg/km, deg/day, mm/km, ...).
        slope_se: standard error of the slope, same units.
        x_ref, y_ref: a point on the line (the medians of the fitted readings).
        residual_sd: scatter of a single reading about the line, y-units.
        n: readings behind the fit.
    """

    slope: float
    slope_se: float
    x_ref: float
    y_ref: float
    residual_sd: float
    n: int

    def __post_init__(self) -> None:
        for name in ("slope", "slope_se", "x_ref", "y_ref", "residual_sd"):
            if not math.isfinite(getattr(self, name)):
                raise ValueError(f"LineTrend.{name} must be finite")
        if self.slope_se < 0 or self.residual_sd < 0:
            raise ValueError("LineTrend.slope_se and residual_sd must be >= 0")
        if self.n < 1:
            raise ValueError("LineTrend.n must be >= 1")

    def band(
        self, x: ArrayLike, confidence: float = DEFAULT_CONFIDENCE
    ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
        """``(low, centre, high)`` of the prediction band at ``x`` (any shape), y-units."""
        z = _z(confidence)
        xa = np.asarray(x, dtype=float)
        centre = self.y_ref + self.slope * (xa - self.x_ref)
        half = z * np.sqrt(
            self.residual_sd**2 * (1.0 + 1.0 / self.n) + self.slope_se**2 * (xa - self.x_ref) ** 2
        )
        return centre - half, centre, centre + half

    def with_slope(self, slope: float, slope_se: float) -> LineTrend:
        """The same trend through ``(x_ref, y_ref)`` with another slope (e.g. a shrunk one)."""
        return replace(self, slope=float(slope), slope_se=float(slope_se))


def _robust_sd(residuals: NDArray[np.float64]) -> float:
    if residuals.size == 0:
        return 0.0
    return float(MAD_TO_SD * np.median(np.abs(residuals - np.median(residuals))))


# --------------------------------------------------------------------------- segments


def segment_ids(adjusted_before: ArrayLike) -> NDArray[np.int64]:
    """Segment id per reading from "adjusted before this reading" flags, shape ``(n,)``."""
    a = np.asarray(adjusted_before)
    if a.ndim != 1 or a.dtype != bool:
        raise ValueError("adjusted_before must be a boolean array of shape (n,)")
    return np.cumsum(a).astype(np.int64)


def current_segment_start(
    n: int, *, adjusted_before: ArrayLike | None = None, segment: ArrayLike | None = None
) -> int:
    """Index of the first reading of the current (last) segment.

    Give at most one of ``adjusted_before`` (bool, shape ``(n,)``) or ``segment`` (int ids,
    non-decreasing, shape ``(n,)``); with neither, the whole series is one segment.
    """
    if adjusted_before is not None and segment is not None:
        raise ValueError("give adjusted_before or segment, not both")
    if adjusted_before is not None:
        seg = segment_ids(adjusted_before)
    elif segment is not None:
        seg = np.asarray(segment)
        if seg.ndim != 1 or not np.issubdtype(seg.dtype, np.integer):
            raise ValueError("segment must be an integer array of shape (n,)")
        if np.any(np.diff(seg) < 0):
            raise ValueError("segment ids must be non-decreasing in reading order")
    else:
        return 0
    if seg.shape != (n,):
        raise ValueError(f"segment information must have shape ({n},), got {seg.shape}")
    if n == 0:
        return 0
    return int(np.argmax(seg == seg[-1]))


# --------------------------------------------------------------------------- drift fit


@dataclass(frozen=True)
class DriftFit:
    """Drift of one vehicle, corner and angle over one axis (km or days).

    Attributes:
        n_total: readings given.
        segment_start: index (into the inputs) of the first reading of the current segment.
        fit_start: index of the first reading used for the slope (after the last step).
        steps: steps found by the CUSUM in the current segment; indices refer to the inputs.
        fit: Theil–Sen fit on readings ``fit_start:``; None with fewer than two distinct x.
        trend: slope, band and scale for forecasting; None when ``fit`` is None.
        residual_sd: robust scatter of the used readings about the fit (deg), floored by
            ``measurement_sd``.
        sxx: ``Σ(x − x̄)²`` of the used readings (x-units²).
        n_used: readings used.
    """

    n_total: int
    segment_start: int
    fit_start: int
    steps: tuple[CusumStep, ...]
    fit: TheilSen | None
    trend: LineTrend | None
    residual_sd: float
    sxx: float
    n_used: int

    @property
    def sampling_variance(self) -> float:
        """Slope variance for shrinkage: max(Sen interval's se², σ²/Sxx); inf without a fit."""
        if self.fit is None or self.sxx <= 0:
            return math.inf
        v = max(self.fit.slope_se**2, self.residual_sd**2 / self.sxx)
        return v if v > 0 else math.inf


def _difference_sd(x: NDArray[np.float64], y: NDArray[np.float64], slope: float) -> float:
    """σ of one reading from detrended successive differences.

    ``d_i = Δy_i − slope·Δx_i`` has variance 2σ² on a straight line; differences further than
    :data:`STEP_DIFF_CLIP` robust σ from their median (a step) are dropped before the
    root-mean-square, which keeps most of the efficiency of the plain estimate.
    """
    if x.size < 3:
        return 0.0
    d = np.diff(y) - slope * np.diff(x)
    d = d - np.median(d)
    robust = _robust_sd(d)
    if robust > 0:
        d = d[np.abs(d) <= STEP_DIFF_CLIP * robust]
    return float(np.sqrt(np.mean(d**2)) / math.sqrt(2.0))


def _refine_step_start(
    x: NDArray[np.float64], y: NDArray[np.float64], seg: int, page_start: int, alarm: int
) -> int:
    """Two-phase least squares (common slope, a level shift at j) over candidate j."""
    end = min(x.size, alarm + 1 + STEP_REFINE_AFTER)
    lo = max(seg + 2, page_start - STEP_REFINE_BEFORE)
    hi = alarm
    if lo > hi:
        return max(page_start, seg + 1)
    xs, ys = x[seg:end], y[seg:end]
    best_j, best_rss = page_start, math.inf
    for j in range(lo, hi + 1):
        step = (np.arange(seg, end) >= j).astype(float)
        design = np.column_stack([np.ones_like(xs), xs - xs.mean(), step])
        coef, *_ = np.linalg.lstsq(design, ys, rcond=None)
        rss = float(np.sum((ys - design @ coef) ** 2))
        if rss < best_rss - 1e-12 * max(1.0, best_rss if math.isfinite(best_rss) else 1.0):
            best_j, best_rss = j, rss
    return best_j


def _one_step_residuals(
    x: NDArray[np.float64], y: NDArray[np.float64], start: int, sigma: float
) -> NDArray[np.float64]:
    """Standardised recursive residuals for readings ``start + warmup ..``, shape ``(n_z,)``.

    Reading ``i`` is predicted by the ordinary-least-squares line of readings ``start .. i−1``
    (all prefixes at once) and standardised by ``σ·sqrt(1 + 1/m + (x_i − x̄)²/Sxx)``. On a
    straight line these are independent N(0, 1) (Brown, Durbin & Evans 1975), so the CUSUM's
    tabulated run lengths apply.
    """
    n = x.size
    first = start + STEP_WARMUP_READINGS
    if first >= n:
        return np.empty(0)
    targets = np.arange(first, n)
    lengths = (targets - start).astype(float)
    mask = np.arange(n - start)[None, :] < lengths[:, None]  # (p, width)
    xs = np.where(mask, x[start:][None, :], 0.0)
    ys = np.where(mask, y[start:][None, :], 0.0)
    xbar = xs.sum(axis=1) / lengths
    ybar = ys.sum(axis=1) / lengths
    dxm = np.where(mask, xs - xbar[:, None], 0.0)
    sxx = np.sum(dxm**2, axis=1)
    sxy = np.sum(dxm * (ys - ybar[:, None]), axis=1)
    has_slope = sxx > 0
    safe = np.where(has_slope, sxx, 1.0)
    slope = np.where(has_slope, sxy / safe, 0.0)
    pred = ybar + slope * (x[targets] - xbar)
    lever = np.where(has_slope, (x[targets] - xbar) ** 2 / safe, 0.0)
    sd = sigma * np.sqrt(1.0 + 1.0 / lengths + lever)
    return (y[targets] - pred) / sd


def fit_drift(
    x: ArrayLike,
    y: ArrayLike,
    *,
    adjusted_before: ArrayLike | None = None,
    segment: ArrayLike | None = None,
    measurement_sd: float = 0.0,
    find_steps: bool = True,
    k: float = CUSUM_K,
    h: float = CUSUM_H,
    confidence: float = DEFAULT_CONFIDENCE,
) -> DriftFit:
    """Drift of one vehicle, corner and angle.

    Args:
        x: shape ``(n,)``, odometer (km) or time (days), non-decreasing in reading order.
        y: shape ``(n,)``, as-found angle readings (deg).
        adjusted_before: bool ``(n,)``: an as-adjusted session happened before this reading.
        segment: int ``(n,)`` alternative to ``adjusted_before``.
        measurement_sd: repeatability of one reading (deg, ≥ 0); floors the residual scale.
        find_steps: run the CUSUM step detector in the current segment.
        k, h: CUSUM reference value and decision interval, σ units (see :mod:`.cusum`).
        confidence: two-sided level of the slope interval.

    Returns:
        :class:`DriftFit`; ``fit``/``trend`` are None when the used readings have fewer than two
        distinct x values.
    """
    xa = _as_1d("x", x)
    ya = _as_1d("y", y)
    if xa.shape != ya.shape:
        raise ValueError(f"x and y must have the same shape, got {xa.shape} and {ya.shape}")
    if xa.size == 0:
        raise ValueError("no readings")
    if np.any(np.diff(xa) < 0):
        raise ValueError("x must be non-decreasing in reading order")
    if not (math.isfinite(measurement_sd) and measurement_sd >= 0):
        raise ValueError("measurement_sd must be finite and >= 0")
    _check_confidence(confidence)
    n = xa.size
    seg = current_segment_start(n, adjusted_before=adjusted_before, segment=segment)

    steps: list[CusumStep] = []
    start = seg
    if find_steps and n - seg > STEP_WARMUP_READINGS and np.unique(xa[seg:]).size >= 2:
        ts0 = theil_sen(xa[seg:], ya[seg:], confidence)
        sigma = max(_difference_sd(xa[seg:], ya[seg:], ts0.slope), measurement_sd)
        while sigma > 0:
            z = _one_step_residuals(xa, ya, start, sigma)
            found = detect_steps(z, k, h, max_steps=1) if z.size else []
            if not found:
                break
            off = start + STEP_WARMUP_READINGS
            alarm = off + found[0].alarm_index
            page = off + found[0].start_index
            new_start = _refine_step_start(xa, ya, start, page, alarm)
            steps.append(
                CusumStep(alarm_index=alarm, start_index=new_start, direction=found[0].direction)
            )
            start = new_start

    xu, yu = xa[start:], ya[start:]
    sxx = float(np.sum((xu - xu.mean()) ** 2))
    if np.unique(xu).size < 2:
        return DriftFit(n, seg, start, tuple(steps), None, None, measurement_sd, sxx, xu.size)
    fit = theil_sen(xu, yu, confidence)
    resid = yu - (fit.intercept + fit.slope * xu)
    sd = max(_robust_sd(resid) if xu.size > 2 else 0.0, measurement_sd)
    trend = LineTrend(
        slope=fit.slope,
        slope_se=max(fit.slope_se, 0.0),
        x_ref=fit.x_ref,
        y_ref=fit.y_ref,
        residual_sd=sd,
        n=xu.size,
    )
    return DriftFit(n, seg, start, tuple(steps), fit, trend, sd, sxx, xu.size)


# --------------------------------------------------------------------------- shrinkage


@dataclass(frozen=True)
class PooledRate:
    """Platform-level pooled drift rate for one corner and angle.

    Attributes:
        mean: pooled rate μ̂ (y-units per x-unit).
        mean_se: its standard error, ``sqrt(1/Σ 1/(v_i + τ²))``.
        tau2: between-vehicle variance τ̂² (DerSimonian–Laird; NaN when not pooled).
        q: Cochran's heterogeneity statistic Q.
        vehicles: vehicles with a usable slope.
        method: description of the estimator.
    """

    mean: float
    mean_se: float
    tau2: float
    q: float
    vehicles: int
    method: str


@dataclass(frozen=True)
class ShrunkSlopes:
    """Posterior (shrunk) slopes, arrays of shape ``(m,)``.

    Attributes:
        slope: posterior mean per vehicle.
        slope_se: posterior standard deviation per vehicle.
        weight_on_pooled: ``B_i`` in [0, 1] (1 = fully the pooled rate).
        pooled: the platform rate used.
    """

    slope: NDArray[np.float64]
    slope_se: NDArray[np.float64]
    weight_on_pooled: NDArray[np.float64]
    pooled: PooledRate


def shrink_slopes(slopes: ArrayLike, variances: ArrayLike) -> ShrunkSlopes:
    """Normal–normal empirical-Bayes shrinkage with DerSimonian–Laird moments.

    Args:
        slopes: shape ``(m,)``, each vehicle's own slope; NaN = no usable slope.
        variances: shape ``(m,)``, their sampling variances (> 0; inf/NaN = no usable slope).

    Returns:
        :class:`ShrunkSlopes`. With fewer than :data:`MIN_VEHICLES_FOR_POOLING` usable slopes
        nothing is shrunk (``weight_on_pooled`` 0; vehicles without a slope stay NaN).
    """
    b = np.asarray(slopes, dtype=float)
    v = np.asarray(variances, dtype=float)
    if b.ndim != 1 or b.shape != v.shape:
        raise ValueError(f"slopes and variances must both have shape (m,), got {b.shape}, {v.shape}")
    if np.any(np.isinf(b)):
        raise ValueError("slopes must be finite or NaN")
    if np.any(v[np.isfinite(v)] <= 0):
        raise ValueError("finite sampling variances must be > 0")
    ok = np.isfinite(b) & np.isfinite(v)
    kk = int(ok.sum())
    if kk < MIN_VEHICLES_FOR_POOLING:
        w = 1.0 / v[ok] if kk else np.array([])
        mean = float(np.sum(w * b[ok]) / np.sum(w)) if kk else math.nan
        pooled = PooledRate(
            mean=mean,
            mean_se=float(math.sqrt(1.0 / np.sum(w))) if kk else math.nan,
            tau2=math.nan,
            q=math.nan,
            vehicles=kk,
            method=f"not pooled: fewer than {MIN_VEHICLES_FOR_POOLING} vehicles with a slope",
        )
        se = np.where(ok, np.sqrt(np.where(ok, v, np.nan)), np.nan)
        return ShrunkSlopes(np.where(ok, b, np.nan), se, np.zeros_like(b), pooled)

    bo, vo = b[ok], v[ok]
    w = 1.0 / vo
    mu_fe = np.sum(w * bo) / np.sum(w)
    q = float(np.sum(w * (bo - mu_fe) ** 2))
    denom = float(np.sum(w) - np.sum(w**2) / np.sum(w))
    tau2 = max(0.0, (q - (kk - 1)) / denom) if denom > 0 else 0.0
    ws = 1.0 / (vo + tau2)
    mu = float(np.sum(ws * bo) / np.sum(ws))
    var_mu = float(1.0 / np.sum(ws))
    pooled = PooledRate(
        mean=mu,
        mean_se=math.sqrt(var_mu),
        tau2=tau2,
        q=q,
        vehicles=kk,
        method="normal–normal empirical Bayes, DerSimonian–Laird moments",
    )
    weight = np.ones_like(b)
    weight[ok] = vo / (vo + tau2)
    slope = np.full_like(b, mu)
    slope[ok] = mu + (1.0 - weight[ok]) * (bo - mu)
    var = np.full_like(b, tau2 + var_mu)
    var[ok] = (1.0 - weight[ok]) * vo + weight[ok] ** 2 * var_mu
    return ShrunkSlopes(slope, np.sqrt(var), weight, pooled)


def shrink_drift(fits: Sequence[DriftFit]) -> ShrunkSlopes:
    """Shrink the slopes of several vehicles' :class:`DriftFit` (same platform, corner, angle).

    A vehicle with fewer than :data:`MIN_READINGS_OWN_SCALE` readings uses the larger of its own
    residual scale and the pooled one (``Σ(n_i − 2)s_i² / Σ(n_i − 2)``) for its sampling variance
    ``max(se_Sen², σ²/Sxx)``.
    """
    if not fits:
        raise ValueError("no drift fits to shrink")
    dof = np.array([max(f.n_used - 2, 0) for f in fits], dtype=float)
    s2 = np.array([f.residual_sd**2 for f in fits])
    pooled_s2 = float(np.sum(dof * s2) / np.sum(dof)) if np.sum(dof) > 0 else 0.0
    slopes = np.full(len(fits), np.nan)
    variances = np.full(len(fits), np.inf)
    for i, f in enumerate(fits):
        if f.fit is None or f.sxx <= 0:
            continue
        s2_i = f.residual_sd**2
        if f.n_used < MIN_READINGS_OWN_SCALE:
            s2_i = max(s2_i, pooled_s2)
        var = max(f.fit.slope_se**2, s2_i / f.sxx)
        if var > 0:
            slopes[i] = f.fit.slope
            variances[i] = var
    return shrink_slopes(slopes, variances)


# --------------------------------------------------------------------------- forecast


CrossingStatus = Literal["out_now", "crossing", "not_within_horizon"]


@dataclass(frozen=True)
class Crossing:
    """When a trend's band leaves ``[lower, upper]`` (x-units; None = not within horizon).

    Attributes:
        status: ``"out_now"`` (the central line is already outside at ``current_x``),
            ``"crossing"`` (the conservative edge leaves within the horizon) or
            ``"not_within_horizon"``.
        side: ``"upper"`` or ``"lower"``: the limit the earliest crossing passes.
        early: the conservative band edge leaves the limits.
        likely: the central line leaves the limits.
        late: the whole band is past a limit.
        horizon_end: ``current_x + horizon``.
    """

    status: CrossingStatus
    side: Literal["upper", "lower"] | None
    early: float | None
    likely: float | None
    late: float | None
    horizon_end: float


def _first_true(
    grid: NDArray[np.float64], flag: NDArray[np.bool_], fn, lo_x: float
) -> float | None:
    """First x where ``fn(x)`` is true: grid search then bisection inside the cell."""
    if not flag.any():
        return None
    i = int(np.argmax(flag))
    if i == 0:
        return lo_x
    a, b = float(grid[i - 1]), float(grid[i])
    for _ in range(CROSSING_BISECTIONS):
        mid = 0.5 * (a + b)
        if fn(np.array([mid]))[0]:
            b = mid
        else:
            a = mid
    return b


def forecast_crossing(
    trend: LineTrend,
    *,
    current_x: float,
    lower: float | None,
    upper: float | None,
    horizon: float,
    confidence: float = DEFAULT_CONFIDENCE,
) -> Crossing:
    """First ``x ≥ current_x`` where the prediction band leaves the tolerance ``[lower, upper]``.

    Args:
        trend: the fitted (or shrunk) trend.
        current_x: where the vehicle is now (km or days, same axis as the trend).
        lower, upper: tolerance limits in y-units (nominal ∓ tolerance); None = no such limit.
        horizon: how far ahead to look (x-units, > 0).
        confidence: two-sided level of the band.

    Returns:
        :class:`Crossing`; ``early ≤ likely ≤ late`` wherever they exist.
    """
    if lower is None and upper is None:
        raise ValueError("give at least one tolerance limit")
    lo_lim = -math.inf if lower is None else float(lower)
    hi_lim = math.inf if upper is None else float(upper)
    if not (lo_lim < hi_lim) or math.isnan(lo_lim) or math.isnan(hi_lim):
        raise ValueError(f"need lower < upper, got {lower!r}, {upper!r}")
    if not (math.isfinite(current_x) and math.isfinite(horizon) and horizon > 0):
        raise ValueError("current_x must be finite and horizon finite and > 0")
    _check_confidence(confidence)

    def edges(xv: NDArray[np.float64]):
        return trend.band(xv, confidence)

    def any_out(xv: NDArray[np.float64]) -> NDArray[np.bool_]:
        lo, _, hi = edges(xv)
        return (hi > hi_lim) | (lo < lo_lim)

    def mid_out(xv: NDArray[np.float64]) -> NDArray[np.bool_]:
        _, c, _ = edges(xv)
        return (c > hi_lim) | (c < lo_lim)

    def all_out(xv: NDArray[np.float64]) -> NDArray[np.bool_]:
        lo, _, hi = edges(xv)
        return (lo > hi_lim) | (hi < lo_lim)

    grid = np.linspace(current_x, current_x + horizon, FORECAST_GRID_POINTS)
    early = _first_true(grid, any_out(grid), any_out, current_x)
    likely = _first_true(grid, mid_out(grid), mid_out, current_x)
    late = _first_true(grid, all_out(grid), all_out, current_x)
    side: Literal["upper", "lower"] | None = None
    if early is not None:
        lo, _, hi = edges(np.array([early]))
        side = "upper" if hi[0] - hi_lim >= lo_lim - lo[0] else "lower"
    if likely is not None and likely == current_x:
        status: CrossingStatus = "out_now"
    elif early is not None:
        status = "crossing"
    else:
        status = "not_within_horizon"
    return Crossing(status, side, early, likely, late, current_x + horizon)


@dataclass(frozen=True)
class CrossingForecast:
    """A forecast crossing of a limit, over odometer with dates (input to advice).

    Attributes:
        status: see :class:`Crossing`.
        side: ``"upper"``/``"lower"`` limit passed first, or None.
        early_km, likely_km, late_km: odometer (km) at the early/likely/late crossing, or None
            (not within the horizon).
        early_date, likely_date, late_date: the matching dates, or None (no crossing, or no
            usable daily-distance rate).
        horizon_km: odometer up to which the forecast looked.
        model: model label for the evidence.
    """

    status: CrossingStatus
    side: Literal["upper", "lower"] | None
    early_km: float | None
    likely_km: float | None
    late_km: float | None
    early_date: dt.date | None
    likely_date: dt.date | None
    late_date: dt.date | None
    horizon_km: float
    model: str = DRIFT_MODEL
    notes: tuple[str, ...] = field(default=())


def _km_to_date(
    km: float | None, current_km: float, current_date: dt.date, km_per_day: float | None
) -> dt.date | None:
    if km is None or km_per_day is None or not (km_per_day > 0):
        return None
    days = (km - current_km) / km_per_day
    if days > 365.25 * 200:  # beyond any sensible calendar; treat as no date
        return None
    return current_date + dt.timedelta(days=math.floor(max(days, 0.0)))


def _min_date(a: dt.date | None, b: dt.date | None) -> dt.date | None:
    if a is None:
        return b
    if b is None:
        return a
    return min(a, b)


def forecast_drift(
    trend_km: LineTrend,
    *,
    current_km: float,
    current_date: dt.date,
    km_per_day: float | None,
    lower: float | None,
    upper: float | None,
    horizon_km: float,
    trend_days: LineTrend | None = None,
    current_day: float | None = None,
    confidence: float = DEFAULT_CONFIDENCE,
    model: str = DRIFT_MODEL,
) -> CrossingForecast:
    """Crossing over odometer, with dates from the daily-distance rate.

    If a trend over time is also given (``trend_days`` with ``current_day`` on its axis), each
    date is the earlier of the odometer-based date and the time-based one (looking ahead
    ``horizon_km / km_per_day`` days, or 3 years without a rate).
    """
    c = forecast_crossing(
        trend_km,
        current_x=current_km,
        lower=lower,
        upper=upper,
        horizon=horizon_km,
        confidence=confidence,
    )
    dates = [_km_to_date(v, current_km, current_date, km_per_day) for v in (c.early, c.likely, c.late)]
    notes: list[str] = []
    if km_per_day is None or not (km_per_day > 0):
        notes.append("no usable daily-distance rate: dates come only from a fit over time")
    if trend_days is not None:
        if current_day is None:
            raise ValueError("current_day is required with trend_days")
        horizon_days = horizon_km / km_per_day if km_per_day and km_per_day > 0 else 3 * 365.25
        ct = forecast_crossing(
            trend_days,
            current_x=current_day,
            lower=lower,
            upper=upper,
            horizon=horizon_days,
            confidence=confidence,
        )
        tdates = [
            None if v is None else current_date + dt.timedelta(days=math.floor(v - current_day))
            for v in (ct.early, ct.likely, ct.late)
        ]
        dates = [_min_date(a, b) for a, b in zip(dates, tdates, strict=True)]
    status = c.status
    if status == "not_within_horizon" and dates[0] is not None:
        status = "crossing"  # the time fit crosses even though the km fit does not
    return CrossingForecast(
        status=status,
        side=c.side,
        early_km=c.early,
        likely_km=c.likely,
        late_km=c.late,
        early_date=dates[0],
        likely_date=dates[1],
        late_date=dates[2],
        horizon_km=c.horizon_end,
        model=model,
        notes=tuple(notes),
    )


# --------------------------------------------------------------------------- distance rate


@dataclass(frozen=True)
class DistanceRate:
    """How far the vehicle drives per day: Theil–Sen slope of odometer against days.

    Attributes:
        km_per_day: slope (km/day).
        low, high: Sen's interval for it (km/day).
        n: readings used.
    """

    km_per_day: float
    low: float
    high: float
    n: int


def days_since(dates: Sequence[dt.date], reference: dt.date) -> NDArray[np.float64]:
    """Float days from ``reference`` to each date, shape ``(n,)``."""
    return np.array([(d - reference).days for d in dates], dtype=float)


def daily_distance_rate(
    days: ArrayLike, odometer_km: ArrayLike, confidence: float = DEFAULT_CONFIDENCE
) -> DistanceRate:
    """Daily distance from the odometer history (all readings, every segment).

    Args:
        days: shape ``(n,)``, days since any reference, non-decreasing.
        odometer_km: shape ``(n,)``, odometer (km), non-decreasing with time.

    Raises:
        ValueError: the odometer goes backwards, or fewer than two distinct days.
    """
    d = _as_1d("days", days)
    o = _as_1d("odometer_km", odometer_km)
    if d.shape != o.shape:
        raise ValueError("days and odometer_km must have the same shape")
    order = np.argsort(d, kind="stable")
    if np.any(np.diff(o[order]) < 0):
        raise ValueError("odometer goes backwards in time (replaced instrument cluster?)")
    ts = theil_sen(d, o, confidence)
    return DistanceRate(ts.slope, ts.slope_low, ts.slope_high, ts.n)
