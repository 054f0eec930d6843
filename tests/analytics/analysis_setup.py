"""Give the persona vehicles a history and an analysis (invented test data, not a vehicle's spec)."""
from __future__ import annotations

import datetime as dt

from analytics import services
from analytics.core.corner_file import corner_to_dict
from analytics.core.demo_corners import demo_corner
from inspections import services as records
from inspections.models import ComponentLimit, PlatformCorner
from tests import factories as f


def add_corners(platform) -> None:
    for axle in ("front", "rear"):
        PlatformCorner.objects.get_or_create(
            platform=platform, axle=axle,
            defaults={"geometry": corner_to_dict(demo_corner(axle, "left")), "source": "demo corner"})
    ComponentLimit.objects.get_or_create(platform=platform, part="front_lower_ball_joint",
                                         defaults={"max_play_mm": 1.0, "source": "test limit source"})


def give_history(vehicle, technician, *, visits: int = 5, toe_step: float = 0.03):
    """``visits`` as-found sessions a few months apart, toe drifting; rising ball-joint play."""
    for i in range(visits):
        when = f.at(days_ago=120 * (visits - i))
        km = 20_000 + 9_000 * i
        readings = f.readings(toe=0.05 + toe_step * i, camber=-0.7 - 0.01 * i)
        records.session_submit(vehicle=vehicle, technician=technician, measured_at=when,
                               odometer_km=km, kind="as_found", equipment_id="RIG-1",
                               equipment_calibrated_on=(when - dt.timedelta(days=30)).date(),
                               readings=readings)
        records.component_check_submit(vehicle=vehicle, technician=technician,
                                       checked_at=when + dt.timedelta(minutes=30), odometer_km=km,
                                       corner="FL", part="front_lower_ball_joint",
                                       verdict="keep_watch", play_mm=0.15 + 0.17 * i,
                                       play_direction="axial", play_loading="loaded")
    return services.vehicle_analyse(vehicle_id=vehicle.pk)
