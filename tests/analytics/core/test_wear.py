"""Wear forecasts: ball-joint play and bush stiffness criteria."""

import datetime as dt
import math

import numpy as np
import pytest

from analytics.core.wear import (
    StiffnessCriterion,
    fit_stiffness_trend,
    forecast_play,
    forecast_stiffness_criterion,
)

TODAY = dt.date(2025, 6, 1)


def play_history(seed, n=8, rate=1e-5, sd=0.02):
    rng = np.random.default_rng(seed)
    km = np.linspace(5000.0, 45000.0, n)
    return km, 0.2 + rate * km + rng.normal(0, sd, n)


def test_play_reaches_the_limit_where_the_line_does():
    km, play = play_history(0, sd=0.0)
    w = forecast_play(
        km, play, limit_mm=1.0, current_km=45000.0, current_date=TODAY, km_per_day=40.0,
        horizon_km=100000.0, measurement_sd_mm=0.01,
    )
    f = w.forecast
    # 0.2 mm + 1e-5 mm/km reaches 1.0 mm at 80,000 km (exact line)
    assert f.likely_km == pytest.approx(80000.0, abs=1e-3)
    assert f.early_km < f.likely_km < f.late_km
    assert f.likely_date == TODAY + dt.timedelta(days=math.floor(35000.0 / 40.0))


def test_play_forecast_window_contains_the_true_crossing_for_most_seeds():
    inside = 0
    for seed in range(100):
        km, play = play_history(seed)
        f = forecast_play(
            km, play, limit_mm=1.0, current_km=45000.0, current_date=TODAY, km_per_day=40.0,
            horizon_km=150000.0,
        ).forecast
        if f.early_km is not None and f.late_km is not None:
            inside += f.early_km <= 80000.0 <= f.late_km
    assert inside >= 85


def test_play_already_past_the_limit_is_out_now():
    f = forecast_play(
        [0.0, 10000.0, 20000.0], [0.8, 1.0, 1.2], limit_mm=1.0, current_km=20000.0,
        current_date=TODAY, km_per_day=None, horizon_km=10000.0,
    ).forecast
    assert f.status == "out_now" and f.early_date is None


def test_play_input_is_checked():
    with pytest.raises(ValueError, match="play"):
        forecast_play([0.0, 1.0], [-0.1, 0.2], limit_mm=1.0, current_km=1.0,
                      current_date=TODAY, km_per_day=1.0, horizon_km=10.0)
    with pytest.raises(ValueError, match="limit_mm"):
        forecast_play([0.0, 1.0], [0.1, 0.2], limit_mm=0.0, current_km=1.0,
                      current_date=TODAY, km_per_day=1.0, horizon_km=10.0)
    with pytest.raises(ValueError, match="two or more"):
        forecast_play([1.0, 1.0], [0.1, 0.2], limit_mm=1.0, current_km=1.0,
                      current_date=TODAY, km_per_day=1.0, horizon_km=10.0)


def toe_change(k):
    """Simple stand-in for the corner engine: stiff bushes give toe-in, soft ones toe-out (deg)."""
    return 0.05 - 20.0 / k  # zero at 400 N/mm


def stiffness_history(seed, sd=0.03):
    rng = np.random.default_rng(seed)
    km = np.linspace(0.0, 30000.0, 10)
    k = 1000.0 * np.exp(-km / 50000.0) * np.exp(rng.normal(0, sd, km.size))
    return km, k


def test_toe_out_onset_from_a_log_linear_stiffness_decay():
    km, k = stiffness_history(0, sd=0.0)
    fit = fit_stiffness_trend(km, k, relative_sd=0.01)
    w = forecast_stiffness_criterion(
        fit, StiffnessCriterion.toe_out(toe_change), current_km=30000.0, current_date=TODAY,
        km_per_day=50.0, horizon_km=60000.0,
    )
    f = w.forecast
    # 1000·exp(−km/50000) = 400 N/mm at km = 50000·ln 2.5 (closed form)
    assert f.likely_km == pytest.approx(50000.0 * math.log(2.5), rel=1e-6)
    assert f.early_km < f.likely_km < f.late_km
    assert f.status == "crossing" and "toe-out" in f.notes[0]


def test_toe_out_window_contains_the_true_onset_for_most_seeds():
    truth = 50000.0 * math.log(2.5)
    inside = 0
    for seed in range(100):
        fit = fit_stiffness_trend(*stiffness_history(seed))
        f = forecast_stiffness_criterion(
            fit, StiffnessCriterion.toe_out(toe_change), current_km=30000.0,
            current_date=TODAY, km_per_day=50.0, horizon_km=100000.0,
        ).forecast
        inside += f.early_km is not None and f.early_km <= truth <= (f.late_km or math.inf)
    assert inside >= 85


def test_an_allowance_on_the_size_of_the_toe_change():
    km, k = stiffness_history(0, sd=0.0)
    fit = fit_stiffness_trend(km, k, relative_sd=0.01)
    crit = StiffnessCriterion.toe_change_allowance(toe_change, 0.02)
    f = forecast_stiffness_criterion(
        fit, crit, current_km=30000.0, current_date=TODAY, km_per_day=50.0, horizon_km=80000.0
    ).forecast
    # |0.05 − 20/k| > 0.02 first when 20/k > 0.07 → k < 285.7 N/mm
    assert f.likely_km == pytest.approx(50000.0 * math.log(1000.0 / (20.0 / 0.07)), rel=1e-6)


def test_a_criterion_that_is_not_elementwise_is_refused():
    fit = fit_stiffness_trend(*stiffness_history(1))
    crit = StiffnessCriterion(lambda k: float(np.mean(k)), 400.0, "below", "mean")
    with pytest.raises(ValueError, match="shape"):
        forecast_stiffness_criterion(
            fit, crit, current_km=30000.0, current_date=TODAY, km_per_day=50.0,
            horizon_km=1000.0,
        )


def test_stiffness_must_be_positive():
    with pytest.raises(ValueError, match="> 0"):
        fit_stiffness_trend([0.0, 1.0], [100.0, 0.0])
