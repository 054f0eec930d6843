"""A large invented fleet for scale tests (demo data): thousands of vehicles on a dozen platforms.

Every platform, workshop, fleet and vehicle here is invented and labelled demo. The simulation
follows :mod:`analytics.demo.scenario` (linear toe/camber drift from the last adjustment with
measurement noise, kerb strikes on some vehicles, rear toe-link bushes losing stiffness, front
lower ball joints gaining play, worn parts replaced), vectorised across vehicles with one loop over
quarterly visits: five years of visits every 80–100 days (≈ 20 sessions and ≈ 80 wheel readings
per vehicle, plus component checks every second visit and service events).

Writes use PostgreSQL's bulk path: ``COPY … FROM STDIN`` (CSV) through psycopg 3's
``cursor.copy()``, one COPY per table; ids are reserved from each table's identity sequence
under a table lock so the rows can reference each other. Database constraints (physical ranges,
uniqueness) still apply to every copied row. The generated columns of ``Vehicle``
(``plate_key``, ``fleet_number_key``) are computed by the database and never copied.

Units: odometer km, angles deg (ISO 8855 signs, toe positive = toe-in), play and deflection mm,
forces N, times stored UTC (visits happen 08:00–16:00 Europe/London). Bush deflections are
recorded to 0.01 mm and ball-joint play to 0.01 mm (a dial gauge's resolution).
"""
from __future__ import annotations

import datetime as dt
import io
from dataclasses import replace

import numpy as np
import pandas as pd
from django.contrib.auth import get_user_model
from django.db import connection, transaction

from inspections.models import (
    AlignmentSession,
    ComponentCheck,
    Fleet,
    Platform,
    Profile,
    ServiceEvent,
    Vehicle,
    WheelReading,
    Workshop,
)

from .scenario import BUSH_TEST_FORCE_N, PLANS, VIN_CHARS, _make_platform

__all__ = ["PLATFORMS", "WORKSHOP_PREFIX", "build", "copy_rows", "delete", "platform_plans"]

PLATFORMS = 12
WORKSHOPS = 20
FLEETS = 8
YEARS = 5
WORKSHOP_PREFIX = "Scale Bay"
CORNERS = ("FL", "FR", "RL", "RR")
FRONT = np.array([True, True, False, False])


def platform_plans(n: int = PLATFORMS) -> list:
    """``n`` invented platform plans, "Demo Platform 01 (demo)" …, varied from the demo three."""
    out = []
    for i in range(n):
        base = PLANS[i % len(PLANS)]
        f = 1.0 + 0.03 * ((i * 7) % 5 - 2)  # ±6 % on loads and dimensions
        out.append(replace(
            base, name=f"Demo Platform {i + 1:02d} (demo)", model=f"Platform {i + 1:02d}",
            loads_n=(base.loads_n[0] * f, base.loads_n[1] * f),
            tracks_mm=(base.tracks_mm[0] * (1 + (f - 1) / 3), base.tracks_mm[1] * (1 + (f - 1) / 3)),
            wheelbase_mm=base.wheelbase_mm * (1 + (f - 1) / 2), cg_mm=base.cg_mm * f,
            toe_rate_deg_per_10k=base.toe_rate_deg_per_10k * (0.8 + 0.05 * (i % 9))))
    return out


def copy_rows(table: str, columns: list[str], frame: pd.DataFrame, *, cursor=None) -> int:
    """``COPY table (columns) FROM STDIN (FORMAT csv)`` of a DataFrame; returns the row count.

    Missing values (NaN, None) of the nullable columns arrive as NULL; an empty field of any
    other column arrives as the empty string (``FORCE_NOT_NULL``).
    """
    if frame.empty:
        return 0
    buf = io.StringIO()
    frame[columns].to_csv(buf, header=False, index=False, na_rep="", lineterminator="\n")
    text = buf.getvalue()
    cols = ", ".join(f'"{c}"' for c in columns)
    not_null = ", ".join(f'"{c}"' for c in columns if c not in _NULLABLE.get(table, set()))
    options = f"FORMAT csv, FORCE_NOT_NULL ({not_null})" if not_null else "FORMAT csv"
    cur = cursor or connection.cursor()
    with connection.wrap_database_errors, cur.copy(
            f"COPY {table} ({cols}) FROM STDIN ({options})") as cp:  # a violation → IntegrityError
        step = 1 << 22
        for i in range(0, len(text), step):
            cp.write(text[i:i + step])
    return len(frame)


# Columns that may be NULL; an empty field of any other column means ''.
_NULLABLE = {
    "inspections_vehicle": {"fleet_id", "owner_id"},
    "inspections_alignmentsession": {"supersedes_id", "ride_height_fl_mm", "ride_height_fr_mm",
                                     "ride_height_rl_mm", "ride_height_rr_mm"},
    "inspections_wheelreading": {"caster_deg", "sai_deg"},
    "inspections_componentcheck": {"session_id", "supersedes_id", "play_mm", "deflection_mm",
                                   "deflection_force_n"},
    "inspections_serviceevent": set(),
}


def _reserve_ids(cur, model, n: int) -> np.ndarray:
    """``n`` consecutive ids from the table's identity sequence (table locked by the caller)."""
    table = model._meta.db_table
    cur.execute(f"SELECT pg_get_serial_sequence('{table}', 'id')")
    seq = cur.fetchone()[0]
    cur.execute(f"SELECT nextval('{seq}')")
    first = int(cur.fetchone()[0])
    cur.execute("SELECT setval(%s, %s)", [seq, first + max(n, 1) - 1])
    return np.arange(first, first + n, dtype=np.int64)


def _uuids(rng: np.random.Generator, n: int) -> list[str]:
    raw = rng.integers(0, 2**63, size=(n, 2), dtype=np.int64).view(np.uint64)
    hexes = [f"{a:016x}{b:016x}" for a, b in raw]
    # version 4, variant 10
    return [f"{h[:8]}-{h[8:12]}-4{h[13:16]}-{'89ab'[int(h[16], 16) & 3]}{h[17:20]}-{h[20:]}"
            for h in hexes]


def _utc(days: np.ndarray, minutes: np.ndarray) -> pd.DatetimeIndex:
    """Local Europe/London wall time (date + minutes after midnight) → UTC timestamps."""
    local = pd.to_datetime(days, unit="D") + pd.to_timedelta(minutes, unit="min")
    return pd.DatetimeIndex(local).tz_localize("Europe/London").tz_convert("UTC")


def _aware(values) -> pd.DatetimeIndex:
    idx = pd.DatetimeIndex(pd.to_datetime(values, utc=True))
    return idx.tz_convert("UTC")


def _vins(rng: np.random.Generator, n: int, tag: str) -> list[str]:
    chars = np.array(list(VIN_CHARS))
    body = chars[rng.integers(0, len(chars), size=(n, 8))]
    return [f"DMX{tag}{i:06d}{''.join(b)}"[:17] for i, b in enumerate(body)]


@transaction.atomic
def build(*, vehicles: int = 10_000, seed: int = 7, today: dt.date | None = None) -> dict:
    """Create the large invented fleet (demo data); returns row counts per table.

    Refuses to run when large-fleet demo workshops already exist (use :func:`delete` first).
    """
    if Workshop.objects.filter(name__startswith=WORKSHOP_PREFIX, is_demo=True).exists():
        raise RuntimeError("large demo fleet already exists; run with --reset to rebuild it")
    if vehicles < 1:
        raise ValueError("vehicles: must be at least 1")
    rng = np.random.default_rng(seed)
    today = today or dt.date.today()
    start = today - dt.timedelta(days=int(YEARS * 365.25))
    tag = f"{seed % 100:02d}"

    plans = platform_plans()
    platforms = []
    for plan in plans:
        existing = Platform.objects.filter(name=plan.name).first()
        platforms.append(existing or _make_platform(plan))
    workshops = [Workshop.objects.create(name=f"{WORKSHOP_PREFIX} {i + 1:02d} (demo)",
                                         address="Example Estate, Demotown", is_demo=True)
                 for i in range(WORKSHOPS)]
    fleets = [Fleet.objects.get_or_create(name=f"Scale Operator {i + 1:02d} (demo)",
                                          defaults=dict(operator="invented (demo)", is_demo=True))[0]
              for i in range(FLEETS)]
    users = get_user_model()
    techs = []
    for i, w in enumerate(workshops):
        u = users.objects.create_user(username=f"demo-scale-tech-{seed}-{i + 1:02d}", password=None)
        Profile.objects.create(user=u, role="technician", workshop=w)
        techs.append(u.pk)

    V = vehicles
    p_idx = rng.integers(0, len(platforms), V)
    w_idx = rng.integers(0, len(workshops), V)
    f_idx = rng.integers(0, len(fleets), V)
    specs = {}
    for pl in platforms:
        for s in pl.specs.all():
            specs[(pl.pk, s.axle, s.quantity)] = s
    pid = np.array([p.pk for p in platforms])[p_idx]
    axle = np.array(["front", "front", "rear", "rear"])

    def spec_arr(q: str, attr: str) -> np.ndarray:  # (V, 4)
        table = np.array([[getattr(specs[(p.pk, a, q)], attr) for a in axle] for p in platforms])
        return table[p_idx]

    toe_nom, toe_tol = spec_arr("toe", "nominal_deg"), spec_arr("toe", "tolerance_deg")
    cam_nom, cam_tol = spec_arr("camber", "nominal_deg"), spec_arr("camber", "tolerance_deg")
    plan_rate = np.array([p.toe_rate_deg_per_10k for p in plans])[p_idx]
    caster_nom = np.array([p.caster_deg for p in plans])[p_idx]
    a_km = np.array([p.intervals[0] or 25_000 for p in plans])[p_idx].astype(float)

    # ---- vehicles
    cur = connection.cursor()
    for m in (Vehicle, AlignmentSession, WheelReading, ComponentCheck, ServiceEvent):
        cur.execute(f"LOCK TABLE {m._meta.db_table} IN SHARE ROW EXCLUSIVE MODE")
    vid = _reserve_ids(cur, Vehicle, V)
    letters = np.array(list("ABCDEFGHJKLMNPRSTUVWXYZ"))
    plate_tail = letters[rng.integers(0, len(letters), size=(V, 3))]
    vdf = pd.DataFrame({
        "id": vid, "vin": _vins(rng, V, tag),
        "plate": [f"SC{i % 90 + 10:02d} {''.join(t)}" for i, t in enumerate(plate_tail)],
        "fleet_number": [f"SO{f + 1:02d}-{i:05d}" for i, f in enumerate(f_idx)],
        "platform_id": pid, "workshop_id": np.array([w.pk for w in workshops])[w_idx],
        "fleet_id": np.array([f.pk for f in fleets])[f_idx], "owner_id": None,
        "in_service_date": [start - dt.timedelta(days=int(d)) for d in rng.integers(30, 400, V)],
        "is_demo": True,
    })
    counts = {"vehicles": copy_rows("inspections_vehicle", list(vdf.columns), vdf, cursor=cur)}
    tech_of = np.array(techs)[w_idx]
    ws_of = vdf["workshop_id"].to_numpy()

    # ---- simulation state, shape (V,) or (V, 4)
    rate = rng.uniform(30, 110, V)
    odo = rng.integers(5_000, 40_000, V).astype(float)
    lognorm = rng.lognormal(0, 0.35, (V, 4))
    toe_rate = np.where(FRONT[None, :], -0.012, plan_rate[:, None]) * lognorm
    cam_rate = -0.006 * rng.lognormal(0, 0.4, (V, 4))
    base_toe = toe_nom + rng.normal(0, 0.02, (V, 4))
    base_cam = cam_nom + rng.normal(0, 0.08, (V, 4))
    caster = caster_nom[:, None] + rng.normal(0, 0.15, (V, 2))
    km_adj = odo.copy()
    fast = (np.arange(V) % 7) == 2
    bush_life = np.where(fast, rng.uniform(70_000, 110_000, V), rng.uniform(220_000, 400_000, V))
    bush_km0 = np.repeat(odo[:, None], 2, axis=1)
    joint_rate = rng.uniform(0.05, 0.16, (V, 2)) / 10_000
    joint_km0 = odo[:, None] - rng.uniform(0, 30_000, (V, 2))
    strike = np.where((np.arange(V) % 11) == 3, rng.integers(5, 9, V), -1)
    step_fl = np.zeros(V)
    epoch = dt.date(1970, 1, 1)
    day = np.full(V, (start - epoch).days) + rng.integers(0, 60, V)
    end = (today - epoch).days

    S, C, E = [], [], []  # per-visit pieces: sessions (with readings), checks, events
    visit = 0
    while True:
        alive = day <= end
        if not alive.any():
            break
        idx = np.nonzero(alive)[0]
        n = idx.size
        minutes = rng.integers(8 * 60, 16 * 60, n)
        when = _utc(day[idx], minutes)
        step_fl[idx] = np.where(strike[idx] == visit,
                                rng.choice([-1.0, 1.0], n) * rng.uniform(0.18, 0.3, n), step_fl[idx])
        dist = (odo[idx] - km_adj[idx])[:, None] / 10_000
        true_toe = base_toe[idx] + toe_rate[idx] * dist
        true_toe[:, 0] += step_fl[idx]
        true_cam = base_cam[idx] + cam_rate[idx] * dist
        toe = np.round(true_toe + rng.normal(0, 0.012, (n, 4)), 3)
        cam = np.round(true_cam + rng.normal(0, 0.02, (n, 4)), 3)
        cas = np.round(caster[idx] + rng.normal(0, 0.04, (n, 2)), 2)
        calib = day[idx] - rng.integers(10, 170, n)
        S.append(dict(v=idx, when=when, odo=odo[idx].astype(int), kind="as_found", calib=calib,
                      toe=toe, cam=cam, cas=cas))
        out = ((np.abs(toe - toe_nom[idx]) > toe_tol[idx] * 0.8)
               | (np.abs(cam - cam_nom[idx]) > cam_tol[idx] * 0.9)).any(axis=1)
        adj = out | (odo[idx] - km_adj[idx] >= a_km[idx])
        if adj.any():
            j = idx[adj]
            m = j.size
            base_toe[j] = toe_nom[j] + rng.normal(0, 0.01, (m, 4))
            base_cam[j] = cam_nom[j] + rng.normal(0, 0.04, (m, 4))
            step_fl[j] = 0.0
            km_adj[j] = odo[j]
            t_adj = when[adj] + pd.Timedelta(minutes=40)
            S.append(dict(v=j, when=t_adj, odo=odo[j].astype(int), kind="as_adjusted",
                          calib=calib[adj], toe=np.round(base_toe[j], 3),
                          cam=np.round(base_cam[j], 3), cas=np.round(caster[j], 2)))
            E.append(dict(v=j, when=t_adj, odo=odo[j].astype(int), kind="alignment_adjusted",
                          corner="", part="", reason=""))
        if visit % 2 == 1:
            for k, c in enumerate(("RL", "RR")):
                ratio = np.exp(-(odo[idx] - bush_km0[idx, k]) / bush_life[idx])
                stiff = 3000.0 * ratio
                defl = np.round(BUSH_TEST_FORCE_N / stiff * rng.normal(1, 0.04, n), 2)
                findings = np.where(ratio < 0.4, '["debonding"]',
                                    np.where(ratio < 0.65, '["cracking"]', '["none"]'))
                verdict = np.where(ratio < 0.4, "unfit", np.where(
                    ratio < 0.55, "worn", np.where(ratio < 0.75, "keep_watch", "sound")))
                C.append(dict(v=idx, when=when + pd.Timedelta(minutes=20), odo=odo[idx].astype(int),
                              corner=c, part="rear_toe_link_inner_bush", play=np.nan,
                              pdir="", pload="", defl=defl, force=BUSH_TEST_FORCE_N,
                              findings=findings, verdict=verdict,
                              cat=np.where(ratio < 0.4, "major", "")))
                rep = ratio < 0.4
                if rep.any():
                    j = idx[rep]
                    bush_km0[j, k] = odo[j]
                    E.append(dict(v=j, when=when[rep] + pd.Timedelta(minutes=90),
                                  odo=odo[j].astype(int), kind="part_replaced", corner=c,
                                  part="rear_toe_link_inner_bush", reason="failed"))
            for k, c in enumerate(("FL", "FR")):
                play = np.round(np.maximum(0.0, 0.05 + joint_rate[idx, k] * (odo[idx] - joint_km0[idx, k])
                                           + rng.normal(0, 0.03, n)), 2)
                verdict = np.where(play > 1.0, "unfit", np.where(
                    play > 0.8, "worn", np.where(play > 0.5, "keep_watch", "sound")))
                C.append(dict(v=idx, when=when + pd.Timedelta(minutes=25), odo=odo[idx].astype(int),
                              corner=c, part="front_lower_ball_joint", play=play, pdir="axial",
                              pload="unloaded", defl=np.nan, force=np.nan, findings='["none"]',
                              verdict=verdict,
                              cat=np.where(play > 1.6, "dangerous", np.where(play > 1.0, "major", ""))))
                rep = play > 0.8
                if rep.any():
                    j = idx[rep]
                    joint_km0[j, k] = odo[j]
                    E.append(dict(v=j, when=when[rep] + pd.Timedelta(minutes=95),
                                  odo=odo[j].astype(int), kind="part_replaced", corner=c,
                                  part="front_lower_ball_joint",
                                  reason=np.where(play[rep] > 1.0, "failed", "preventive")))
        visit += 1
        gap = rng.integers(80, 100, V)
        odo = odo + np.where(alive, rate * gap * rng.uniform(0.85, 1.15, V), 0.0)
        day = day + gap

    now = pd.Timestamp.now(tz="UTC")
    # ---- sessions and readings
    sv = np.concatenate([s["v"] for s in S])
    ns = sv.size
    sid = _reserve_ids(cur, AlignmentSession, ns)
    sdf = pd.DataFrame({
        "id": sid, "vehicle_id": vid[sv], "workshop_id": ws_of[sv], "technician_id": tech_of[sv],
        "odometer_km": np.concatenate([s["odo"] for s in S]), "odometer_change_reason": "",
        "notes": "demo data", "correction_reason": "", "client_token": _uuids(rng, ns),
        "created_at": now, "measured_at": np.concatenate([s["when"].to_numpy() for s in S]),
        "kind": np.concatenate([[s["kind"]] * s["v"].size for s in S]),
        "equipment_id": "DEMO-RIG-1",
        "equipment_calibrated_on": pd.to_datetime(np.concatenate([s["calib"] for s in S]),
                                                  unit="D").date,
    })
    sdf["measured_at"] = _aware(sdf["measured_at"])
    counts["sessions"] = copy_rows("inspections_alignmentsession", list(sdf.columns), sdf, cursor=cur)
    toe = np.concatenate([s["toe"] for s in S])
    cam = np.concatenate([s["cam"] for s in S])
    cas = np.concatenate([s["cas"] for s in S])
    rid = _reserve_ids(cur, WheelReading, ns * 4)
    cas_full = np.concatenate([cas, np.full((ns, 2), np.nan)], axis=1)
    rdf = pd.DataFrame({
        "id": rid, "session_id": np.repeat(sid, 4), "corner": np.tile(CORNERS, ns),
        "toe_deg": toe.ravel(), "camber_deg": cam.ravel(), "caster_deg": cas_full.ravel(),
        "sai_deg": np.nan,
    })
    counts["readings"] = copy_rows("inspections_wheelreading", list(rdf.columns), rdf, cursor=cur)

    # ---- component checks
    cv = np.concatenate([c["v"] for c in C]) if C else np.empty(0, int)
    nc = cv.size

    def cat(key, kind=None):
        return np.concatenate([np.broadcast_to(np.asarray(c[key], dtype=kind), c["v"].shape)
                               for c in C])

    cdf = pd.DataFrame({
        "id": _reserve_ids(cur, ComponentCheck, nc), "vehicle_id": vid[cv], "workshop_id": ws_of[cv],
        "technician_id": tech_of[cv], "odometer_km": cat("odo"), "odometer_change_reason": "",
        "notes": "demo data", "correction_reason": "", "client_token": _uuids(rng, nc),
        "created_at": now, "checked_at": np.concatenate([c["when"].to_numpy() for c in C]),
        "corner": cat("corner", object), "part": cat("part", object), "play_mm": cat("play", float),
        "play_direction": cat("pdir", object), "play_loading": cat("pload", object),
        "deflection_mm": cat("defl", float), "deflection_force_n": cat("force", float),
        "findings": cat("findings", object), "verdict": cat("verdict", object),
        "defect_category": cat("cat", object),
    })
    cdf["checked_at"] = _aware(cdf["checked_at"])
    counts["checks"] = copy_rows("inspections_componentcheck", list(cdf.columns), cdf, cursor=cur)

    # ---- service events
    ev = np.concatenate([e["v"] for e in E]) if E else np.empty(0, int)
    ne = ev.size

    def ecat(key):
        return np.concatenate([np.broadcast_to(np.asarray(e[key], dtype=object), e["v"].shape)
                               for e in E])

    edf = pd.DataFrame({
        "id": _reserve_ids(cur, ServiceEvent, ne), "vehicle_id": vid[ev], "workshop_id": ws_of[ev],
        "recorded_by_id": tech_of[ev], "performed_at": np.concatenate([e["when"].to_numpy() for e in E]),
        "odometer_km": np.concatenate([e["odo"] for e in E]), "kind": ecat("kind"),
        "corner": ecat("corner"), "part": ecat("part"), "reason": ecat("reason"),
        "notes": "demo data", "client_token": _uuids(rng, ne), "created_at": now,
    })
    edf["performed_at"] = _aware(edf["performed_at"])
    counts["events"] = copy_rows("inspections_serviceevent", list(edf.columns), edf, cursor=cur)
    cur.execute("ANALYZE inspections_vehicle")
    for m in (AlignmentSession, WheelReading, ComponentCheck, ServiceEvent):
        cur.execute(f"ANALYZE {m._meta.db_table}")
    return counts


def vacuum() -> None:
    """``VACUUM (ANALYZE)`` of the tables :func:`build` writes, outside any transaction: rows
    written in bulk are otherwise checked and marked visible by their first readers (the first
    fleet recompute after a fresh build read ≈ 1.4 CPU-s more in PostgreSQL than later ones),
    and index-only scans need the visibility map that VACUUM sets — on a running service
    autovacuum does this (PostgreSQL manual, "Routine Vacuuming", the visibility map)."""
    tables = ", ".join(m._meta.db_table for m in (Vehicle, AlignmentSession, WheelReading,
                                                  ComponentCheck, ServiceEvent))
    with connection.cursor() as cur:
        cur.execute(f"VACUUM (ANALYZE) {tables}")


@transaction.atomic
def delete() -> None:
    """Remove the large demo fleet (its workshops' vehicles and records, results, users)."""
    from analytics.models import AnalysisRequest, AnalysisResult

    shops = Workshop.objects.filter(name__startswith=WORKSHOP_PREFIX, is_demo=True)
    vids = list(Vehicle.objects.filter(workshop__in=shops).values_list("pk", flat=True))
    with connection.cursor() as cur:
        for table, col in (("inspections_wheelreading", "session_id IN (SELECT id FROM "
                            "inspections_alignmentsession WHERE vehicle_id = ANY(%s))"),):
            cur.execute(f"DELETE FROM {table} WHERE {col}", [vids])
        for m in (ComponentCheck, AlignmentSession, ServiceEvent):
            cur.execute(f"DELETE FROM {m._meta.db_table} WHERE vehicle_id = ANY(%s)", [vids])
    AnalysisRequest.objects.filter(vehicle_id__in=vids).delete()
    AnalysisResult.objects.filter(vehicle_id__in=vids).delete()
    Vehicle.objects.filter(pk__in=vids).delete()
    users = get_user_model().objects.filter(username__startswith="demo-scale-tech-")
    Profile.objects.filter(user__in=users).delete()
    users.delete()
    shops.delete()
