"""Advice rules (DESIGN.md §7): caps, missing manufacturer data, caution, ordering."""

import datetime as dt
import subprocess
import sys

import numpy as np
import pytest

from analytics.core.advice import (
    MODEL_VERSION,
    SEVERITIES,
    AdviceKind,
    ComplianceVerdict,
    ComponentFinding,
    DriftForecastInput,
    ImpactStep,
    ManufacturerInterval,
    ServiceMark,
    VehicleState,
    WearForecastInput,
    add_months,
    advise,
)
from analytics.core.caution import CAUTION
from analytics.core.drift import CrossingForecast

TODAY = dt.date(2025, 6, 1)


def crossing(early_km, likely_km, late_km, rate=40.0, odo=60000.0):
    def date(km):
        return None if km is None else TODAY + dt.timedelta(days=int((km - odo) // rate))

    return CrossingForecast(
        status="crossing", side="upper", early_km=early_km, likely_km=likely_km,
        late_km=late_km, early_date=date(early_km), likely_date=date(likely_km),
        late_date=date(late_km), horizon_km=odo + 100000.0,
    )


def state(**kw):
    base = dict(
        vehicle="demo van 7", today=TODAY, odometer_km=60000.0, km_per_day=40.0,
        last_alignment=ServiceMark(dt.date(2025, 1, 10), 52000.0),
        last_suspension_inspection=ServiceMark(dt.date(2024, 11, 2), 48000.0),
        alignment_interval=ManufacturerInterval(20000.0, 12, "demo manual, alignment"),
        suspension_interval=ManufacturerInterval(30000.0, 24, "demo manual, chassis"),
    )
    base.update(kw)
    return VehicleState(**base)


def cap_of(s, area):
    """The manufacturer cap computed independently from the state (km, date); None = no cap."""
    last, interval = (
        (s.last_alignment, s.alignment_interval) if area == "alignment"
        else (s.last_suspension_inspection, s.suspension_interval)
    )
    if interval is None:
        return None, None
    if last is None:
        return s.odometer_km, s.today
    km = None if interval.km is None else last.odometer_km + interval.km
    date = None if interval.months is None else add_months(last.date, interval.months)
    return km, date


def random_state(rng):
    def maybe(p, value):
        return value if rng.random() < p else None

    odo = float(rng.uniform(5000, 200000))
    rate = maybe(0.8, float(rng.uniform(5, 150)))

    def interval(label):
        km = maybe(0.8, float(rng.choice([10000, 15000, 20000, 30000])))
        months = maybe(0.8, int(rng.choice([6, 12, 24])))
        return maybe(0.8, ManufacturerInterval(km, months, label)) if (km or months) else None

    def mark():
        return maybe(0.85, ServiceMark(TODAY - dt.timedelta(days=int(rng.integers(0, 900))),
                                       odo - float(rng.uniform(0, 40000))))

    def fc():
        early = odo + float(rng.uniform(-2000, 60000))
        likely = early + float(rng.uniform(0, 20000))
        late = maybe(0.7, likely + float(rng.uniform(0, 20000)))
        status = rng.choice(["crossing", "crossing", "out_now", "not_within_horizon"])
        if status == "not_within_horizon":
            return CrossingForecast("not_within_horizon", None, None, None, None, None, None,
                                    None, odo + 80000)
        r = rate or 40.0

        def d(km):
            return None if km is None or rate is None else TODAY + dt.timedelta(
                days=int((km - odo) // r))

        return CrossingForecast(str(status), "upper", early, likely, late, d(early), d(likely),
                                d(late), odo + 80000)

    corners = ["FL", "FR", "RL", "RR"]
    return VehicleState(
        vehicle="random", today=TODAY, odometer_km=odo, km_per_day=rate,
        last_alignment=mark(), last_suspension_inspection=mark(),
        alignment_interval=interval("manual A"), suspension_interval=interval("manual S"),
        drift=tuple(DriftForecastInput(str(rng.choice(corners)), "toe", fc())
                    for _ in range(rng.integers(0, 4))),
        wear=tuple(WearForecastInput(str(rng.choice(corners)), "lower ball joint", fc())
                   for _ in range(rng.integers(0, 3))),
        findings=tuple(
            ComponentFinding(str(rng.choice(corners)), "rear lower bush",
                             rng.choice([None, "minor", "major", "dangerous"]), "split rubber",
                             TODAY - dt.timedelta(days=int(rng.integers(0, 60))),
                             odo - float(rng.uniform(0, 2000)))
            for _ in range(rng.integers(0, 3))),
        steps=tuple(ImpactStep(str(rng.choice(corners)), "toe",
                               TODAY - dt.timedelta(days=int(rng.integers(0, 60))),
                               odo - float(rng.uniform(0, 2000)), 0.2)
                    for _ in range(rng.integers(0, 2))),
        compliance=tuple(ComplianceVerdict("RL", "cornering", bool(rng.random() < 0.5),
                                           "cornering toe change toward toe-out on RL")
                         for _ in range(rng.integers(0, 2))),
    )


def test_no_advice_is_ever_later_than_the_manufacturer_cap():
    rng = np.random.default_rng(2025)
    checked = 0
    for _ in range(500):
        s = random_state(rng)
        for a in advise(s):
            if a.kind is AdviceKind.ENTER_MANUFACTURER_DATA:
                continue
            cap_km, cap_date = cap_of(s, a.area)
            for km in (a.due_km, a.how_sure.earliest_km, a.how_sure.latest_km):
                if cap_km is not None and km is not None:
                    assert km <= cap_km + 1e-9, a
                    checked += 1
            for d in (a.due_date, a.how_sure.earliest_date, a.how_sure.latest_date):
                if cap_date is not None and d is not None:
                    assert d <= cap_date, a
            if cap_km is not None:
                assert a.due_km is not None  # a capped item always has a due odometer
            if cap_date is not None:
                assert a.due_date is not None
    assert checked > 500


def test_every_advice_carries_the_caution_and_the_model_version_and_is_ordered():
    rng = np.random.default_rng(7)
    for _ in range(200):
        out = advise(random_state(rng))
        assert all(a.caution == CAUTION for a in out)
        assert all(a.model_version == MODEL_VERSION and a.why for a in out)
        ranks = [SEVERITIES.index(a.severity) for a in out]
        assert ranks == sorted(ranks)
        for a in out:
            if a.how_sure.earliest_km is not None and a.how_sure.latest_km is not None:
                assert a.how_sure.earliest_km <= a.how_sure.latest_km


def test_missing_manufacturer_data_asks_for_it_and_invents_no_date():
    s = state(alignment_interval=None)
    out = advise(s)
    asks = [a for a in out if a.kind is AdviceKind.ENTER_MANUFACTURER_DATA]
    assert [a.area for a in asks] == ["alignment"]
    assert not [a for a in out if a.kind is AdviceKind.ALIGNMENT_CHECK]  # no evidence: no date


def test_without_manufacturer_data_a_forecast_alone_sets_the_date():
    f = crossing(70000.0, 80000.0, 90000.0)
    s = state(alignment_interval=None, drift=(DriftForecastInput("RL", "toe", f),))
    check = next(a for a in advise(s) if a.kind is AdviceKind.ALIGNMENT_CHECK)
    assert check.due_km == 70000.0 and check.due_date == f.early_date
    assert check.how_sure.latest_km == 90000.0 and check.limit is None


def test_the_manufacturer_interval_caps_a_late_forecast():
    f = crossing(150000.0, 160000.0, 170000.0)
    s = state(drift=(DriftForecastInput("RL", "toe", f),))
    check = next(a for a in advise(s) if a.kind is AdviceKind.ALIGNMENT_CHECK)
    # last alignment at 52,000 km + 20,000 km, or 12 months after 2025-01-10, whichever first;
    # at 40 km/day the 12 months (223 days from today) come first
    months_cap = dt.date(2026, 1, 10)
    assert check.due_date == min(months_cap, TODAY + dt.timedelta(days=(72000 - 60000) // 40))
    assert check.due_km == min(72000.0, 60000.0 + 40.0 * (months_cap - TODAY).days)
    assert check.due_km < 72000.0 and check.how_sure.latest_km == check.due_km
    assert any("demo manual, alignment" in w for w in check.why)


def test_a_dangerous_finding_means_replace_now_and_a_major_one_soon():
    findings = (
        ComponentFinding("FL", "lower ball joint", "dangerous", "play 2.1 mm", TODAY, 60000.0),
        ComponentFinding("RR", "trailing arm bush", "major", "rubber torn", TODAY, 60000.0),
        ComponentFinding("RL", "toe link bush", "minor", "surface cracks", TODAY, 60000.0),
    )
    out = advise(state(findings=findings))
    by_part = {a.what: a for a in out if a.defect_category}
    dangerous = next(a for a in by_part.values() if a.defect_category == "dangerous")
    major = next(a for a in by_part.values() if a.defect_category == "major")
    minor = next(a for a in by_part.values() if a.defect_category == "minor")
    assert dangerous.kind is AdviceKind.REPLACE_PART and dangerous.severity == "now"
    assert major.kind is AdviceKind.REPLACE_PART and major.severity == "soon"
    assert minor.kind is AdviceKind.INSPECT_PART
    assert out[0] is dangerous  # most urgent first


def test_an_impact_step_asks_for_a_recheck_soon():
    step = ImpactStep("FR", "toe", TODAY - dt.timedelta(days=2), 59900.0, -0.25)
    a = next(a for a in advise(state(steps=(step,))) if a.kind is AdviceKind.RECHECK_AFTER_IMPACT)
    assert a.severity == "soon" and a.corner == "FR" and a.due_km == 60400.0


def test_a_failed_compliance_verdict_asks_for_an_inspection_of_that_corner():
    v = ComplianceVerdict("RL", "cornering", False, "cornering toe change toward toe-out on RL")
    a = next(a for a in advise(state(compliance=(v,))) if a.corner == "RL")
    assert a.kind is AdviceKind.INSPECT_PART and "toe-out" in " ".join(a.why)


def test_a_reading_out_of_tolerance_now_makes_the_check_due_now():
    f = CrossingForecast("out_now", "upper", 60000.0, 60000.0, None, TODAY, TODAY, None, 1e5)
    a = next(a for a in advise(state(drift=(DriftForecastInput("FL", "camber", f),)))
             if a.kind is AdviceKind.ALIGNMENT_CHECK)
    assert a.severity == "now" and a.due_km == 60000.0


def test_no_record_of_the_last_service_makes_it_due_now():
    a = next(a for a in advise(state(last_alignment=None))
             if a.kind is AdviceKind.ALIGNMENT_CHECK)
    assert a.due_date == TODAY and a.severity == "now"


@pytest.mark.parametrize(
    ("start", "months", "expected"),
    [(dt.date(2025, 1, 31), 1, dt.date(2025, 2, 28)), (dt.date(2024, 1, 31), 1, dt.date(2024, 2, 29)),
     (dt.date(2024, 11, 15), 14, dt.date(2026, 1, 15))],
)
def test_add_months_clips_to_the_month_length(start, months, expected):
    assert add_months(start, months) == expected


def test_manufacturer_interval_needs_a_source():
    with pytest.raises(ValueError, match="source"):
        ManufacturerInterval(20000.0, 12, " ")
    with pytest.raises(ValueError, match="months"):
        ManufacturerInterval(20000.0, 0, "manual")


def test_the_numerical_core_does_not_import_django():
    code = (
        "import sys; import analytics.core.advice, analytics.core.drift, analytics.core.wear, "
        "analytics.core.life, analytics.core.cusum; "
        "assert not [m for m in sys.modules if m.split('.')[0] == 'django']"
    )
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert res.returncode == 0, res.stderr
