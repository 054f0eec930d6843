"""An invented demo scenario: a regional parcel operator and a hire-car company served by two
workshops, plus a few private owners. Every platform, spec and vehicle here is demo data.

Readings are simulated: each corner's toe and camber drift linearly with distance from the last
adjustment, with measurement noise; a few vehicles take a kerb strike (a step in one front toe);
rear toe-link bushes lose stiffness with distance (some fast), front lower ball joints gain play,
and worn parts are replaced (failed or preventive).
"""
from __future__ import annotations

import datetime as dt
import math
import uuid
from dataclasses import dataclass, field
from zoneinfo import ZoneInfo

import numpy as np
from django.contrib.auth import get_user_model
from django.db import transaction

from inspections.models import (
    AlignmentSession,
    AlignmentSpec,
    ComponentCheck,
    ComponentLimit,
    Fleet,
    Platform,
    PlatformCorner,
    Profile,
    ServiceEvent,
    Vehicle,
    WheelReading,
    Workshop,
)

DEMO = "demo"
VIN_CHARS = "ABCDEFGHJKLMNPRSTUVWXYZ0123456789"
TZ = ZoneInfo("Europe/London")
BUSH_TEST_FORCE_N = 1000.0


@dataclass
class PlatformPlan:
    name: str
    model: str
    loads_n: tuple[float, float]
    tracks_mm: tuple[float, float]
    wheelbase_mm: float
    cg_mm: float
    tyre_radius_mm: float
    brake_front: float
    driven: str
    intervals: tuple[int | None, int | None, int | None, int | None]
    caster_deg: float
    rim_mm: float
    toe_rate_deg_per_10k: float  # fleet-mean drift of rear toe per 10 000 km
    specs: dict = field(default_factory=dict)


PLANS = [
    PlatformPlan("Demo Courier Van 2.0", "Courier Van", (9200, 10400), (1610, 1600), 3300, 720,
                 335, 0.64, "front", (20000, 12, 40000, 24), 3.5, 406.4, -0.030),
    PlatformPlan("Demo Saloon 1.6", "Saloon", (7900, 6300), (1565, 1555), 2700, 525, 312,
                 0.72, "front", (30000, 24, 30000, 12), 4.6, 406.4, -0.020),
    # The estate has no suspension-inspection interval entered: advice asks for it.
    PlatformPlan("Demo Estate 2.0 AWD", "Estate", (8300, 7300), (1585, 1575), 2800, 565, 322,
                 0.68, "all", (25000, 12, None, None), 4.2, 431.8, -0.025),
]


def _vin(rng: np.random.Generator) -> str:
    return "DMX" + "".join(rng.choice(list(VIN_CHARS), 14))


def _corner_geometry(axle: str) -> dict:
    from analytics.core import corner_to_dict, demo_corner

    return corner_to_dict(demo_corner(axle, "left"))


def _make_platform(plan: PlatformPlan) -> Platform:
    a_km, a_mo, s_km, s_mo = plan.intervals
    values = dict(
        reference_diameter_mm=plan.rim_mm, front_axle_load_n=plan.loads_n[0],
        rear_axle_load_n=plan.loads_n[1], track_front_mm=plan.tracks_mm[0],
        track_rear_mm=plan.tracks_mm[1], wheelbase_mm=plan.wheelbase_mm,
        cg_height_mm=plan.cg_mm, loaded_tyre_radius_mm=plan.tyre_radius_mm,
        brake_balance_front=plan.brake_front, alignment_interval_km=a_km,
        alignment_interval_months=a_mo, suspension_interval_km=s_km,
        suspension_interval_months=s_mo,
    )
    platform = Platform.objects.create(
        name=plan.name, make="Demo", model=plan.model, variant="demo data", is_demo=True,
        reference_diameter_kind="rim", driven_axle=plan.driven,
        sources={k: DEMO for k, v in values.items() if v is not None}, **values)
    specs = [
        ("front", "toe", 0.05, 0.08), ("front", "total_toe", 0.10, 0.16),
        ("front", "camber", -0.50, 0.50), ("front", "caster", plan.caster_deg, 0.75),
        ("front", "cross_camber", 0.0, 0.50), ("front", "cross_caster", 0.0, 0.50),
        ("rear", "toe", 0.12, 0.10), ("rear", "total_toe", 0.24, 0.20),
        ("rear", "camber", -1.30, 0.50), ("rear", "cross_camber", 0.0, 0.50),
        ("rear", "thrust_angle", 0.0, 0.15),
    ]
    AlignmentSpec.objects.bulk_create(
        AlignmentSpec(platform=platform, axle=a, quantity=q, nominal_deg=n, tolerance_deg=t,
                      source=DEMO) for a, q, n, t in specs)
    ComponentLimit.objects.bulk_create([
        ComponentLimit(platform=platform, part="front_lower_ball_joint", max_play_mm=1.0,
                       refused_findings=["dust_cover_damaged"], source=DEMO),
        ComponentLimit(platform=platform, part="front_track_rod_end", max_play_mm=0.5,
                       refused_findings=["dust_cover_damaged"], source=DEMO),
        ComponentLimit(platform=platform, part="rear_toe_link_inner_bush", max_play_mm=None,
                       refused_findings=["debonding", "rubber_displaced"], source=DEMO),
    ])
    for axle in ("front", "rear"):
        PlatformCorner.objects.create(platform=platform, axle=axle,
                                      geometry=_corner_geometry(axle), source=DEMO)
    return platform


def _user(username: str, password: str, role: str, **attach):
    users = get_user_model()
    user = users.objects.create_user(username=username, password=password,
                                     email=f"{username}@demo.invalid",
                                     first_name=attach.pop("first_name", ""))
    Profile.objects.create(user=user, role=role, **attach)
    return user


def _local(day: dt.date, rng: np.random.Generator) -> dt.datetime:
    minutes = int(rng.integers(8 * 60, 16 * 60))
    naive = dt.datetime.combine(day, dt.time(minutes // 60, minutes % 60))
    return naive.replace(tzinfo=TZ).astimezone(dt.UTC)


@transaction.atomic
def build(*, password: str, seed: int = 2026, today: dt.date | None = None,
          vans: int = 26, hire_cars: int = 22, private_cars: int = 12) -> dict:
    """Create the demo scenario; returns counts. Refuses to run twice (demo data exists)."""
    if Workshop.objects.filter(is_demo=True).exists():
        raise RuntimeError("demo data already exists; run with --reset to rebuild it")
    rng = np.random.default_rng(seed)
    today = today or dt.date.today()
    start = today - dt.timedelta(days=3 * 365)

    eastgate = Workshop.objects.create(
        name="Eastgate Service Bay (demo)", address="1 Example Road, Demotown",
        phone="+44 1632 960000", email="bay@eastgate.demo.invalid", is_demo=True)
    riverside = Workshop.objects.create(
        name="Riverside Motor Works (demo)", address="42 Sample Lane, Demoford",
        phone="+44 1632 960111", email="desk@riverside.demo.invalid", is_demo=True)
    parcels = Fleet.objects.create(name="Northvale Parcels (demo)",
                                   operator="Northvale Parcels Ltd (demo)", is_demo=True)
    hire = Fleet.objects.create(name="Brightway Car Hire (demo)",
                                operator="Brightway Hire (demo)", is_demo=True)

    tech = _user("demo-tech", password, "technician", workshop=eastgate, first_name="Sam")
    _user("demo-tech-riverside", password, "technician", workshop=riverside, first_name="Ali")
    _user("demo-manager", password, "manager", workshop=eastgate, first_name="Jo")
    _user("demo-fleet-manager", password, "manager", fleet=hire, first_name="Kim")
    owner = _user("demo-owner", password, "owner", first_name="Robin")
    other_owners = [_user(f"demo-owner-{i}", password, "owner") for i in range(2, 6)]

    platforms = [_make_platform(p) for p in PLANS]
    van, saloon, estate = platforms
    plans = dict(zip(platforms, PLANS, strict=True))

    groups = (
        [(van, eastgate, parcels, None, (60, 130)) for _ in range(vans)]
        + [(saloon if i % 2 else estate, riverside, hire, None, (40, 90))
           for i in range(hire_cars)]
        + [((saloon, estate)[i % 2], eastgate if i < 8 else riverside, None,
            owner if i < 2 else other_owners[i % 4], (20, 45)) for i in range(private_cars)]
    )
    counts = {"vehicles": 0, "sessions": 0, "readings": 0, "checks": 0, "events": 0}
    for n, (platform, workshop, fleet, who, km_day) in enumerate(groups):
        plate = f"DM{n % 90 + 10:02d} {''.join(rng.choice(list('ABCDEFGHJKLMNPRSTUVWXYZ'), 3))}"
        vehicle = Vehicle.objects.create(
            vin=_vin(rng), plate=plate, fleet_number=f"{'NP' if fleet == parcels else 'BH'}-{n:03d}"
            if fleet else "", platform=platform, workshop=workshop, owner=who, fleet=fleet,
            in_service_date=start - dt.timedelta(days=int(rng.integers(30, 400))), is_demo=True)
        technician = tech if workshop == eastgate else get_user_model().objects.get(
            username="demo-tech-riverside")
        c = _simulate_vehicle(vehicle, plans[platform], technician, rng, start, today,
                              km_day, kerb_strike=(n % 11 == 3), fast_bush=(n % 7 == 2))
        for k, v in c.items():
            counts[k] += v
        counts["vehicles"] += 1
    return counts


def _simulate_vehicle(vehicle, plan: PlatformPlan, technician, rng, start, today, km_day,
                      *, kerb_strike: bool, fast_bush: bool) -> dict:
    specs = {(s.axle, s.quantity): s for s in vehicle.platform.specs.all()}
    corners = ("FL", "FR", "RL", "RR")
    axle = {"FL": "front", "FR": "front", "RL": "rear", "RR": "rear"}
    rate = float(rng.uniform(*km_day))
    odo = float(rng.integers(5_000, 40_000))
    toe_rate = {c: (plan.toe_rate_deg_per_10k if axle[c] == "rear" else -0.012)
                * float(rng.lognormal(0, 0.35)) for c in corners}
    camber_rate = {c: -0.006 * float(rng.lognormal(0, 0.4)) for c in corners}
    base_toe = {c: specs[(axle[c], "toe")].nominal_deg + float(rng.normal(0, 0.02)) for c in corners}
    base_cam = {c: specs[(axle[c], "camber")].nominal_deg + float(rng.normal(0, 0.08))
                for c in corners}
    caster = {c: plan.caster_deg + float(rng.normal(0, 0.15)) for c in ("FL", "FR")}
    km_at_adjust = odo
    bush_life_km = float(rng.uniform(70_000, 110_000) if fast_bush else rng.uniform(220_000, 400_000))
    bush_km0 = {c: odo for c in ("RL", "RR")}
    joint_rate = {c: float(rng.uniform(0.05, 0.16)) / 10_000 for c in ("FL", "FR")}
    joint_km0 = {c: odo - float(rng.uniform(0, 30_000)) for c in ("FL", "FR")}
    strike_visit = int(rng.integers(5, 9)) if kerb_strike else -1
    step = {"FL": 0.0, "FR": 0.0}

    sessions, readings, checks, events = [], [], [], []
    day = start + dt.timedelta(days=int(rng.integers(0, 60)))
    visit = 0
    while day <= today:
        when = _local(day, rng)
        if visit == strike_visit:
            step["FL"] = float(rng.choice([-1, 1])) * float(rng.uniform(0.18, 0.3))
        true_toe = {c: base_toe[c] + toe_rate[c] * (odo - km_at_adjust) / 10_000
                    + step.get(c, 0.0) for c in corners}
        true_cam = {c: base_cam[c] + camber_rate[c] * (odo - km_at_adjust) / 10_000
                    for c in corners}
        found = AlignmentSession(
            vehicle=vehicle, workshop=vehicle.workshop, technician=technician, measured_at=when,
            odometer_km=int(odo), kind="as_found", equipment_id="DEMO-RIG-1",
            equipment_calibrated_on=day - dt.timedelta(days=int(rng.integers(10, 170))),
            client_token=uuid.uuid4(), notes="demo data")
        rows = {c: dict(corner=c, toe_deg=round(true_toe[c] + float(rng.normal(0, 0.012)), 3),
                        camber_deg=round(true_cam[c] + float(rng.normal(0, 0.02)), 3),
                        caster_deg=round(caster[c] + float(rng.normal(0, 0.04)), 2)
                        if c in caster else None) for c in corners}
        sessions.append((found, rows))
        out = any(abs(rows[c]["toe_deg"] - specs[(axle[c], "toe")].nominal_deg)
                  > specs[(axle[c], "toe")].tolerance_deg * 0.8
                  or abs(rows[c]["camber_deg"] - specs[(axle[c], "camber")].nominal_deg)
                  > specs[(axle[c], "camber")].tolerance_deg * 0.9 for c in corners)
        if out:  # a check at the interval that finds the axle in band leaves it as found
            adj_time = when + dt.timedelta(minutes=40)
            for c in corners:
                base_toe[c] = specs[(axle[c], "toe")].nominal_deg + float(rng.normal(0, 0.01))
                base_cam[c] = specs[(axle[c], "camber")].nominal_deg + float(rng.normal(0, 0.04))
            step = {"FL": 0.0, "FR": 0.0}
            km_at_adjust = odo
            adjusted = AlignmentSession(
                vehicle=vehicle, workshop=vehicle.workshop, technician=technician,
                measured_at=adj_time, odometer_km=int(odo), kind="as_adjusted",
                equipment_id="DEMO-RIG-1", equipment_calibrated_on=found.equipment_calibrated_on,
                client_token=uuid.uuid4(), notes="demo data")
            rows2 = {c: dict(corner=c, toe_deg=round(base_toe[c], 3),
                             camber_deg=round(base_cam[c], 3),
                             caster_deg=round(caster[c], 2) if c in caster else None)
                     for c in corners}
            sessions.append((adjusted, rows2))
            events.append(ServiceEvent(
                vehicle=vehicle, workshop=vehicle.workshop, recorded_by=technician,
                performed_at=adj_time, odometer_km=int(odo), kind="alignment_adjusted",
                client_token=uuid.uuid4(), notes="demo data"))
        if visit % 2 == 1:  # suspension checks every second visit
            for c in ("RL", "RR"):
                ratio = math.exp(-(odo - bush_km0[c]) / bush_life_km)
                stiffness = 3000.0 * ratio  # N/mm relative to the demo toe link's new value
                deflection = BUSH_TEST_FORCE_N / stiffness * float(rng.normal(1, 0.04))
                findings = (["debonding"] if ratio < 0.4 else ["cracking"] if ratio < 0.65
                            else ["none"])
                verdict = "unfit" if ratio < 0.4 else "worn" if ratio < 0.55 else (
                    "keep_watch" if ratio < 0.75 else "sound")
                checks.append(ComponentCheck(
                    vehicle=vehicle, workshop=vehicle.workshop, technician=technician,
                    checked_at=when + dt.timedelta(minutes=20), odometer_km=int(odo), corner=c,
                    part="rear_toe_link_inner_bush", deflection_mm=round(deflection, 3),
                    deflection_force_n=BUSH_TEST_FORCE_N, findings=findings, verdict=verdict,
                    defect_category="major" if ratio < 0.4 else "", client_token=uuid.uuid4(),
                    notes="demo data"))
                if ratio < 0.4:
                    bush_km0[c] = odo
                    events.append(ServiceEvent(
                        vehicle=vehicle, workshop=vehicle.workshop, recorded_by=technician,
                        performed_at=when + dt.timedelta(minutes=90), odometer_km=int(odo),
                        kind="part_replaced", corner=c, part="rear_toe_link_inner_bush",
                        reason="failed", client_token=uuid.uuid4(), notes="demo data"))
            for c in ("FL", "FR"):
                play = max(0.0, 0.05 + joint_rate[c] * (odo - joint_km0[c])
                           + float(rng.normal(0, 0.03)))
                verdict = "unfit" if play > 1.0 else "worn" if play > 0.8 else (
                    "keep_watch" if play > 0.5 else "sound")
                checks.append(ComponentCheck(
                    vehicle=vehicle, workshop=vehicle.workshop, technician=technician,
                    checked_at=when + dt.timedelta(minutes=25), odometer_km=int(odo), corner=c,
                    part="front_lower_ball_joint", play_mm=round(play, 2), play_direction="axial",
                    play_loading="unloaded", findings=["none"], verdict=verdict,
                    defect_category="dangerous" if play > 1.6 else "major" if play > 1.0 else "",
                    client_token=uuid.uuid4(), notes="demo data"))
                if play > 0.8:
                    joint_km0[c] = odo
                    events.append(ServiceEvent(
                        vehicle=vehicle, workshop=vehicle.workshop, recorded_by=technician,
                        performed_at=when + dt.timedelta(minutes=95), odometer_km=int(odo),
                        kind="part_replaced", corner=c, part="front_lower_ball_joint",
                        reason="failed" if play > 1.0 else "preventive",
                        client_token=uuid.uuid4(), notes="demo data"))
        visit += 1
        gap = int(rng.integers(80, 100))
        day += dt.timedelta(days=gap)
        odo += rate * gap * float(rng.uniform(0.85, 1.15))

    AlignmentSession.objects.bulk_create([s for s, _ in sessions])
    readings = [WheelReading(session=s, **row) for s, rows in sessions for row in rows.values()]
    WheelReading.objects.bulk_create(readings)
    ComponentCheck.objects.bulk_create(checks)
    ServiceEvent.objects.bulk_create(events)
    return {"sessions": len(sessions), "readings": len(readings), "checks": len(checks),
            "events": len(events)}
