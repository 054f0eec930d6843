"""Helpers for analysis tests: give a test platform its demo corner files and some history."""
from __future__ import annotations

import datetime as dt

from analytics.core import corner_to_dict, demo_corner
from inspections import services
from inspections.models import PlatformCorner
from tests import factories as f


def give_corners(platform) -> None:
    for axle in ("front", "rear"):
        PlatformCorner.objects.get_or_create(
            platform=platform, axle=axle,
            defaults={"geometry": corner_to_dict(demo_corner(axle, "left")), "source": "demo"})


def give_history(vehicle, technician, *, visits: int = 5, start_days_ago: int = 500,
                 toe_rate_per_visit: float = -0.015, start_km: int = 10_000) -> None:
    """As-found sessions every ~90 days with a steady rear-toe drift (invented test data)."""
    for i in range(visits):
        rows = f.readings(toe=0.12 + toe_rate_per_visit * i, camber=-1.0)
        services.session_submit(
            vehicle=vehicle, technician=technician,
            measured_at=f.at(start_days_ago - 90 * i), odometer_km=start_km + 7_000 * i,
            kind="as_found", equipment_id="RIG-T", equipment_calibrated_on=dt.date(2024, 1, 1),
            readings=rows)
