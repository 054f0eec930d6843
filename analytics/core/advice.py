"""Service-interval advice: pure rules following DESIGN.md §7.

Input is one :class:`VehicleState` (filled by the services from database rows and the drift,
wear and compliance results); output is a list of :class:`Advice`, most urgent first.

Rules
-----
* **Cap (hard rule).** Advice belongs to an *area*: ``"alignment"`` (alignment check, re-check
  after an impact) or ``"suspension"`` (inspect or replace a part). An area's cap is its last
  service plus the manufacturer's interval, on both axes that are entered: the cap date is
  ``last date + months`` and the cap odometer ``last km + km``; each axis is also converted to the
  other through the daily-distance rate when one is known, and the earlier wins. No due date or
  odometer, and no end of the "how sure" window, is ever later than the cap. Without a record of
  the last service the cap is today / the current odometer (the interval cannot be shown to be
  running).
* **Missing manufacturer data.** With no interval entered for an area (or neither km nor
  months), the rules do not invent one: an ``enter_manufacturer_data`` advice asks for it, and
  the area's other advice is dated only by evidence (a forecast crossing, a defect category, an
  impact, a compliance verdict); with no such evidence no date is given.
* **Evidence.** Drift forecasts make one alignment check due at the earliest conservative
  crossing (the near edge of the prediction band); a reading already outside tolerance makes it
  due now. A CUSUM step (kerb strike) asks for a re-check within :data:`IMPACT_RECHECK_DAYS` /
  :data:`IMPACT_RECHECK_KM` of its detection. A wear forecast asks for a part inspection at its
  early crossing, or a replacement now if already past the limit. A component finding with a
  2014/45/EU category ``"dangerous"`` asks for a replacement now, ``"major"`` for a replacement
  soon (within :data:`MAJOR_DEFECT_DAYS` / :data:`MAJOR_DEFECT_KM`), ``"minor"`` for an
  inspection at the next routine one. A failed compliance verdict (e.g. cornering toe change
  toward toe-out) asks for the corner's bushes to be inspected within
  :data:`COMPLIANCE_INSPECT_DAYS`.
* **How sure.** ``earliest`` is the due point; ``latest`` the late end of the evidence (the
  far edge of the band crossing) capped; for a routine, cap-only item both ends are the cap.
* **Severity** (project words, most urgent first): ``"now"`` (due today or already past),
  ``"soon"`` (within :data:`SOON_DAYS` or :data:`SOON_KM`), ``"plan"`` (within
  :data:`PLAN_DAYS` or :data:`PLAN_KM`), ``"watch"`` (later, or no date).

Every advice carries :data:`~.caution.CAUTION`. Pure Python; no Django.
"""

from __future__ import annotations

import calendar
import datetime as dt
import math
from dataclasses import dataclass, field
from enum import StrEnum
from typing import Literal

from .caution import CAUTION
from .drift import CrossingForecast

__all__ = [
    "ADVICE_MODEL",
    "MODEL_VERSION",
    "SEVERITIES",
    "Advice",
    "AdviceKind",
    "ComplianceVerdict",
    "ComponentFinding",
    "DriftForecastInput",
    "HowSure",
    "ImpactStep",
    "ManufacturerInterval",
    "ServiceMark",
    "VehicleState",
    "WearForecastInput",
    "add_months",
    "advise",
]

#: Version of the core models and rules; results are keyed by it.
MODEL_VERSION: str = "core-1.0.0"
ADVICE_MODEL: str = "fleetsvc advice rules (DESIGN.md §7)"

Severity = Literal["now", "soon", "plan", "watch"]
#: Severity words, most urgent first.
SEVERITIES: tuple[Severity, ...] = ("now", "soon", "plan", "watch")
DefectCategory = Literal["minor", "major", "dangerous"]
Area = Literal["alignment", "suspension"]

SOON_DAYS: int = 30
SOON_KM: float = 1500.0
PLAN_DAYS: int = 120
PLAN_KM: float = 6000.0
#: Re-check after a detected impact step within this many days / km of its detection.
IMPACT_RECHECK_DAYS: int = 14
IMPACT_RECHECK_KM: float = 500.0
#: A "major" defect: replace within this many days / km of the check.
MAJOR_DEFECT_DAYS: int = 14
MAJOR_DEFECT_KM: float = 500.0
#: A failed compliance verdict: inspect within this many days / km.
COMPLIANCE_INSPECT_DAYS: int = 30
COMPLIANCE_INSPECT_KM: float = 1500.0


class AdviceKind(StrEnum):
    ALIGNMENT_CHECK = "alignment_check"
    INSPECT_PART = "inspect_part"
    REPLACE_PART = "replace_part"
    RECHECK_AFTER_IMPACT = "recheck_after_impact"
    ENTER_MANUFACTURER_DATA = "enter_manufacturer_data"


_KIND_ORDER = {k: i for i, k in enumerate(AdviceKind)}


# --------------------------------------------------------------------------- inputs


@dataclass(frozen=True)
class ManufacturerInterval:
    """A manufacturer's service interval: every ``km`` or ``months``, whichever comes first.

    Attributes:
        km: distance interval (km, > 0) or None if the manufacturer gives none.
        months: time interval (whole months, > 0) or None.
        source: where it comes from (manual, page, bulletin), shown with the advice.
    """

    km: float | None
    months: int | None
    source: str

    def __post_init__(self) -> None:
        if self.km is not None and not (math.isfinite(self.km) and self.km > 0):
            raise ValueError("ManufacturerInterval.km must be finite and > 0 or None")
        if self.months is not None and not (isinstance(self.months, int) and self.months > 0):
            raise ValueError("ManufacturerInterval.months must be a positive int or None")
        if not self.source.strip():
            raise ValueError("ManufacturerInterval.source must name where the interval comes from")

    @property
    def is_missing(self) -> bool:
        return self.km is None and self.months is None

    def describe(self) -> str:
        parts = []
        if self.km is not None:
            parts.append(f"{self.km:,.0f} km")
        if self.months is not None:
            parts.append(f"{self.months} months")
        return "every " + " or ".join(parts) + f" ({self.source})"


@dataclass(frozen=True)
class ServiceMark:
    """When a service (alignment, suspension inspection) was last done."""

    date: dt.date
    odometer_km: float


@dataclass(frozen=True)
class DriftForecastInput:
    """One corner/angle drift forecast (from :func:`~.drift.forecast_drift`)."""

    corner: str
    angle: str
    forecast: CrossingForecast


@dataclass(frozen=True)
class WearForecastInput:
    """One part's wear forecast (from :mod:`.wear`)."""

    corner: str
    part: str
    forecast: CrossingForecast


@dataclass(frozen=True)
class ComponentFinding:
    """A component check; ``category`` per 2014/45/EU, None when no defect was found."""

    corner: str
    part: str
    category: DefectCategory | None
    note: str
    checked_on: dt.date
    odometer_km: float


@dataclass(frozen=True)
class ImpactStep:
    """A CUSUM step (likely an impact) in the current segment; ``size_deg`` signed."""

    corner: str
    angle: str
    detected_on: dt.date
    odometer_km: float
    size_deg: float


@dataclass(frozen=True)
class ComplianceVerdict:
    """A load-case verdict from the corner engine (e.g. cornering toe change toward toe-out)."""

    corner: str
    load_case: str
    ok: bool
    text: str


@dataclass(frozen=True)
class VehicleState:
    """Everything the rules need about one vehicle.

    Attributes:
        vehicle: label or id, for the evidence.
        today: the workshop's current date.
        odometer_km: the latest odometer (km).
        km_per_day: daily distance (km/day, from :func:`~.drift.daily_distance_rate`) or None.
        last_alignment, last_suspension_inspection: last service marks or None (no record).
        alignment_interval, suspension_interval: manufacturer intervals or None (not entered).
        drift, wear, findings, steps, compliance: evidence.
    """

    vehicle: str
    today: dt.date
    odometer_km: float
    km_per_day: float | None
    last_alignment: ServiceMark | None
    last_suspension_inspection: ServiceMark | None
    alignment_interval: ManufacturerInterval | None
    suspension_interval: ManufacturerInterval | None
    drift: tuple[DriftForecastInput, ...] = ()
    wear: tuple[WearForecastInput, ...] = ()
    findings: tuple[ComponentFinding, ...] = ()
    steps: tuple[ImpactStep, ...] = ()
    compliance: tuple[ComplianceVerdict, ...] = ()

    def __post_init__(self) -> None:
        if not (math.isfinite(self.odometer_km) and self.odometer_km >= 0):
            raise ValueError("odometer_km must be finite and >= 0")
        if self.km_per_day is not None and not (
            math.isfinite(self.km_per_day) and self.km_per_day >= 0
        ):
            raise ValueError("km_per_day must be finite and >= 0 or None")


# --------------------------------------------------------------------------- outputs


@dataclass(frozen=True)
class HowSure:
    """The window in which the action becomes necessary (never past the cap)."""

    earliest_date: dt.date | None
    latest_date: dt.date | None
    earliest_km: float | None
    latest_km: float | None


@dataclass(frozen=True)
class Advice:
    """One recommendation.

    Attributes:
        kind: what sort of action.
        area: ``"alignment"`` or ``"suspension"``: which manufacturer interval caps it.
        what: plain words.
        corner: FL/FR/RL/RR, or None for the whole vehicle.
        due_date, due_km: by when (None: no evidence and no manufacturer limit).
        how_sure: the window.
        why: evidence strings.
        model: the rules and the models behind the evidence.
        model_version: :data:`MODEL_VERSION`.
        limit: the manufacturer interval respected (None: not entered).
        limit_date, limit_km: the cap it implies (None: no cap on that axis).
        severity: one of :data:`SEVERITIES`.
        defect_category: 2014/45/EU category where a component check gave one.
        caution: :data:`~.caution.CAUTION`.
    """

    kind: AdviceKind
    area: Area
    what: str
    corner: str | None
    due_date: dt.date | None
    due_km: float | None
    how_sure: HowSure
    why: tuple[str, ...]
    model: str
    model_version: str
    limit: ManufacturerInterval | None
    limit_date: dt.date | None
    limit_km: float | None
    severity: Severity
    defect_category: DefectCategory | None = None
    caution: str = field(default=CAUTION)


# --------------------------------------------------------------------------- helpers


def add_months(d: dt.date, months: int) -> dt.date:
    """Calendar months later, the day clipped to the month's length (31 Jan + 1 → 28/29 Feb)."""
    y, m = divmod(d.month - 1 + months, 12)
    year, month = d.year + y, m + 1
    return dt.date(year, month, min(d.day, calendar.monthrange(year, month)[1]))


def _min(*vals):
    """Smallest of the values that are not None (None if all are); the first of equals, as
    ``min`` keeps it (a loop: this runs some 40 times per vehicle)."""
    out = None
    for v in vals:
        if v is not None and (out is None or v < out):
            out = v
    return out


@dataclass(frozen=True)
class _Cap:
    interval: ManufacturerInterval | None
    date: dt.date | None
    km: float | None
    basis: str


class _Clock:
    """km ↔ date through the daily-distance rate."""

    def __init__(self, state: VehicleState) -> None:
        self.today = state.today
        self.km = state.odometer_km
        self.rate = state.km_per_day if state.km_per_day and state.km_per_day > 0 else None

    def date_at(self, km: float | None) -> dt.date | None:
        if km is None or self.rate is None:
            return None
        days = (km - self.km) / self.rate
        if days > 365.25 * 200:
            return None
        return self.today + dt.timedelta(days=math.floor(days))

    def km_at(self, date: dt.date | None) -> float | None:
        if date is None or self.rate is None:
            return None
        return self.km + self.rate * (date - self.today).days


def _cap(
    interval: ManufacturerInterval | None, last: ServiceMark | None, clock: _Clock, what: str
) -> _Cap:
    if interval is None or interval.is_missing:
        return _Cap(None, None, None, f"no manufacturer interval entered for {what}")
    if last is None:
        return _Cap(
            interval,
            clock.today,
            clock.km,
            f"no record of the last {what}: due now under {interval.describe()}",
        )
    date = add_months(last.date, interval.months) if interval.months is not None else None
    km = last.odometer_km + interval.km if interval.km is not None else None
    cap_date = _min(date, clock.date_at(km))
    cap_km = _min(km, clock.km_at(date))
    basis = (
        f"manufacturer interval {interval.describe()}; last {what} on {last.date.isoformat()} "
        f"at {last.odometer_km:,.0f} km"
    )
    return _Cap(interval, cap_date, cap_km, basis)


def _severity(due_date: dt.date | None, due_km: float | None, clock: _Clock) -> Severity:
    if due_date is None and due_km is None:
        return "watch"
    days = (due_date - clock.today).days if due_date is not None else math.inf
    km = due_km - clock.km if due_km is not None else math.inf
    if days <= 0 or km <= 0:
        return "now"
    if days <= SOON_DAYS or km <= SOON_KM:
        return "soon"
    if days <= PLAN_DAYS or km <= PLAN_KM:
        return "plan"
    return "watch"


def _at_least(sev: Severity, floor: Severity) -> Severity:
    return SEVERITIES[min(SEVERITIES.index(sev), SEVERITIES.index(floor))]


def _make(
    *,
    kind: AdviceKind,
    area: Area,
    what: str,
    corner: str | None,
    cap: _Cap,
    clock: _Clock,
    due_date: dt.date | None,
    due_km: float | None,
    late_date: dt.date | None,
    late_km: float | None,
    why: list[str],
    models: list[str],
    floor: Severity | None = None,
    category: DefectCategory | None = None,
    open_late: bool = False,
) -> Advice:
    """Cap the evidence and build the advice; ``due_*`` / ``late_*`` are evidence (uncapped).

    Without a late end the window closes at the due point, unless ``open_late`` (the late end
    lies beyond the forecast horizon), when it closes at the cap (None without one).
    """
    d_date = _min(cap.date, due_date, clock.date_at(due_km))
    d_km = _min(cap.km, due_km, clock.km_at(due_date))
    late_d = _min(cap.date, late_date, clock.date_at(late_km))
    late_k = _min(cap.km, late_km, clock.km_at(late_date))
    if late_date is None and late_km is None:
        if open_late:
            late_d, late_k = cap.date, cap.km
        else:
            late_d, late_k = d_date, d_km
    how = HowSure(
        earliest_date=d_date,
        latest_date=None if late_d is None else max(late_d, d_date) if d_date else late_d,
        earliest_km=d_km,
        latest_km=None if late_k is None else max(late_k, d_km) if d_km is not None else late_k,
    )
    sev = _severity(d_date, d_km, clock)
    if floor is not None:
        sev = _at_least(sev, floor)
    reasons = [*why, cap.basis]
    model = "; ".join(dict.fromkeys([ADVICE_MODEL, *models]))
    return Advice(
        kind=kind,
        area=area,
        what=what,
        corner=corner,
        due_date=d_date,
        due_km=d_km,
        how_sure=how,
        why=tuple(reasons),
        model=model,
        model_version=MODEL_VERSION,
        limit=cap.interval,
        limit_date=cap.date,
        limit_km=cap.km,
        severity=sev,
        defect_category=category,
    )


def _forecast_text(label: str, f: CrossingForecast) -> str:
    if f.status == "out_now":
        return f"{label}: already outside its limit ({f.model})"
    if f.status == "not_within_horizon":
        return f"{label}: stays inside its limit up to {f.horizon_km:,.0f} km ({f.model})"

    def pt(km: float | None, d: dt.date | None) -> str:
        if km is None:
            return "beyond the horizon"
        return f"{km:,.0f} km" + (f" ({d.isoformat()})" if d else "")

    return (
        f"{label}: conservative band edge reaches the limit at {pt(f.early_km, f.early_date)}, "
        f"central line at {pt(f.likely_km, f.likely_date)}, whole band at "
        f"{pt(f.late_km, f.late_date)} ({f.model})"
    )


def _ask(area: Area, what: str, clock: _Clock) -> Advice:
    return Advice(
        kind=AdviceKind.ENTER_MANUFACTURER_DATA,
        area=area,
        what=f"Enter the manufacturer's {what} interval (km and/or months, with its source)",
        corner=None,
        due_date=clock.today,
        due_km=clock.km,
        how_sure=HowSure(clock.today, clock.today, clock.km, clock.km),
        why=(f"no manufacturer interval entered for {what}; advice will not invent one",),
        model=ADVICE_MODEL,
        model_version=MODEL_VERSION,
        limit=None,
        limit_date=None,
        limit_km=None,
        severity="soon",
    )


# --------------------------------------------------------------------------- rules


def _alignment_advice(state: VehicleState, cap: _Cap, clock: _Clock) -> list[Advice]:
    out: list[Advice] = []
    why: list[str] = []
    models: list[str] = []
    due_d = due_k = late_d = late_k = None
    out_now = False
    for d in state.drift:
        f = d.forecast
        why.append(_forecast_text(f"{d.angle} {d.corner}", f))
        models.append(f.model)
        if f.status == "out_now":
            out_now = True
            due_d, due_k = _min(due_d, clock.today), _min(due_k, clock.km)
        elif f.status == "crossing":
            due_d = _min(due_d, f.early_date)
            due_k = _min(due_k, f.early_km)
            late_d = _min(late_d, f.late_date)
            late_k = _min(late_k, f.late_km)
    if cap.interval is not None or due_d is not None or due_k is not None:
        has_evidence = due_d is not None or due_k is not None
        out.append(
            _make(
                kind=AdviceKind.ALIGNMENT_CHECK,
                area="alignment",
                what="Check and, if needed, adjust the wheel alignment"
                + ("" if has_evidence else " (manufacturer's routine interval)"),
                corner=None,
                cap=cap,
                clock=clock,
                due_date=due_d,
                due_km=due_k,
                late_date=late_d if has_evidence else None,
                late_km=late_k if has_evidence else None,
                why=why,
                models=models,
                floor="now" if out_now else None,
                open_late=has_evidence,
            )
        )
    for s in state.steps:
        out.append(
            _make(
                kind=AdviceKind.RECHECK_AFTER_IMPACT,
                area="alignment",
                what=f"Re-check {s.angle} on {s.corner} after a likely impact (kerb strike)",
                corner=s.corner,
                cap=cap,
                clock=clock,
                due_date=s.detected_on + dt.timedelta(days=IMPACT_RECHECK_DAYS),
                due_km=s.odometer_km + IMPACT_RECHECK_KM,
                late_date=None,
                late_km=None,
                why=[
                    f"step of {s.size_deg:+.3f} deg in {s.angle} {s.corner} found at the reading "
                    f"of {s.detected_on.isoformat()} ({s.odometer_km:,.0f} km)"
                ],
                models=["two-sided CUSUM on standardised residuals"],
                floor="soon",
            )
        )
    return out


def _suspension_advice(state: VehicleState, cap: _Cap, clock: _Clock) -> list[Advice]:
    out: list[Advice] = []
    if cap.interval is not None:
        out.append(
            _make(
                kind=AdviceKind.INSPECT_PART,
                area="suspension",
                what="Inspect ball joints and bushes (manufacturer's routine interval)",
                corner=None,
                cap=cap,
                clock=clock,
                due_date=None,
                due_km=None,
                late_date=None,
                late_km=None,
                why=[],
                models=[],
            )
        )
    for w in state.wear:
        f = w.forecast
        text = _forecast_text(f"{w.part} {w.corner}", f)
        if f.status == "out_now":
            out.append(
                _make(
                    kind=AdviceKind.REPLACE_PART,
                    area="suspension",
                    what=f"Replace the {w.part} on {w.corner}: its measured trend is past the limit",
                    corner=w.corner,
                    cap=cap,
                    clock=clock,
                    due_date=clock.today,
                    due_km=clock.km,
                    late_date=clock.today,
                    late_km=clock.km,
                    why=[text],
                    models=[f.model],
                    floor="now",
                )
            )
        elif f.status == "crossing":
            out.append(
                _make(
                    kind=AdviceKind.INSPECT_PART,
                    area="suspension",
                    what=f"Inspect the {w.part} on {w.corner}: wear is forecast to reach its limit",
                    corner=w.corner,
                    cap=cap,
                    clock=clock,
                    due_date=f.early_date,
                    due_km=f.early_km,
                    late_date=f.late_date,
                    late_km=f.late_km,
                    why=[text],
                    models=[f.model],
                    open_late=True,
                )
            )
    for c in state.findings:
        if c.category is None:
            continue
        base = f"{c.part} on {c.corner} checked {c.checked_on.isoformat()} at {c.odometer_km:,.0f} km"
        why = [f"{base}: {c.category} defect (2014/45/EU category): {c.note}"]
        if c.category == "dangerous":
            out.append(
                _make(
                    kind=AdviceKind.REPLACE_PART,
                    area="suspension",
                    what=f"Replace the {c.part} on {c.corner} before the vehicle is driven again",
                    corner=c.corner,
                    cap=cap,
                    clock=clock,
                    due_date=_min(c.checked_on, clock.today),
                    due_km=_min(c.odometer_km, clock.km),
                    late_date=_min(c.checked_on, clock.today),
                    late_km=_min(c.odometer_km, clock.km),
                    why=why,
                    models=["component check"],
                    floor="now",
                    category=c.category,
                )
            )
        elif c.category == "major":
            out.append(
                _make(
                    kind=AdviceKind.REPLACE_PART,
                    area="suspension",
                    what=f"Replace the {c.part} on {c.corner}",
                    corner=c.corner,
                    cap=cap,
                    clock=clock,
                    due_date=c.checked_on + dt.timedelta(days=MAJOR_DEFECT_DAYS),
                    due_km=c.odometer_km + MAJOR_DEFECT_KM,
                    late_date=None,
                    late_km=None,
                    why=why,
                    models=["component check"],
                    floor="soon",
                    category=c.category,
                )
            )
        else:
            out.append(
                _make(
                    kind=AdviceKind.INSPECT_PART,
                    area="suspension",
                    what=f"Look at the {c.part} on {c.corner} again at the next inspection",
                    corner=c.corner,
                    cap=cap,
                    clock=clock,
                    due_date=None,
                    due_km=None,
                    late_date=None,
                    late_km=None,
                    why=why,
                    models=["component check"],
                    category=c.category,
                )
            )
    for v in state.compliance:
        if v.ok:
            continue
        out.append(
            _make(
                kind=AdviceKind.INSPECT_PART,
                area="suspension",
                what=f"Inspect the bushes and joints on {v.corner} ({v.load_case} load case)",
                corner=v.corner,
                cap=cap,
                clock=clock,
                due_date=clock.today + dt.timedelta(days=COMPLIANCE_INSPECT_DAYS),
                due_km=clock.km + COMPLIANCE_INSPECT_KM,
                late_date=None,
                late_km=None,
                why=[f"{v.load_case} on {v.corner}: {v.text}"],
                models=["linear elastokinematic compliance (corner engine)"],
                floor="soon",
            )
        )
    return out


def _urgency_key(a: Advice) -> tuple:
    return (
        SEVERITIES.index(a.severity),
        a.due_date or dt.date.max,
        a.due_km if a.due_km is not None else math.inf,
        _KIND_ORDER[a.kind],
        a.corner or "",
        a.what,
    )


def advise(state: VehicleState) -> list[Advice]:
    """All advice for one vehicle, most urgent first (severity, then due date, then due km).

    See the module docstring for the rules. Every item carries the caution and
    :data:`MODEL_VERSION`, and none is dated past its area's manufacturer cap.
    """
    clock = _Clock(state)
    a_cap = _cap(state.alignment_interval, state.last_alignment, clock, "wheel alignment")
    s_cap = _cap(
        state.suspension_interval,
        state.last_suspension_inspection,
        clock,
        "suspension inspection",
    )
    out: list[Advice] = []
    if a_cap.interval is None:
        out.append(_ask("alignment", "wheel alignment", clock))
    if s_cap.interval is None:
        out.append(_ask("suspension", "suspension inspection", clock))
    out += _alignment_advice(state, a_cap, clock)
    out += _suspension_advice(state, s_cap, clock)
    return sorted(out, key=_urgency_key)
