"""Alignment drift: Theil–Sen, segments, step splitting, shrinkage, forecasts."""

import datetime as dt
import math

import numpy as np
import pytest
from scipy import stats

from analytics.core.drift import (
    LineTrend,
    daily_distance_rate,
    fit_drift,
    forecast_crossing,
    forecast_drift,
    shrink_drift,
    shrink_slopes,
    theil_sen,
    theil_sen_stack,
)


def series(seed, n, slope=2e-5, sd=0.03, spacing=1000.0):
    rng = np.random.default_rng(seed)
    x = np.cumsum(rng.uniform(0.5, 1.5, n)) * spacing
    return x, 0.1 + slope * x + rng.normal(0, sd, n)


# --------------------------------------------------------------------- Theil–Sen


@pytest.mark.parametrize("n", [2, 3, 4, 7, 15, 40])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_theil_sen_matches_scipy_including_ties(n, seed):
    rng = np.random.default_rng(seed)
    x = np.round(rng.uniform(0, 60000, n), -3)  # rounded: repeated x
    y = np.round(1e-5 * x + rng.normal(0, 0.05, n), 2)  # rounded: repeated y
    if np.unique(x).size < 2:
        x[-1] += 1000.0
    ours = theil_sen(x, y, confidence=0.9)
    ref = stats.theilslopes(y, x, alpha=0.9)  # reference: scipy.stats.theilslopes
    assert ours.slope == pytest.approx(ref.slope, rel=1e-12, abs=1e-15)
    assert ours.intercept == pytest.approx(ref.intercept, rel=1e-12, abs=1e-12)
    assert ours.slope_low == pytest.approx(ref.low_slope, rel=1e-12, abs=1e-15)
    assert ours.slope_high == pytest.approx(ref.high_slope, rel=1e-12, abs=1e-15)


def test_stack_with_nan_padding_matches_scipy_row_by_row():
    rng = np.random.default_rng(7)
    m, n = 25, 12
    x = np.full((m, n), np.nan)
    y = np.full((m, n), np.nan)
    lengths = rng.integers(2, n + 1, m)
    for r, k in enumerate(lengths):
        x[r, :k] = np.sort(rng.uniform(0, 400, k))  # days
        y[r, :k] = 0.001 * x[r, :k] + rng.normal(0, 0.02, k)
    s = theil_sen_stack(x, y)
    for r, k in enumerate(lengths):
        ref = stats.theilslopes(y[r, :k], x[r, :k])  # reference: scipy.stats.theilslopes
        assert s.slope[r] == pytest.approx(ref.slope, rel=1e-12)
        assert s.intercept[r] == pytest.approx(ref.intercept, rel=1e-12, abs=1e-12)
        assert s.slope_low[r] == pytest.approx(ref.low_slope, rel=1e-12)
        assert s.slope_high[r] == pytest.approx(ref.high_slope, rel=1e-12)
        assert s.n[r] == k


def test_stack_with_ties_unsorted_x_and_padding_matches_scipy_row_by_row():
    """Repeated odometers and angles (the tie correction of Sen's interval), x not in order,
    rows of every length including one point."""
    rng = np.random.default_rng(17)
    m, n = 60, 24
    x = np.full((m, n), np.nan)
    y = np.full((m, n), np.nan)
    lengths = rng.integers(1, n + 1, m)
    for r, k in enumerate(lengths):
        x[r, :k] = np.round(rng.uniform(0, 60_000, k), -4)  # rounded: many ties
        y[r, :k] = np.round(1e-5 * x[r, :k] + rng.normal(0, 0.05, k), 1)
    s = theil_sen_stack(x, y, confidence=0.9)
    checked = 0
    for r, k in enumerate(lengths):
        if np.unique(x[r, :k]).size < 2:
            assert math.isnan(s.slope[r])
            continue
        ref = stats.theilslopes(y[r, :k], x[r, :k], alpha=0.9)  # reference: scipy.stats.theilslopes
        assert s.slope[r] == pytest.approx(ref.slope, rel=1e-12, abs=1e-15)
        assert s.slope_low[r] == pytest.approx(ref.low_slope, rel=1e-12, abs=1e-15)
        assert s.slope_high[r] == pytest.approx(ref.high_slope, rel=1e-12, abs=1e-15)
        checked += 1
    assert checked > 40


def test_a_stack_row_with_one_reading_holds_nan_without_warnings():
    s = theil_sen_stack([[1.0, np.nan], [1.0, 2.0]], [[0.1, np.nan], [0.1, 0.3]])
    assert math.isnan(s.slope[0]) and s.slope[1] == pytest.approx(0.2)


def test_theil_sen_refuses_bad_input():
    with pytest.raises(ValueError, match="distinct"):
        theil_sen([1.0, 1.0], [0.0, 1.0])
    with pytest.raises(ValueError, match="finite"):
        theil_sen([1.0, np.inf], [0.0, 1.0])
    with pytest.raises(ValueError, match="same shape"):
        theil_sen([1.0, 2.0], [0.0])
    with pytest.raises(ValueError, match="confidence"):
        theil_sen([1.0, 2.0], [0.0, 1.0], confidence=1.5)


# --------------------------------------------------------------------- segments and steps


def test_only_the_segment_after_the_last_adjustment_is_used_for_the_slope():
    x, y = series(3, 20)
    adjusted = np.zeros(20, dtype=bool)
    adjusted[12] = True
    y[12:] -= 0.4  # the technician reset the angle
    fit = fit_drift(x, y, adjusted_before=adjusted, find_steps=False)
    ref = stats.theilslopes(y[12:], x[12:])  # reference: scipy.stats.theilslopes
    assert fit.segment_start == 12 and fit.fit_start == 12 and fit.n_used == 8
    assert fit.fit.slope == pytest.approx(ref.slope, rel=1e-12)
    seg = np.repeat([0, 1], [12, 8])
    assert fit_drift(x, y, segment=seg, find_steps=False).fit.slope == fit.fit.slope


def test_a_kerb_strike_step_is_found_at_its_index_and_not_taken_for_drift():
    exact = near = 0
    own, naive = [], []
    for seed in range(60):
        x, y = series(seed, 40, slope=2e-5, sd=0.03)
        y[25:] += 0.12  # a 4σ step at reading 25
        fit = fit_drift(x, y)
        starts = [s.start_index for s in fit.steps]
        exact += 25 in starts
        near += any(abs(s - 25) <= 1 for s in starts)
        own.append(fit.fit.slope)
        naive.append(stats.theilslopes(y, x).slope)  # reference: scipy.stats.theilslopes
    assert exact >= 50 and near >= 57
    # after the split the slope is the drift (2e-5 deg/km); without it the step inflates it
    own_error = abs(np.median(own) - 2e-5)
    naive_error = abs(np.median(naive) - 2e-5)
    assert own_error < 0.1e-5 and naive_error > 3 * own_error


def test_in_control_series_rarely_report_a_step():
    alarms = sum(bool(fit_drift(*series(s, 30)).steps) for s in range(100))
    # known-σ ARL 465 (Montgomery, from memory) gives ~6 % for 26 tests; σ is estimated here
    assert alarms <= 20


def test_fit_drift_refuses_bad_input():
    with pytest.raises(ValueError, match="non-decreasing"):
        fit_drift([2.0, 1.0], [0.0, 0.1])
    with pytest.raises(ValueError, match="not both"):
        fit_drift([1.0, 2.0], [0.0, 0.1], adjusted_before=np.zeros(2, bool), segment=[0, 0])
    with pytest.raises(ValueError, match="boolean"):
        fit_drift([1.0, 2.0], [0.0, 0.1], adjusted_before=[0, 1])
    with pytest.raises(ValueError, match="measurement_sd"):
        fit_drift([1.0, 2.0], [0.0, 0.1], measurement_sd=-1.0)


def test_a_segment_with_one_reading_has_no_trend():
    fit = fit_drift([1.0, 2.0, 3.0], [0.0, 0.1, 0.5], adjusted_before=np.array([0, 0, 1], bool))
    assert fit.fit is None and fit.trend is None and math.isinf(fit.sampling_variance)


# --------------------------------------------------------------------- shrinkage


def test_dersimonian_laird_tau2_for_equal_variances_is_sample_variance_minus_v():
    # reference: DerSimonian & Laird (1986), Controlled Clinical Trials 7:177 (method of
    # moments); with equal v_i the estimator reduces to var(b) − v (from memory)
    b = np.array([1.0, 2.0, 4.0, 7.0])
    v = 0.5
    out = shrink_slopes(b, np.full(4, v))
    assert out.pooled.tau2 == pytest.approx(np.var(b, ddof=1) - v, rel=1e-12)
    assert out.pooled.mean == pytest.approx(b.mean(), rel=1e-12)
    weight = v / (v + out.pooled.tau2)
    np.testing.assert_allclose(out.slope, b.mean() + (1 - weight) * (b - b.mean()), rtol=1e-12)


def test_shrinkage_pulls_noisy_vehicles_most_and_lowers_the_error():
    rng = np.random.default_rng(11)
    m = 400
    theta = rng.normal(2e-5, 0.5e-5, m)  # true per-vehicle drift rates, deg/km
    v = rng.choice([0.1e-10, 4e-10], m)  # many or few readings
    b = theta + rng.normal(0, np.sqrt(v))
    out = shrink_slopes(b, v)
    assert out.pooled.tau2 == pytest.approx(0.25e-10, rel=0.3)
    assert np.mean((out.slope - theta) ** 2) < 0.7 * np.mean((b - theta) ** 2)
    assert out.weight_on_pooled[v > 1e-10].min() > out.weight_on_pooled[v < 1e-10].max()
    # the posterior interval covers the truth about as often as it says
    cover = np.mean(np.abs(out.slope - theta) <= 1.96 * out.slope_se)
    assert 0.9 <= cover <= 0.99


def test_a_vehicle_without_a_slope_gets_the_pooled_rate():
    out = shrink_slopes([1.0, 2.0, 3.0, np.nan], [0.1, 0.1, 0.1, np.inf])
    assert out.slope[3] == pytest.approx(out.pooled.mean)
    assert out.slope_se[3] ** 2 == pytest.approx(out.pooled.tau2 + out.pooled.mean_se**2)
    assert out.weight_on_pooled[3] == 1.0


def test_too_few_vehicles_are_not_pooled():
    out = shrink_slopes([1.0, 2.0], [0.1, 0.1])
    np.testing.assert_allclose(out.slope, [1.0, 2.0])
    assert "not pooled" in out.pooled.method


def test_shrink_drift_uses_the_fits_and_a_pooled_scale_for_short_series():
    fits = [fit_drift(*series(s, 12), measurement_sd=0.01) for s in range(5)]
    fits.append(fit_drift(*series(9, 2), measurement_sd=0.0))  # two readings: no own scale
    out = shrink_drift(fits)
    assert np.all(np.isfinite(out.slope)) and out.pooled.vehicles == 6
    assert out.weight_on_pooled[-1] >= out.weight_on_pooled[:-1].max()


def test_shrink_slopes_refuses_bad_variances():
    with pytest.raises(ValueError, match="> 0"):
        shrink_slopes([1.0, 2.0, 3.0], [0.1, 0.0, 0.1])
    with pytest.raises(ValueError, match="shape"):
        shrink_slopes([1.0, 2.0], [0.1])


# --------------------------------------------------------------------- forecast


def test_the_central_crossing_is_where_the_line_meets_the_limit():
    trend = LineTrend(slope=2e-5, slope_se=2e-6, x_ref=10000.0, y_ref=0.1, residual_sd=0.02, n=10)
    c = forecast_crossing(trend, current_x=12000.0, lower=-0.3, upper=0.5, horizon=60000.0)
    assert c.status == "crossing" and c.side == "upper"
    assert c.likely == pytest.approx(10000.0 + (0.5 - 0.1) / 2e-5, abs=1e-3)
    assert c.early < c.likely < c.late
    lo, _, hi = trend.band(np.array([c.early, c.late]))
    assert hi[0] == pytest.approx(0.5, abs=1e-9)  # the near edge touches the limit at "early"
    assert lo[1] == pytest.approx(0.5, abs=1e-9)  # the far edge at "late"


def test_no_crossing_within_the_horizon_is_said_explicitly():
    trend = LineTrend(slope=1e-7, slope_se=1e-8, x_ref=0.0, y_ref=0.0, residual_sd=0.01, n=20)
    c = forecast_crossing(trend, current_x=0.0, lower=-0.5, upper=0.5, horizon=50000.0)
    assert c.status == "not_within_horizon"
    assert c.early is None and c.likely is None and c.late is None


def test_a_reading_already_outside_is_out_now():
    trend = LineTrend(slope=0.0, slope_se=0.0, x_ref=0.0, y_ref=0.6, residual_sd=0.01, n=5)
    c = forecast_crossing(trend, current_x=100.0, lower=-0.5, upper=0.5, horizon=1000.0)
    assert c.status == "out_now" and c.early == c.likely == 100.0


def test_the_prediction_band_covers_new_readings_at_its_level():
    inside = total = 0
    for seed in range(300):
        x, y = series(seed, 15, sd=0.03)
        trend = fit_drift(x, y, find_steps=False).trend
        rng = np.random.default_rng(1000 + seed)
        x_new = x[-1] + rng.uniform(0, 10000, 5)
        y_new = 0.1 + 2e-5 * x_new + rng.normal(0, 0.03, 5)
        lo, _, hi = trend.band(x_new, 0.95)
        inside += int(np.sum((y_new >= lo) & (y_new <= hi)))
        total += 5
    assert 0.88 <= inside / total <= 0.99


def test_forecast_drift_dates_follow_the_daily_distance_rate():
    trend = LineTrend(slope=2e-5, slope_se=1e-6, x_ref=0.0, y_ref=0.0, residual_sd=0.01, n=10)
    today = dt.date(2025, 3, 1)
    f = forecast_drift(
        trend, current_km=5000.0, current_date=today, km_per_day=50.0,
        lower=-0.4, upper=0.4, horizon_km=50000.0,
    )
    assert f.likely_km == pytest.approx(20000.0, abs=1e-3)
    assert f.likely_date == today + dt.timedelta(days=math.floor((f.likely_km - 5000.0) / 50.0))
    assert f.early_date <= f.likely_date <= f.late_date
    parked = forecast_drift(
        trend, current_km=5000.0, current_date=today, km_per_day=None,
        lower=-0.4, upper=0.4, horizon_km=50000.0,
    )
    assert parked.likely_km == f.likely_km and parked.likely_date is None and parked.notes


def test_a_faster_drift_over_time_brings_the_date_forward():
    trend_km = LineTrend(slope=1e-5, slope_se=0.0, x_ref=0.0, y_ref=0.0, residual_sd=0.0, n=10)
    trend_days = LineTrend(slope=0.004, slope_se=0.0, x_ref=0.0, y_ref=0.0, residual_sd=0.0, n=10)
    today = dt.date(2025, 1, 1)
    f = forecast_drift(
        trend_km, current_km=0.0, current_date=today, km_per_day=40.0, lower=None, upper=0.4,
        horizon_km=100000.0, trend_days=trend_days, current_day=0.0,
    )
    # km: 40,000 km at 40 km/day = day 1000; time: 0.4 / 0.004 = day 100
    assert f.likely_date == today + dt.timedelta(days=100)
    assert f.likely_km == pytest.approx(40000.0, abs=1e-3)


def test_daily_distance_rate_from_the_odometer_history():
    days = np.array([0.0, 30.0, 95.0, 180.0, 400.0])
    km = 12000.0 + 42.0 * days
    r = daily_distance_rate(days, km)
    assert r.km_per_day == pytest.approx(42.0, rel=1e-12)
    with pytest.raises(ValueError, match="backwards"):
        daily_distance_rate(days, km[::-1])


def test_forecast_refuses_bad_limits():
    trend = LineTrend(slope=0.0, slope_se=0.0, x_ref=0.0, y_ref=0.0, residual_sd=0.0, n=1)
    with pytest.raises(ValueError, match="lower < upper"):
        forecast_crossing(trend, current_x=0.0, lower=0.5, upper=-0.5, horizon=10.0)
    with pytest.raises(ValueError, match="at least one"):
        forecast_crossing(trend, current_x=0.0, lower=None, upper=None, horizon=10.0)
    with pytest.raises(ValueError, match="horizon"):
        forecast_crossing(trend, current_x=0.0, lower=-1.0, upper=1.0, horizon=0.0)
