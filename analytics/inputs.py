"""ORM → plain data for one vehicle: what the analysis reads, and the key of its inputs."""
from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field

import pandas as pd
from django.db.models import Max
from django.utils import timezone

from inspections import selectors
from inspections.models import AlignmentSession, ComponentCheck, ServiceEvent, Vehicle

from .models import PooledRate


@dataclass
class VehicleData:
    vehicle: Vehicle
    today: dt.date
    readings: pd.DataFrame  # session_id, measured_on, odometer_km, kind, corner, toe_deg, camber_deg
    checks: pd.DataFrame  # checked_on, odometer_km, corner, part, play_mm, deflection_mm, ...
    events: pd.DataFrame  # performed_on, odometer_km, kind, corner, part, reason
    pooled: dict[tuple[str, str], PooledRate] = field(default_factory=dict)
    specs: dict[tuple[str, str], object] = field(default_factory=dict)
    limits: dict[str, object] = field(default_factory=dict)
    corners: dict[str, dict] = field(default_factory=dict)


def input_key(vehicle: Vehicle) -> str:
    """Names the latest records an analysis saw (and the pooled rates' time)."""
    s = AlignmentSession.objects.filter(vehicle=vehicle).aggregate(m=Max("id"))["m"] or 0
    c = ComponentCheck.objects.filter(vehicle=vehicle).aggregate(m=Max("id"))["m"] or 0
    e = ServiceEvent.objects.filter(vehicle=vehicle).aggregate(m=Max("id"))["m"] or 0
    p = PooledRate.objects.filter(platform_id=vehicle.platform_id).aggregate(
        m=Max("computed_at"))["m"]
    stamp = int(p.timestamp()) if p else 0
    return f"s{s}.c{c}.e{e}.p{stamp}"


def _local_date(value: dt.datetime, tz) -> dt.date:
    return timezone.localtime(value, tz).date()


def vehicle_data(vehicle: Vehicle) -> VehicleData:
    from zoneinfo import ZoneInfo

    tz = ZoneInfo(vehicle.workshop.time_zone)
    rows = [
        {"session_id": r.session_id, "measured_on": _local_date(r.session.measured_at, tz),
         "measured_at": r.session.measured_at, "odometer_km": r.session.odometer_km,
         "kind": r.session.kind, "corner": r.corner, "toe_deg": r.toe_deg,
         "camber_deg": r.camber_deg, "caster_deg": r.caster_deg}
        for r in selectors.readings_of(vehicle)
    ]
    checks = [
        {"checked_on": _local_date(c.checked_at, tz), "checked_at": c.checked_at,
         "odometer_km": c.odometer_km, "corner": c.corner, "part": c.part, "play_mm": c.play_mm,
         "deflection_mm": c.deflection_mm, "deflection_force_n": c.deflection_force_n,
         "findings": list(c.findings or []), "verdict": c.verdict,
         "defect_category": c.defect_category, "id": c.id}
        for c in selectors.checks_of(vehicle)
    ]
    events = [
        {"performed_on": _local_date(e.performed_at, tz), "performed_at": e.performed_at,
         "odometer_km": e.odometer_km, "kind": e.kind, "corner": e.corner, "part": e.part,
         "reason": e.reason}
        for e in selectors.service_events_of(vehicle)
    ]
    platform = vehicle.platform
    return VehicleData(
        vehicle=vehicle,
        today=timezone.localtime(timezone.now(), tz).date(),
        readings=pd.DataFrame(rows, columns=["session_id", "measured_on", "measured_at",
                                             "odometer_km", "kind", "corner", "toe_deg",
                                             "camber_deg", "caster_deg"]),
        checks=pd.DataFrame(checks, columns=["checked_on", "checked_at", "odometer_km", "corner",
                                             "part", "play_mm", "deflection_mm",
                                             "deflection_force_n", "findings", "verdict",
                                             "defect_category", "id"]),
        events=pd.DataFrame(events, columns=["performed_on", "performed_at", "odometer_km",
                                             "kind", "corner", "part", "reason"]),
        pooled={(p.corner, p.angle): p for p in platform.pooled_rates.all()},
        specs={(s.axle, s.quantity): s for s in platform.specs.all()},
        limits={lim.part: lim for lim in platform.limits.all()},
        corners={c.axle: c.geometry for c in platform.corners.all()},
    )
