"""Fleet part lives: right-censored Weibull per platform and part, and the age-replacement interval.

Life data come from service events. Each (vehicle, corner, part) position starts with the
original part at 0 km (assumption: parts are original from new); a replacement at km X closes a
life of X − installed_km, *failed* when the event says the part failed, *censored* when it was
replaced preventively; the part in service now is censored at the vehicle's latest odometer.
Only parts with at least one replacement on the platform are fitted (the others have no life
data beyond "still in service").

The age-replacement interval needs the relative cost of a planned and of a failure replacement;
the defaults below are assumptions shown with every figure, and the screen lets the user enter
their own. The interval is capped at no point here: it is a fleet statistic shown beside the
manufacturer's suspension interval, never a due date.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from django.db.models import Max

from analytics.core.life import LIFE_MODEL, NotEnoughData, age_replacement, fit_weibull
from inspections.models import PARTS_BY_CODE, Platform, ServiceEvent, Vehicle
from inspections.models.catalogue import CORNER_AXLE

DEFAULT_PREVENTIVE_COST = 1.0  # assumption: relative cost of a planned replacement
DEFAULT_FAILURE_COST = 4.0  # assumption: relative cost of a replacement after failure


@dataclass(frozen=True)
class PartLife:
    platform: str
    part: str
    part_label: str
    failures: int
    censored: int
    shape: float | None
    scale_km: float | None
    shape_ci: tuple[float, float] | None
    scale_ci_km: tuple[float, float] | None
    interval_km: float | None
    cost_rate_per_km: float | None
    note: str
    model: str = LIFE_MODEL


def life_data(platform: Platform, part: str) -> tuple[np.ndarray, np.ndarray]:
    """Distances (km, shape (n,)) and failed flags (bool, (n,)) of one part on one platform."""
    axle = PARTS_BY_CODE[part].axle
    corners = [c for c, a in CORNER_AXLE.items() if a == axle]
    vehicles = Vehicle.objects.filter(platform=platform)
    latest = dict(vehicles.annotate(m=Max("service_events__odometer_km")).values_list("pk", "m"))
    from inspections.models import AlignmentSession

    odo = dict(AlignmentSession.objects.filter(vehicle__platform=platform).values("vehicle")
               .annotate(m=Max("odometer_km")).values_list("vehicle", "m"))
    events = (ServiceEvent.objects.filter(vehicle__platform=platform, kind="part_replaced",
                                          part=part)
              .order_by("vehicle_id", "corner", "odometer_km")
              .values_list("vehicle_id", "corner", "odometer_km", "reason"))
    by_position: dict[tuple[int, str], list[tuple[int, str]]] = {}
    for vid, corner, km, reason in events:
        by_position.setdefault((vid, corner), []).append((km, reason))
    dist, failed = [], []
    for vid in vehicles.values_list("pk", flat=True):
        now = max(v for v in (latest.get(vid), odo.get(vid), 0) if v is not None)
        for corner in corners:
            installed = 0
            for km, reason in by_position.get((vid, corner), []):
                if km > installed:
                    dist.append(km - installed)
                    failed.append(reason == "failed")
                installed = km
            if now > installed:
                dist.append(now - installed)
                failed.append(False)
    return np.asarray(dist, dtype=float), np.asarray(failed, dtype=bool)


def part_lives(platform: Platform, *, preventive_cost: float = DEFAULT_PREVENTIVE_COST,
               failure_cost: float = DEFAULT_FAILURE_COST) -> list[PartLife]:
    """Weibull fit and age-replacement interval per replaced part type of ``platform``."""
    parts = (ServiceEvent.objects.filter(vehicle__platform=platform, kind="part_replaced")
             .values_list("part", flat=True).distinct())
    out = []
    for part in sorted(set(parts)):
        if part not in PARTS_BY_CODE:
            continue
        dist, failed = life_data(platform, part)
        label = PARTS_BY_CODE[part].label
        base = dict(platform=platform.name, part=part, part_label=label,
                    failures=int(failed.sum()), censored=int((~failed).sum()))
        try:
            fit = fit_weibull(dist, failed)
        except NotEnoughData as exc:
            out.append(PartLife(**base, shape=None, scale_km=None, shape_ci=None, scale_ci_km=None,
                                interval_km=None, cost_rate_per_km=None, note=str(exc)))
            continue
        except ValueError as exc:
            out.append(PartLife(**base, shape=None, scale_km=None, shape_ci=None, scale_ci_km=None,
                                interval_km=None, cost_rate_per_km=None,
                                note=f"no fit: {exc}"))
            continue
        ar = age_replacement(shape=fit.shape, scale=fit.scale, preventive_cost=preventive_cost,
                             failure_cost=failure_cost)
        out.append(PartLife(**base, shape=fit.shape, scale_km=fit.scale, shape_ci=fit.shape_ci,
                            scale_ci_km=fit.scale_ci, interval_km=ar.interval,
                            cost_rate_per_km=ar.cost_rate, note=ar.reason))
    return out
