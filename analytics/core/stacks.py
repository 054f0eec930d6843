"""Many short series at once: NaN-padded stacks (shape ``(series, readings)``) and the line fits
and step screen of the core's drift model over all their rows together.

Pure numpy (no Django). Each function is the vectorised form of a per-series computation of
:mod:`analytics.core.drift` and gives its numbers row by row (tested in
``tests/analytics/test_fleet_recompute.py`` and ``tests/analytics/test_crossing_search.py``).
Units are the caller's: x usually km, y deg, mm or log(N/mm).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from analytics.core.cusum import CUSUM_H, CUSUM_K
from analytics.core.drift import (
    DEFAULT_CONFIDENCE,
    MAD_TO_SD,
    STEP_DIFF_CLIP,
    STEP_WARMUP_READINGS,
    _z,
    theil_sen_stack,
)

#: The two-sided 95 % normal quantile of the core's prediction bands (one definition for the
#: line fits here and the band crossings of :mod:`analytics.core.crossing_search`).
Z95 = _z(DEFAULT_CONFIDENCE)


def stack(group: np.ndarray, pos: np.ndarray, values: np.ndarray, groups: int, width: int):
    out = np.full((groups, max(width, 1)), np.nan)
    out[group, pos] = values
    return out


def sorted_median(a: np.ndarray) -> np.ndarray:
    """Row medians of a NaN-padded (m, n) array, as ``np.median`` of each row's values."""
    s = np.sort(a, axis=1)
    cnt = np.isfinite(a).sum(axis=1)
    lo = np.clip((cnt - 1) // 2, 0, None)
    hi = np.clip(cnt // 2, 0, None)
    rows = np.arange(a.shape[0])
    w = a.shape[1] - 1
    med = 0.5 * (s[rows, np.minimum(lo, w)] + s[rows, np.minimum(hi, w)])
    return np.where(cnt > 0, med, np.nan)


def robust_sd_rows(r: np.ndarray) -> np.ndarray:
    med = sorted_median(r)
    return MAD_TO_SD * sorted_median(np.abs(r - med[:, None]))


@dataclass
class LineFits:
    """Theil–Sen fits of a stack of current-segment series, fields shape ``(m,)``."""

    slope: np.ndarray
    slope_se: np.ndarray
    slope_low: np.ndarray
    slope_high: np.ndarray
    x_ref: np.ndarray
    y_ref: np.ndarray
    residual_sd: np.ndarray
    sxx: np.ndarray
    n: np.ndarray
    ok: np.ndarray  # two or more distinct x


def line_fits(X: np.ndarray, Y: np.ndarray, msd: np.ndarray) -> LineFits:
    """``fit_drift(find_steps=False)`` on already-segmented NaN-padded rows (km, y-units)."""
    ts = theil_sen_stack(X, Y)
    valid = np.isfinite(X)
    n = valid.sum(axis=1)
    xmax = np.nanmax(np.where(valid, X, -np.inf), axis=1)
    xmin = np.nanmin(np.where(valid, X, np.inf), axis=1)
    ok = (n >= 2) & (xmax > xmin)
    resid = Y - (ts.intercept[:, None] + ts.slope[:, None] * X)
    rsd = np.where(n > 2, robust_sd_rows(resid), 0.0)
    rsd = np.maximum(np.nan_to_num(rsd, nan=0.0), msd)
    xbar = np.nansum(X, axis=1) / np.maximum(n, 1)
    sxx = np.nansum((X - xbar[:, None]) ** 2, axis=1)
    se = np.maximum((ts.slope_high - ts.slope_low) / (2.0 * Z95), 0.0)
    return LineFits(ts.slope, se, ts.slope_low, ts.slope_high, ts.x_ref, ts.y_ref, rsd, sxx, n, ok)


def step_screen(X: np.ndarray, Y: np.ndarray, slope0: np.ndarray, msd: np.ndarray) -> np.ndarray:
    """Whether the core's CUSUM step detector would signal on each row (bool, shape ``(m,)``).

    Mirrors ``fit_drift``'s first pass: σ from detrended successive differences, standardised
    recursive residuals from the segment start, a two-sided tabular CUSUM (k, h in σ units).
    """
    m, w = X.shape
    n = np.isfinite(X).sum(axis=1)
    eligible = n > STEP_WARMUP_READINGS
    if not eligible.any() or w <= STEP_WARMUP_READINGS:
        return np.zeros(m, dtype=bool)
    d = np.diff(Y, axis=1) - slope0[:, None] * np.diff(X, axis=1)  # NaN past each row's end
    d = d - sorted_median(d)[:, None]
    robust = robust_sd_rows(d)
    keep = np.isfinite(d) & ((robust[:, None] <= 0) | (np.abs(d) <= STEP_DIFF_CLIP * robust[:, None]))
    cnt = keep.sum(axis=1)
    ms = np.where(keep, d, 0.0) ** 2
    sigma = np.sqrt(ms.sum(axis=1) / np.maximum(cnt, 1)) / math.sqrt(2.0)
    sigma = np.maximum(np.where(n >= 3, sigma, 0.0), msd)
    # recursive residuals: reading i predicted from readings 0..i-1 (i ≥ warm-up)
    Xz, Yz = np.nan_to_num(X), np.nan_to_num(Y)
    cols = np.arange(w)
    targets = np.arange(STEP_WARMUP_READINGS, w)
    mask = cols[None, :] < targets[:, None]  # (p, w)
    L = targets.astype(float)
    xs = np.where(mask[None], Xz[:, None, :], 0.0)  # (m, p, w)
    ys = np.where(mask[None], Yz[:, None, :], 0.0)
    xbar = xs.sum(axis=2) / L
    ybar = ys.sum(axis=2) / L
    dxm = np.where(mask[None], xs - xbar[..., None], 0.0)
    sxx = np.sum(dxm**2, axis=2)
    sxy = np.sum(dxm * (ys - ybar[..., None]), axis=2)
    has = sxx > 0
    safe = np.where(has, sxx, 1.0)
    b = np.where(has, sxy / safe, 0.0)
    xt, yt = Xz[:, targets], Yz[:, targets]
    pred = ybar + b * (xt - xbar)
    lever = np.where(has, (xt - xbar) ** 2 / safe, 0.0)
    sd = sigma[:, None] * np.sqrt(1.0 + 1.0 / L[None, :] + lever)
    z = (yt - pred) / np.where(sd > 0, sd, 1.0)
    live = targets[None, :] < n[:, None]
    cp = np.zeros(m)
    cm = np.zeros(m)
    alarm = np.zeros(m, dtype=bool)
    for j in range(targets.size):
        zj = np.where(live[:, j], z[:, j], 0.0)
        cp = np.where(live[:, j], np.maximum(0.0, zj - CUSUM_K + cp), cp)
        cm = np.where(live[:, j], np.maximum(0.0, -zj - CUSUM_K + cm), cm)
        alarm |= live[:, j] & ((cp > CUSUM_H) | (cm > CUSUM_H))
    return alarm & eligible & (sigma > 0)



def runs(keys: np.ndarray):
    """Runs of equal values of a grouped (sorted) key array of length n: whether each element
    starts a run (n,), each element's run number (n,), each run's start and size (runs,)."""
    first = np.r_[True, keys[1:] != keys[:-1]] if keys.size else np.zeros(0, dtype=bool)
    gid = np.cumsum(first) - 1
    starts = np.flatnonzero(first)
    sizes = np.diff(np.r_[starts, keys.size])
    return first, gid, starts, sizes


def decreasing_runs(keys: np.ndarray, x: np.ndarray) -> dict:
    """``{key: whether x ever decreases within its run}`` of a grouped key array."""
    first, gid, starts, _ = runs(keys)
    down = np.zeros(keys.size, dtype=bool)
    down[1:] = (np.diff(x) < 0) & ~first[1:]
    any_down = np.zeros(starts.size, dtype=bool)
    any_down[gid[down]] = True
    return dict(zip(keys[starts].tolist(), any_down.tolist(), strict=True))
