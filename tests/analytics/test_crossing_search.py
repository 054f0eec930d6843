"""The bounded first-crossing search of the fleet recompute gives what evaluating every grid point
gives, element for element, and the crossings the core's own ``forecast_crossing`` gives.

References: the full-grid evaluation (``_band`` at every point, then ``any``/``argmax``) is the
rule the core's ``analytics.core.drift.forecast_crossing`` applies one series at a time; the
series are random (seeded) plus edge cases chosen by hand (a band edge exactly on the limit,
flat and vertical bands, no limit on one side, NaN parameters, a crossing at the first and at the
last grid point). No database."""
import numpy as np
import pytest

from analytics import fleet_recompute as fr
from analytics.core import crossing_search, stacks, stiffness_sign
from analytics.core.drift import FORECAST_GRID_POINTS, LineTrend, forecast_crossing


def _full_grid(grid, P, lower, upper):
    lo, c, hi = crossing_search.band(grid, *[p[:, None] for p in P])
    up, low = upper[:, None], lower[:, None]
    flags = [(hi > up) | (lo < low), (c > up) | (c < low), (lo > up) | (hi < low)]
    return [(f.any(axis=1), np.argmax(f, axis=1)) for f in flags]


def _random_series(rng, m):
    slope = rng.normal(0.0, 2e-6, m) * rng.choice([0.0, 1.0, 10.0], m, p=[0.05, 0.8, 0.15])
    se = np.abs(rng.normal(0.0, 5e-7, m)) * rng.choice([0.0, 1.0], m, p=[0.05, 0.95])
    xref = rng.uniform(0.0, 150_000.0, m)
    yref = rng.normal(0.0, 0.08, m)
    rsd = np.abs(rng.normal(0.0, 0.02, m)) * rng.choice([0.0, 1.0], m, p=[0.05, 0.95])
    n = rng.integers(2, 25, m).astype(float)
    current = xref + rng.uniform(-20_000.0, 60_000.0, m)
    half_width = rng.uniform(0.02, 0.3, m)
    nominal = rng.normal(0.0, 0.05, m)
    lower, upper = nominal - half_width, nominal + half_width
    one_sided = rng.random(m) < 0.2
    lower[one_sided] = -np.inf
    return (slope, se, xref, yref, rsd, n), current, lower, upper


def _edge_series():
    rows = [  # slope, se, xref, yref, rsd, n, current, lower, upper
        (0.0, 0.0, 0.0, 0.1, 0.0, 5, 0.0, -0.1, 0.1),          # centre exactly on the limit
        (0.0, 0.0, 0.0, 0.1000001, 0.0, 5, 0.0, -0.1, 0.1),    # out from the first point
        (1e-6, 0.0, 0.0, 0.0, 0.0, 5, 0.0, -0.1, 0.1),         # reaches it at 100 000 km
        (1e-6, 0.0, 0.0, 0.0, 0.0, 5, -100_000.0, -0.3, 0.1),  # at the last grid point
        (-1e-6, 1e-7, 50_000.0, 0.0, 0.01, 8, 0.0, -0.1, 0.1),  # band opens around x_ref
        (0.0, 1e-6, 60_000.0, 0.0, 0.0, 3, 0.0, -0.05, 0.05),  # flat centre, widening band
        (2e-6, 0.0, 0.0, 0.0, 0.0, 5, 0.0, -np.inf, np.inf),   # no limits at all
        (np.nan, 1e-7, 0.0, 0.0, 0.01, 5, 0.0, -0.1, 0.1),     # a fit that failed
        (1e-6, 1e-7, 0.0, 0.0, 0.01, 5, 0.0, -0.1, 0.1),
        (-3e-6, 5e-7, 40_000.0, 0.05, 0.03, 4, 45_000.0, -0.08, np.inf),
        # the whole band above the limit only near x_ref, inside a block: the narrowest
        # half-width lies between the block's ends
        (0.0, 2e-5, 9_375.0, 0.2, 0.0419, 5, 0.0, -0.1, 0.1),
    ]
    a = np.array(rows, dtype=float)
    return tuple(a[:, i] for i in range(6)), a[:, 6], a[:, 7], a[:, 8]


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_the_bounded_search_finds_the_full_grid_s_first_flags_exactly(seed):
    rng = np.random.default_rng(seed)
    P, current, lower, upper = _random_series(rng, 4000)
    eP, ecur, elow, eup = _edge_series()
    P = tuple(np.concatenate([a, b]) for a, b in zip(P, eP, strict=True))
    current, lower, upper = (np.concatenate(v) for v in ((current, ecur), (lower, elow),
                                                          (upper, eup)))
    for horizon in (80_000.0, 250_000.0):
        grid = np.linspace(current, current + horizon, FORECAST_GRID_POINTS, axis=1)
        want = _full_grid(grid, P, lower, upper)
        got = crossing_search.first_flags(grid, P, lower, upper)
        for (wa, wi), (ga, gi) in zip(want, got, strict=True):
            np.testing.assert_array_equal(ga, wa)
            np.testing.assert_array_equal(gi[wa], wi[wa])
        # each criterion occurs in the sample, at the first point and later
        assert all(w[0].any() and (w[1][w[0]] > 0).any() and (w[1][w[0]] == 0).any()
                   for w in want)


def test_the_narrowest_band_inside_a_block_is_found():
    P, current, lower, upper = _edge_series()
    grid = np.linspace(current, current + 100_000.0, FORECAST_GRID_POINTS, axis=1)
    (_, _), (_, _), (late_any, late_first) = _full_grid(grid, P, lower, upper)
    block = crossing_search.FLAG_BLOCK
    assert late_any[-1] and late_first[-1] % block not in (0, block - 1)
    assert crossing_search.first_flags(grid, P, lower, upper)[2][1][-1] == late_first[-1]


def test_a_row_that_does_not_rise_is_evaluated_at_every_point():
    P, current, lower, upper = _edge_series()
    grid = np.linspace(current, current + 100_000.0, FORECAST_GRID_POINTS, axis=1)
    grid[2] = grid[2][::-1]  # falling: the block bounds would not hold, so none are used
    want, got = _full_grid(grid, P, lower, upper), crossing_search.first_flags(grid, P, lower, upper)
    for (wa, wi), (ga, gi) in zip(want, got, strict=True):
        np.testing.assert_array_equal(ga, wa)
        np.testing.assert_array_equal(gi[wa], wi[wa])


def test_the_vectorised_crossings_are_the_core_s_forecast_crossing():
    rng = np.random.default_rng(11)
    P, current, lower, upper = _random_series(rng, 300)
    early, likely, late, _ = crossing_search.crossings(*P, current=current, lower=lower, upper=upper,
                                          horizon=np.full(current.size, 200_000.0))
    checked = 0
    for i in range(current.size):
        slope, se, xref, yref, rsd, n = (float(p[i]) for p in P)
        one = forecast_crossing(LineTrend(slope, se, xref, yref, rsd, int(n)),
                                current_x=float(current[i]),
                                lower=None if np.isinf(lower[i]) else float(lower[i]),
                                upper=float(upper[i]), horizon=200_000.0)
        for got, want in ((early[i], one.early), (likely[i], one.likely), (late[i], one.late)):
            if want is None:
                assert np.isnan(got)
            else:
                assert got == pytest.approx(want, rel=0, abs=1e-6)
                checked += 1
    assert checked > 100


def _stiffness_failing(f, rows, km, below_zero):
    """Whether each band sample's stiffness is below zero at ``km`` (r, g) → (r, g, samples): the
    formula of ``forecast_stiffness_criterion``, written out here."""
    from analytics.core.wear import BAND_SAMPLES

    slope, se, xref, yref = (a[rows, None] for a in (f.slope, f.slope_se, f.x_ref, f.y_ref))
    rsd, n = f.residual_sd[rows, None], f.n[rows, None].astype(float)
    mid = yref + slope * (km - xref)
    half = fr.Z95 * np.sqrt(rsd**2 * (1.0 + 1.0 / n) + se**2 * (km - xref) ** 2)
    u = np.linspace(-1.0, 1.0, BAND_SAMPLES)
    return below_zero(np.exp(mid[..., None] + u * half[..., None]))


@pytest.mark.parametrize("link", ["toe link", "spring link"])
def test_the_bounded_stiffness_search_gives_the_full_grid_s_crossings(link, monkeypatch):
    from analytics.core.compliance import toe_change_for_link_stiffness
    from analytics.core.demo_corners import demo_corner
    from analytics.core.wear import BAND_SAMPLES

    corner = demo_corner("rear", "left")
    force = np.array([0.0, -3500.0, 0.0])  # N, inboard on a left outer rear wheel

    def fn(k):
        k = np.asarray(k, dtype=float)
        return toe_change_for_link_stiffness(corner, force, link, k.ravel()).reshape(k.shape)

    sign = stiffness_sign.SignByStiffness(fn)
    rng = np.random.default_rng(5)
    m = 600
    root = sign.root if sign.root is not None else 500.0
    # log stiffness lines from well above to well below the zero, and some that stay clear
    f = stacks.LineFits(slope=rng.normal(-4e-6, 4e-6, m), slope_se=np.abs(rng.normal(0, 1e-6, m)),
                        slope_low=np.zeros(m), slope_high=np.zeros(m),
                        x_ref=rng.uniform(0, 120_000, m), y_ref=np.log(root) + rng.normal(0, 1.5, m),
                        residual_sd=np.abs(rng.normal(0, 0.1, m)), sxx=np.ones(m),
                        n=rng.integers(2, 12, m), ok=np.ones(m, dtype=bool))
    gi = np.arange(m)
    cur = f.x_ref + rng.uniform(0, 40_000, m)
    evaluated = []
    real = crossing_search.scan_blocks

    def spy(starts, ends, possible, evaluate):
        evaluated.append(int(possible[0].sum()))
        return real(starts, ends, possible, evaluate)

    monkeypatch.setattr(fr, "scan_blocks", spy)  # as the recompute imports it
    got = fr._stiffness_crossings(f, gi, sign, cur)

    grid = np.linspace(cur, cur + fr.HORIZON_KM, FORECAST_GRID_POINTS, axis=1)
    flags = _stiffness_failing(f, gi, grid, sign)
    c = BAND_SAMPLES // 2
    firsts = [(x.any(axis=1), np.argmax(x, axis=1))
              for x in (flags.any(axis=2), flags[:, :, c], flags.all(axis=2))]

    def make_test(rows, which):
        def test(x):
            fl = _stiffness_failing(f, rows, x[:, None], sign)[:, 0]
            return np.where(which == 0, fl.any(axis=1),
                            np.where(which == 1, fl[:, c], fl.all(axis=1)))
        return test

    want = crossing_search.bisect_first(grid, firsts, make_test, cur)
    for g, w in zip(got, want, strict=True):
        np.testing.assert_array_equal(g, w)
    assert all(a.any() and not a.all() for a, _ in firsts)  # failing and clear series alike
    blocks = len(range(0, FORECAST_GRID_POINTS, crossing_search.FLAG_BLOCK))
    assert evaluated and evaluated[0] < m * blocks  # some blocks were ruled out


def test_forecasts_made_for_many_series_at_once_are_the_core_s_forecast_drift():
    """Status, side, crossing km, dates (from the daily-distance rate and from the fit over time,
    the earlier winning), horizon and notes of ``fr._forecasts`` against the core's
    ``forecast_drift`` series by series, given the same crossings; some series without a rate."""
    import datetime as dt

    from analytics.core.drift import forecast_drift

    rng = np.random.default_rng(21)
    m = 400
    P, current, lower, upper = _random_series(rng, m)
    rate = rng.uniform(20.0, 120.0, m)
    rate[rng.random(m) < 0.2] = np.nan
    today = rng.integers(19_000, 21_000, m)
    # a trend over time (x = days before today): the km trend at a daily rate, faster or
    # slower than the km trend says (so either date may be the earlier)
    day_rate = np.where(np.isnan(rate), 50.0, rate) * rng.uniform(0.3, 3.0, m)
    PD = (P[0] * day_rate, P[1] * day_rate, (P[2] - current) / day_rate, P[3], P[4], P[5])
    want = []
    early, likely, late, side = (np.full(m, np.nan) for _ in range(4))
    tdays = np.full((m, 3), np.nan)
    for i in range(m):
        trend = LineTrend(*(float(p[i]) for p in P[:5]), int(P[5][i]))
        trend_days = LineTrend(*(float(p[i]) for p in PD[:5]), int(PD[5][i]))
        low = None if np.isinf(lower[i]) else float(lower[i])
        r = None if np.isnan(rate[i]) else float(rate[i])
        day0 = dt.date(1970, 1, 1) + dt.timedelta(days=int(today[i]))
        want.append(forecast_drift(trend, current_km=float(current[i]), current_date=day0,
                                   km_per_day=r, lower=low, upper=float(upper[i]),
                                   horizon_km=fr.HORIZON_KM, trend_days=trend_days,
                                   current_day=0.0, model=fr.DRIFT_MODEL))
        c = forecast_crossing(trend, current_x=float(current[i]), lower=low,
                              upper=float(upper[i]), horizon=fr.HORIZON_KM)
        ct = forecast_crossing(trend_days, current_x=0.0, lower=low, upper=float(upper[i]),
                               horizon=fr.HORIZON_KM / r if r else 3 * 365.25)
        early[i], likely[i], late[i] = (np.nan if v is None else v for v in (c.early, c.likely,
                                                                              c.late))
        side[i] = c.side == "upper"
        tdays[i] = [np.nan if v is None else today[i] + np.floor(v)
                    for v in (ct.early, ct.likely, ct.late)]
    got = fr._forecasts(early, likely, late, side.astype(bool), current_km=current, today=today,
                        km_per_day=rate, model=fr.DRIFT_MODEL, time_days=tdays)
    from analytics.analysis import _forecast_json

    for (fc, js), w in zip(got, want, strict=True):
        assert fc == w
        assert js == _forecast_json(w)
    statuses = {w.status for w in want}
    assert statuses == {"out_now", "crossing", "not_within_horizon"}
    assert any(w.notes for w in want) and any(w.early_date for w in want)
    # the time fit's date won somewhere and the rate's elsewhere
    pairs = [(w.early_date, dt.date(1970, 1, 1) + dt.timedelta(days=int(t[0])))
             for w, t in zip(want, tdays, strict=True)
             if w.early_date is not None and not np.isnan(t[0])]
    assert any(d < t for d, t in pairs) and any(d == t for d, t in pairs)


def _grid_rows():
    """Start and stop of grids as the search makes them (odometer readings and a horizon) and
    edge cases: NaN and infinite ends, a stop below the start, a step lost in a huge start (a
    constant grid), a tiny step, and an overflowing one."""
    rng = np.random.default_rng(11)
    start = np.concatenate([rng.uniform(0, 400_000, 300), rng.uniform(-5e3, 5e3, 50),
                            [np.nan, 0.0, np.inf, -np.inf, 1.0, 1e20, 1e20, 5.0, 0.0, 1e-300,
                             -1e308, 3.0]])
    stop = np.concatenate([start[:300] + 100_000.0, start[300:350] + rng.uniform(1, 900, 50),
                           [1.0, np.nan, 5.0, np.inf, -4.0, 1e20 - 5e-3, 1e20 + 1.0, 5.0 + 1e-12,
                            1e308, 2e-300, 1e308, np.inf]])
    return start, stop


@pytest.mark.parametrize("with_zero_step", [False, True])
def test_the_lazy_grid_is_numpys_linspace_element_for_element(with_zero_step):
    # reference: numpy's own np.linspace(start, stop, num, axis=1) built in full
    start, stop = _grid_rows()
    with np.errstate(invalid="ignore", over="ignore"):
        if not with_zero_step:  # a row with step 0 switches every row to numpy's other formula
            keep = (stop - start) / (FORECAST_GRID_POINTS - 1) != 0
            start, stop = start[keep], stop[keep]
        full = np.linspace(start, stop, FORECAST_GRID_POINTS, axis=1)
    lazy = crossing_search.LinspaceGrid(start, stop, FORECAST_GRID_POINTS)
    assert lazy.zero_step is with_zero_step and lazy.shape == full.shape
    cols = np.arange(FORECAST_GRID_POINTS)
    np.testing.assert_array_equal(lazy[:, cols], full)  # NaN where numpy has NaN, bit for bit
    rows = np.arange(full.shape[0])
    rng = np.random.default_rng(3)
    pick = rng.integers(0, FORECAST_GRID_POINTS, rows.size)
    np.testing.assert_array_equal(lazy[rows, pick], full[rows, pick])
    np.testing.assert_array_equal(lazy[rows[::7], 32:64], full[rows[::7], 32:64])
    with np.errstate(invalid="ignore"):
        want = np.all(full[:, 1:] >= full[:, :-1], axis=1)
    np.testing.assert_array_equal(crossing_search.rising(lazy), want)
    assert not want.all() and want.any()
