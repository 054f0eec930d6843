"""Factories for test records. Values are invented test data, not any vehicle's specification."""
from __future__ import annotations

import datetime as dt
import itertools

from django.contrib.auth import get_user_model
from django.utils import timezone

from inspections.models import AlignmentSpec, Fleet, Platform, Profile, Vehicle, Workshop

_seq = itertools.count(1)
VIN_ALPHABET = "ABCDEFGHJKLMNPRSTUVWXYZ0123456789"


def make_vin(n: int | None = None) -> str:
    n = next(_seq) if n is None else n
    digits = []
    for _ in range(6):
        n, r = divmod(n, len(VIN_ALPHABET))
        digits.append(VIN_ALPHABET[r])
    return "TST" + "WX" + "7" * 6 + "".join(reversed(digits))


def make_workshop(name: str | None = None) -> Workshop:
    return Workshop.objects.create(name=name or f"Test workshop {next(_seq)}")


def make_fleet(name: str | None = None) -> Fleet:
    return Fleet.objects.create(name=name or f"Test fleet {next(_seq)}")


def make_user(username: str, role: str, *, workshop=None, fleet=None, password="pw-test-123"):
    user = get_user_model().objects.create_user(username=username, password=password,
                                                email=f"{username}@example.invalid")
    if role == "administrator":
        user.is_staff = user.is_superuser = True
        user.save()
    Profile.objects.create(user=user, role=role, workshop=workshop, fleet=fleet)
    return user


def make_platform(name: str | None = None, **overrides) -> Platform:
    values = dict(
        name=name or f"Test platform {next(_seq)}", make="Testmake", model="T1",
        reference_diameter_mm=406.4, front_axle_load_n=8000.0, rear_axle_load_n=7000.0,
        track_front_mm=1550.0, track_rear_mm=1540.0, wheelbase_mm=2750.0, cg_height_mm=550.0,
        loaded_tyre_radius_mm=310.0, brake_balance_front=0.7, driven_axle="front",
        alignment_interval_km=20000, alignment_interval_months=12,
        suspension_interval_km=30000, suspension_interval_months=12,
    )
    values.update(overrides)
    values.setdefault("sources", {k: "unverified" for k in values if k.endswith(
        ("_mm", "_n", "_front", "_km", "_months"))})
    platform = Platform.objects.create(**values)
    for axle, quantity, nominal, tol in [
        ("front", "toe", 0.05, 0.10), ("front", "camber", -0.5, 0.5),
        ("front", "caster", 4.0, 0.75), ("rear", "toe", 0.10, 0.10),
        ("rear", "camber", -1.2, 0.5), ("rear", "thrust_angle", 0, 0.15),
    ]:
        AlignmentSpec.objects.create(platform=platform, axle=axle, quantity=quantity,
                                     nominal_deg=nominal, tolerance_deg=tol, source="unverified")
    return platform


def make_vehicle(*, platform, workshop, owner=None, fleet=None, plate=None, **kw) -> Vehicle:
    n = next(_seq)
    return Vehicle.objects.create(
        vin=kw.pop("vin", make_vin(n)), plate=plate or f"TS{n:02d} ABC", platform=platform,
        workshop=workshop, owner=owner, fleet=fleet,
        fleet_number=kw.pop("fleet_number", f"F-{n:04d}"),
        in_service_date=kw.pop("in_service_date", dt.date(2023, 1, 1)), **kw)


def readings(toe=0.1, camber=-0.8, caster=4.0):
    """A full set of four wheel readings (degrees)."""
    rows = []
    for corner in ("FL", "FR", "RL", "RR"):
        rows.append({"corner": corner, "toe_deg": toe, "camber_deg": camber,
                     "caster_deg": caster if corner.startswith("F") else None})
    return rows


def at(days_ago: float = 0) -> dt.datetime:
    return timezone.now() - dt.timedelta(days=days_ago)
