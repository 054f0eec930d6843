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


def make_personas(target) -> None:
    """Set the standard personas and vehicles as attributes of ``target`` (a class or namespace).

    Two workshops (A, B); a fleet F whose van workshop B maintains; two owners; technicians of
    both workshops; a workshop manager of A, a fleet manager of F, an administrator and a user
    without a role.
    """
    from django.contrib.auth import get_user_model

    t = target
    t.workshop_a = make_workshop("Workshop A")
    t.workshop_b = make_workshop("Workshop B")
    t.fleet = make_fleet("Fleet F")
    t.platform = make_platform("Platform P")
    t.owner = make_user("owner", "owner")
    t.other_owner = make_user("other-owner", "owner")
    t.tech_a = make_user("tech-a", "technician", workshop=t.workshop_a)
    t.tech_b = make_user("tech-b", "technician", workshop=t.workshop_b)
    t.manager_a = make_user("manager-a", "manager", workshop=t.workshop_a)
    t.fleet_manager = make_user("fleet-manager", "manager", fleet=t.fleet)
    t.admin = make_user("admin", "administrator")
    t.no_role = get_user_model().objects.create_user("no-role", password="pw-test-123")
    # owner's car at workshop A; other owner's car at workshop B; a fleet van at workshop B.
    t.car_a = make_vehicle(platform=t.platform, workshop=t.workshop_a, owner=t.owner,
                           plate="AB12 CDE")
    t.car_b = make_vehicle(platform=t.platform, workshop=t.workshop_b, owner=t.other_owner,
                           plate="XY99 ZZZ")
    t.van_f = make_vehicle(platform=t.platform, workshop=t.workshop_b, fleet=t.fleet,
                           plate="VN70 FLT")
