"""Wear forecasts: ball-joint play and bush stiffness against odometer.

Units: odometer km, play mm, stiffness N/mm, toe deg (positive = toe-in, ISO 8855 — so a change
*toward toe-out* is a negative toe change).

* **Ball-joint play** (:func:`forecast_play`): Theil–Sen line of play against km (the drift
  module's fit, without step detection) with its prediction band; the forecast is where the band
  reaches the platform's play limit (early = upper band edge, likely = central line, late = lower
  edge).
* **Bush stiffness** (:func:`fit_stiffness_trend`, :func:`forecast_stiffness_criterion`): the
  stiffness values come from the corner engine (measured deflections → N/mm). The trend is
  log-linear decay, ``log k(km) = log k̃ + b·(km − km̃)``, fitted by Theil–Sen on ``log k`` with a
  prediction band in log space. A caller-supplied vectorised criterion ``g(stiffness) -> value``
  (e.g. the cornering toe change from the corner engine) is evaluated across the band at each km;
  the forecast is where ``g`` fails its threshold: early = somewhere in the band, likely = at the
  central stiffness, late = everywhere in the band. The criterion may be non-monotone: the band
  is sampled at :data:`BAND_SAMPLES` points.

A part replaced between readings starts a new segment (``replaced_before``), as an adjustment does
for alignment drift. Pure numpy; no Django.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .drift import (
    DEFAULT_CONFIDENCE,
    FORECAST_GRID_POINTS,
    CrossingForecast,
    DriftFit,
    LineTrend,
    _first_true,
    _km_to_date,
    _z,
    fit_drift,
    forecast_drift,
)

__all__ = [
    "BAND_SAMPLES",
    "BUSH_MODEL",
    "PLAY_MODEL",
    "StiffnessCriterion",
    "WearForecast",
    "fit_stiffness_trend",
    "forecast_play",
    "forecast_stiffness_criterion",
]

#: Points sampled across the stiffness band at each km (odd, so the centre is one of them).
BAND_SAMPLES: int = 9
#: Why no play forecast: the current segment (since the last replacement) lacks two distinct km.
NEED_TWO_PLAY_KM = "need play checks at two or more distinct odometer readings"
PLAY_MODEL: str = "ball-joint play: Theil–Sen line with prediction band"
BUSH_MODEL: str = "bush stiffness: log-linear Theil–Sen decay, criterion evaluated across band"


@dataclass(frozen=True)
class WearForecast:
    """A wear forecast.

    Attributes:
        fit: the underlying fit (readings used, segment, scale).
        trend: the trend (play in mm, or log stiffness) with its band.
        forecast: the crossing, in km and dates; feeds :mod:`.advice`.
    """

    fit: DriftFit
    trend: LineTrend
    forecast: CrossingForecast


def _check_km(km: NDArray[np.float64]) -> None:
    if np.any(km < 0):
        raise ValueError("odometer readings must be >= 0 km")


def forecast_play(
    km: ArrayLike,
    play_mm: ArrayLike,
    *,
    limit_mm: float,
    current_km: float,
    current_date: dt.date,
    km_per_day: float | None,
    horizon_km: float,
    replaced_before: ArrayLike | None = None,
    measurement_sd_mm: float = 0.0,
    confidence: float = DEFAULT_CONFIDENCE,
) -> WearForecast:
    """Where ball-joint play reaches the platform's limit.

    Args:
        km: shape ``(n,)``, odometer at each check (km), non-decreasing.
        play_mm: shape ``(n,)``, measured play (mm, ≥ 0).
        limit_mm: the platform's play limit (mm, > 0).
        current_km, current_date: where the vehicle is now.
        km_per_day: daily distance (km/day) for dates; None = no dates.
        horizon_km: how far ahead to look (km).
        replaced_before: bool ``(n,)``: the joint was replaced before this check.
        measurement_sd_mm: repeatability of one play measurement (mm); floors the scatter.

    Raises:
        ValueError: bad shapes or values, or fewer than two distinct km in the current segment.
    """
    x = np.asarray(km, dtype=float)
    y = np.asarray(play_mm, dtype=float)
    if x.ndim == 1 and x.size:
        _check_km(x)
    if np.any(y < 0):
        raise ValueError("play must be >= 0 mm")
    if not (math.isfinite(limit_mm) and limit_mm > 0):
        raise ValueError("limit_mm must be finite and > 0")
    fit = fit_drift(
        x,
        y,
        adjusted_before=replaced_before,
        measurement_sd=measurement_sd_mm,
        find_steps=False,
        confidence=confidence,
    )
    if fit.trend is None:
        raise ValueError(NEED_TWO_PLAY_KM)
    fc = forecast_drift(
        fit.trend,
        current_km=current_km,
        current_date=current_date,
        km_per_day=km_per_day,
        lower=None,
        upper=limit_mm,
        horizon_km=horizon_km,
        confidence=confidence,
        model=PLAY_MODEL,
    )
    return WearForecast(fit=fit, trend=fit.trend, forecast=fc)


def fit_stiffness_trend(
    km: ArrayLike,
    stiffness_N_per_mm: ArrayLike,
    *,
    replaced_before: ArrayLike | None = None,
    relative_sd: float = 0.0,
    confidence: float = DEFAULT_CONFIDENCE,
) -> DriftFit:
    """Log-linear stiffness decay: Theil–Sen of ``log(stiffness)`` against km.

    Args:
        km: shape ``(n,)``, odometer (km), non-decreasing.
        stiffness_N_per_mm: shape ``(n,)``, effective stiffness (N/mm, > 0).
        replaced_before: bool ``(n,)``: the bush was replaced before this check.
        relative_sd: repeatability of one stiffness value as a fraction (≈ sd of log k).

    Returns:
        :class:`~.drift.DriftFit` whose trend is in log(N/mm); its slope is per km.
    """
    x = np.asarray(km, dtype=float)
    k = np.asarray(stiffness_N_per_mm, dtype=float)
    if x.ndim == 1 and x.size:
        _check_km(x)
    if k.ndim != 1 or not np.all(np.isfinite(k)) or np.any(k <= 0):
        raise ValueError("stiffness must be finite and > 0 N/mm, shape (n,)")
    fit = fit_drift(
        x,
        np.log(k),
        adjusted_before=replaced_before,
        measurement_sd=relative_sd,
        find_steps=False,
        confidence=confidence,
    )
    if fit.trend is None:
        raise ValueError("need stiffness values at two or more distinct odometer readings")
    return fit


@dataclass(frozen=True)
class StiffnessCriterion:
    """A failure rule on stiffness: ``function(stiffness) < threshold`` (or ``>``).

    Attributes:
        function: vectorised, elementwise ``stiffness (N/mm, any shape) -> value`` of the same
            shape (e.g. cornering toe change in deg from the corner engine).
        threshold: the value at which the rule fails.
        fails_when: ``"below"`` or ``"above"`` the threshold.
        label: plain words for the evidence.
    """

    function: Callable[[NDArray[np.float64]], NDArray[np.float64]]
    threshold: float
    fails_when: Literal["below", "above"]
    label: str

    @classmethod
    def toe_out(
        cls, toe_change_deg: Callable[[NDArray[np.float64]], NDArray[np.float64]]
    ) -> StiffnessCriterion:
        """Fails when the loaded wheel's toe change turns toward toe-out (below 0 deg)."""
        return cls(toe_change_deg, 0.0, "below", "toe change under load turns toward toe-out")

    @classmethod
    def toe_change_allowance(
        cls,
        toe_change_deg: Callable[[NDArray[np.float64]], NDArray[np.float64]],
        allowance_deg: float,
    ) -> StiffnessCriterion:
        """Fails when ``|toe change|`` under load passes the platform's allowance (deg)."""
        if not (math.isfinite(allowance_deg) and allowance_deg > 0):
            raise ValueError("allowance_deg must be finite and > 0")

        def magnitude(k: NDArray[np.float64]) -> NDArray[np.float64]:
            return np.abs(toe_change_deg(k))

        return cls(
            magnitude,
            float(allowance_deg),
            "above",
            f"toe change under load passes the allowance of {allowance_deg:g} deg",
        )


def forecast_stiffness_criterion(
    fit: DriftFit,
    criterion: StiffnessCriterion,
    *,
    current_km: float,
    current_date: dt.date,
    km_per_day: float | None,
    horizon_km: float,
    confidence: float = DEFAULT_CONFIDENCE,
) -> WearForecast:
    """Where a stiffness criterion fails, with uncertainty from the trend's band.

    Args:
        fit: from :func:`fit_stiffness_trend` (trend in log N/mm).
        criterion: the failure rule.
        current_km, current_date: where the vehicle is now.
        km_per_day: daily distance (km/day) for dates; None = no dates.
        horizon_km: how far ahead to look (km, > 0).

    Raises:
        ValueError: the criterion does not return finite values of the input's shape.
    """
    if fit.trend is None:
        raise ValueError("the stiffness fit has no trend")
    if not (math.isfinite(current_km) and math.isfinite(horizon_km) and horizon_km > 0):
        raise ValueError("current_km must be finite and horizon_km finite and > 0")
    trend = fit.trend
    z = _z(confidence)
    u = np.linspace(-1.0, 1.0, BAND_SAMPLES)
    centre = BAND_SAMPLES // 2

    def failing(km: NDArray[np.float64]) -> NDArray[np.bool_]:
        km = np.asarray(km, dtype=float)
        mid = trend.y_ref + trend.slope * (km - trend.x_ref)
        half = z * np.sqrt(
            trend.residual_sd**2 * (1.0 + 1.0 / trend.n) + trend.slope_se**2 * (km - trend.x_ref) ** 2
        )
        stiff = np.exp(mid[:, None] + u[None, :] * half[:, None])
        val = np.asarray(criterion.function(stiff), dtype=float)
        if val.shape != stiff.shape or not np.all(np.isfinite(val)):
            raise ValueError("the criterion must return finite values of its input's shape")
        if criterion.fails_when == "below":
            return val < criterion.threshold
        return val > criterion.threshold

    def early_fn(km: NDArray[np.float64]) -> NDArray[np.bool_]:
        return failing(km).any(axis=1)

    def likely_fn(km: NDArray[np.float64]) -> NDArray[np.bool_]:
        return failing(km)[:, centre]

    def late_fn(km: NDArray[np.float64]) -> NDArray[np.bool_]:
        return failing(km).all(axis=1)

    grid = np.linspace(current_km, current_km + horizon_km, FORECAST_GRID_POINTS)
    flags = failing(grid)
    early = _first_true(grid, flags.any(axis=1), early_fn, current_km)
    likely = _first_true(grid, flags[:, centre], likely_fn, current_km)
    late = _first_true(grid, flags.all(axis=1), late_fn, current_km)
    if likely is not None and likely == current_km:
        status = "out_now"
    elif early is not None:
        status = "crossing"
    else:
        status = "not_within_horizon"
    fc = CrossingForecast(
        status=status,
        side="lower" if criterion.fails_when == "below" else "upper",
        early_km=early,
        likely_km=likely,
        late_km=late,
        early_date=_km_to_date(early, current_km, current_date, km_per_day),
        likely_date=_km_to_date(likely, current_km, current_date, km_per_day),
        late_date=_km_to_date(late, current_km, current_date, km_per_day),
        horizon_km=current_km + horizon_km,
        model=BUSH_MODEL,
        notes=(criterion.label,),
    )
    return WearForecast(fit=fit, trend=trend, forecast=fc)
