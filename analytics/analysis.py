"""One vehicle's analysis: drift, wear, compliance under load and advice, from plain data.

Reads a :class:`~analytics.inputs.VehicleData` (no queries here) and calls the pure core.
Returns a JSON-ready payload (what dashboards, charts and PDFs show) and the core's advice.
Assumptions used here are stated in ``ASSUMPTIONS`` and carried in every payload.
"""
from __future__ import annotations

import datetime as dt
import functools
import json
import math
from dataclasses import asdict, fields

import numpy as np
import pandas as pd

from analytics.core import advice as adv
from analytics.core import corner_from_dict, mirror_corner
from analytics.core.compliance import LinkStiffnessToe, stability_verdicts
from analytics.core.condition import (
    DEFLECTION_ASSUMPTION,
    FINDING_STIFFNESS_FACTORS,
    FINDINGS_NOTE,
    LinkCondition,
    WhatIfRow,
    measured_corner,
    what_if_many,
)
from analytics.core.drift import (
    CrossingForecast,
    daily_distance_rate,
    days_since,
    fit_drift,
    forecast_drift,
)
from analytics.core.load_cases import Platform as LoadPlatform
from analytics.core.load_cases import vehicle_load_cases
from analytics.core.pooling import shrink_toward
from analytics.core.wear import (
    StiffnessCriterion,
    fit_stiffness_trend,
    forecast_play,
    forecast_stiffness_criterion,
)
from inspections.models.catalogue import CORNER_AXLE, CORNER_SIDE, PARTS_BY_CODE

from .inputs import VehicleData

ANGLES = ("toe", "camber")
HORIZON_KM = 80_000.0
ASSUMPTIONS = {
    "toe_repeatability_deg": 0.01,  # common practice, no source: a rig's repeatability
    "camber_repeatability_deg": 0.02,
    "play_repeatability_mm": 0.05,
    "stiffness_relative_sd": 0.05,
    "forecast_horizon_km": HORIZON_KM,
    "finding_stiffness_factors": dict(FINDING_STIFFNESS_FACTORS),
    "finding_note": FINDINGS_NOTE,
    "deflection_note": DEFLECTION_ASSUMPTION,
}
REPEATABILITY = {"toe": 0.01, "camber": 0.02}


def _f(x) -> float | None:
    return None if x is None or (isinstance(x, float) and not math.isfinite(x)) else float(x)


def _iso(d: dt.date | None) -> str | None:
    return d.isoformat() if d else None


def _forecast_json(fc: CrossingForecast) -> dict:
    return {"status": fc.status, "side": fc.side, "early_km": _f(fc.early_km),
            "likely_km": _f(fc.likely_km), "late_km": _f(fc.late_km),
            "early_date": _iso(fc.early_date), "likely_date": _iso(fc.likely_date),
            "late_date": _iso(fc.late_date), "model": fc.model, "notes": list(fc.notes)}


def _events_between(times, events) -> np.ndarray:
    """Bool (n,): for each of ``times`` (in order), whether one of ``events`` fell after the
    previous time and at or before this one (an adjustment, a replacement)."""
    times = list(times)
    flags = np.zeros(len(times), dtype=bool)
    for i in range(1, len(times)):
        flags[i] = any(times[i - 1] < t <= times[i] for t in events)
    return flags


def _adjusted_flags(found: pd.DataFrame, adjust_times: list) -> np.ndarray:
    """For each as-found reading, whether an adjustment happened since the previous one."""
    return _events_between(found["measured_at"], adjust_times)


def _drift(data: VehicleData, km_per_day: float | None, today: dt.date, odo: float):
    r = data.readings
    out: dict = {}
    forecasts: list[adv.DriftForecastInput] = []
    steps: list[adv.ImpactStep] = []
    if r.empty:
        return out, forecasts, steps
    # Adjustments: as-adjusted sessions, and adjustment events not already recorded as a session
    ev = data.events
    reading_times = set(r["measured_at"])
    adjust_times = [t for t in ev.loc[ev["kind"] == "alignment_adjusted", "performed_at"]
                    if t not in reading_times]
    adjust_times += list(r.loc[r["kind"] == "as_adjusted", "measured_at"].unique())
    for corner in ("FL", "FR", "RL", "RR"):
        rows = r[(r["corner"] == corner) & (r["kind"] == "as_found")].sort_values("measured_at")
        if len(rows) < 2:
            continue
        flags = _adjusted_flags(rows, adjust_times)
        x_km = rows["odometer_km"].to_numpy(float)
        x_days = days_since(list(rows["measured_on"]), today)  # ≤ 0, today = 0
        for angle in ANGLES:
            y = rows[f"{angle}_deg"].to_numpy(float)
            spec = data.specs.get((CORNER_AXLE[corner], angle))
            fit = fit_drift(x_km, y, adjusted_before=flags, measurement_sd=REPEATABILITY[angle])
            entry: dict = {"n_used": fit.n_used, "segment_start": fit.segment_start,
                           "steps": [], "slope_deg_per_10k": None}
            for st in fit.steps:
                idx = int(st.start_index)
                before = y[max(fit.segment_start, idx - 3):idx]
                after = y[idx:idx + 3]
                size = float(np.median(after) - np.median(before)) if before.size else 0.0
                entry["steps"].append({"index": idx, "odometer_km": float(x_km[idx]),
                                       "on": rows["measured_on"].iloc[idx].isoformat(),
                                       "direction": int(st.direction), "size_deg": size})
                steps.append(adv.ImpactStep(
                    corner=corner, angle=angle, detected_on=rows["measured_on"].iloc[idx],
                    odometer_km=float(x_km[idx]), size_deg=size))
            if spec is not None:
                entry["spec"] = {"nominal": spec.nominal_deg, "tolerance": spec.tolerance_deg,
                                 "source": spec.source}
            if fit.trend is None:
                out[f"{corner}.{angle}"] = entry
                continue
            trend = fit.trend
            pooled = data.pooled.get((corner, angle))
            entry["slope_deg_per_10k"] = trend.slope * 1e4
            entry["slope_se_deg_per_10k"] = trend.slope_se * 1e4
            if fit.fit is not None:
                entry["slope_ci_deg_per_10k"] = [fit.fit.slope_low * 1e4, fit.fit.slope_high * 1e4]
            if pooled is not None and pooled.vehicles >= 3 and math.isfinite(pooled.tau2):
                s = shrink_toward(trend.slope, fit.sampling_variance, mean=pooled.mean,
                                  mean_se=pooled.mean_se, tau2=pooled.tau2)
                trend = trend.with_slope(s.slope, s.slope_se)
                entry["shrunk_slope_deg_per_10k"] = s.slope * 1e4
                entry["weight_on_pooled"] = s.weight_on_pooled
                entry["pooled_deg_per_10k"] = pooled.mean * 1e4
            entry["trend"] = {"slope": trend.slope, "slope_se": trend.slope_se,
                              "x_ref": trend.x_ref, "y_ref": trend.y_ref,
                              "residual_sd": trend.residual_sd, "n": trend.n}
            # The same drift over time: a date forecast that holds when the vehicle stands still.
            # (the readings the km fit used: current segment, after any step)
            fit_t = fit_drift(x_days[fit.fit_start:], y[fit.fit_start:],
                              measurement_sd=REPEATABILITY[angle], find_steps=False)
            if fit_t.trend is not None:
                entry["slope_deg_per_year"] = fit_t.trend.slope * 365.25
            if spec is not None:
                fc = forecast_drift(trend, current_km=odo, current_date=today,
                                    km_per_day=km_per_day, lower=spec.lower_deg,
                                    upper=spec.upper_deg, horizon_km=HORIZON_KM,
                                    trend_days=fit_t.trend, current_day=0.0)
                entry["forecast"] = _forecast_json(fc)
                forecasts.append(adv.DriftForecastInput(corner=corner, angle=angle, forecast=fc))
            out[f"{corner}.{angle}"] = entry
    return out, forecasts, steps


def _replaced_flags(checks: pd.DataFrame, events: pd.DataFrame, corner: str, part: str):
    """For each check of a part, whether the part was replaced since the previous check."""
    rep = events[(events["kind"] == "part_replaced") & (events["corner"] == corner)
                 & (events["part"] == part)]["performed_at"].tolist()
    return _events_between(checks["checked_at"], rep)


@functools.lru_cache(maxsize=256)
def _corner_of(geometry_json: str, side: str):
    """A platform's validated corner for one side (validation costs ~10 ms; files rarely change)."""
    left = corner_from_dict(json.loads(geometry_json))
    return left if side == "left" else mirror_corner(left)


def _corner_models(data: VehicleData):
    """New and measured corner per position (FL…RR) from the platform's files and the checks."""
    new, measured, conditions_used = {}, {}, {}
    checks = data.checks
    for pos in ("FL", "FR", "RL", "RR"):
        geo = data.corners.get(CORNER_AXLE[pos])
        if geo is None:
            continue
        corner = _corner_of(json.dumps(geo, sort_keys=True), CORNER_SIDE[pos])
        new[pos] = corner
        conds: dict[str, LinkCondition] = {}
        latest = checks[checks["corner"] == pos].sort_values("checked_at").groupby("part").tail(1)
        for _, c in latest.iterrows():
            part = PARTS_BY_CODE.get(c["part"])
            if part is None:
                continue
            findings = [f for f in c["findings"] if f != "none"]
            for link in part.links:
                if link not in corner.link_names:
                    continue
                prev = conds.get(link, LinkCondition())
                if part.kind == "bush" and _f(c["deflection_mm"]) and c["deflection_mm"] > 0:
                    prev = LinkCondition(test_force_N=float(c["deflection_force_n"]),
                                         deflection_mm=float(c["deflection_mm"]),
                                         ball_joint_play_mm=prev.ball_joint_play_mm)
                elif part.kind == "bush" and findings:
                    prev = LinkCondition(finding=findings[0],
                                         ball_joint_play_mm=prev.ball_joint_play_mm)
                if part.kind == "ball_joint" and _f(c["play_mm"]) is not None:
                    prev = LinkCondition(prev.test_force_N, prev.deflection_mm, prev.finding,
                                         float(c["play_mm"]))
                conds[link] = prev
        measured[pos] = measured_corner(corner, conds) if conds else corner
        conditions_used[pos] = {k: asdict(v) for k, v in conds.items()}
    return new, measured, conditions_used


def _load_platform(p) -> LoadPlatform:
    return LoadPlatform(
        front_axle_load_N=p.front_axle_load_n, rear_axle_load_N=p.rear_axle_load_n,
        track_front_mm=p.track_front_mm, track_rear_mm=p.track_rear_mm,
        wheelbase_mm=p.wheelbase_mm, cg_height_mm=p.cg_height_mm,
        tyre_radius_mm=p.loaded_tyre_radius_mm, brake_balance_front=p.brake_balance_front,
        driven_axle="both" if p.driven_axle == "all" else p.driven_axle)


def _compliance(data: VehicleData, new, measured):
    out: dict = {}
    verdicts: list[adv.ComplianceVerdict] = []
    for pos, corner_new in new.items():
        (o, v), = compliance_many(data.vehicle.platform, pos, corner_new, [measured[pos]])
        out[pos] = o
        verdicts.extend(v)
    return out, verdicts


@functools.lru_cache(maxsize=256)
def _cases(lp: LoadPlatform, side: str) -> tuple:
    return vehicle_load_cases(lp, outer_side=side)


#: The fields of a what-if row, in order.
_ROW_FIELDS = tuple(f.name for f in fields(WhatIfRow))


def _row_dict(row: WhatIfRow) -> dict:
    """``dataclasses.asdict`` of a row, without its recursive deep copy: every field is a number,
    a string or a tuple of strings, immutable, so the dict is the same (and several times faster
    to make, for hundreds of rows a chunk)."""
    return {name: getattr(row, name) for name in _ROW_FIELDS}


def compliance_many(platform, pos: str, corner_new, measured: list) -> list[tuple[dict, list]]:
    """The payload entry and verdicts of position ``pos`` for each measured state of its corner
    (``(entry, [ComplianceVerdict])`` per state): the load cases of DESIGN.md §5 against the new
    corner and, at a rear position, the outer-rear stability verdict under the cornering force."""
    lp = _load_platform(platform)
    cases = _cases(lp, CORNER_SIDE[pos])
    wis = what_if_many(corner_new, measured, cases, position=pos)
    out = []
    if pos.startswith("R"):
        fy = abs(float(cases[0].delta_force(pos)[1]))
        vs = stability_verdicts([corner_new, *measured], fy)
    for k, wi in enumerate(wis):
        entry = {"rows": [_row_dict(r) for r in wi.rows], "stability_new": wi.stability_new,
                 "stability_measured": wi.stability_measured, "notes": list(wi.notes)}
        verdicts = []
        if pos.startswith("R"):
            v_new, v_meas = vs[0], vs[k + 1]
            entry["verdict_new"] = v_new.verdict
            entry["verdict_measured"] = v_meas.verdict
            entry["toe_change_new_deg"] = v_new.toe_change_deg
            entry["toe_change_measured_deg"] = v_meas.toe_change_deg
            entry["toe_band_measured_deg"] = v_meas.toe_band_deg
            entry["lateral_force_N"] = fy
            entry["flips_to_toe_out"] = (v_new.direction == "toe-in"
                                         and v_meas.direction == "toe-out")
            verdicts.append(adv.ComplianceVerdict(
                corner=pos, load_case="cornering", ok=v_meas.verdict != "unstable",
                text=f"{pos} as outer rear wheel in a turn (0.5 g, default): " + v_meas.note))
        out.append((entry, verdicts))
    return out


def _wear(data: VehicleData, new, km_per_day, today, odo):
    out: dict = {}
    forecasts: list[adv.WearForecastInput] = []
    checks, events = data.checks, data.events
    if checks.empty:
        return out, forecasts
    for (corner, part_code), grp in checks.groupby(["corner", "part"]):
        part = PARTS_BY_CODE.get(part_code)
        grp = grp.sort_values("checked_at")
        if part is None or len(grp) < 2:
            continue
        key = f"{corner}.{part_code}"
        if part.kind == "ball_joint" and grp["play_mm"].notna().sum() >= 2:
            limit = data.limits.get(part_code)
            g = grp[grp["play_mm"].notna()]
            entry = {"part": part.label, "kind": "play", "km": g["odometer_km"].tolist(),
                     "play_mm": g["play_mm"].tolist(),
                     "limit_mm": limit.max_play_mm if limit else None,
                     "limit_source": limit.source if limit else None}
            if limit is not None and limit.max_play_mm:
                try:
                    wf = forecast_play(g["odometer_km"].to_numpy(float), g["play_mm"].to_numpy(float),
                                       limit_mm=limit.max_play_mm, current_km=odo,
                                       current_date=today, km_per_day=km_per_day,
                                       horizon_km=HORIZON_KM,
                                       replaced_before=_replaced_flags(g, events, corner, part_code),
                                       measurement_sd_mm=ASSUMPTIONS["play_repeatability_mm"])
                    entry["forecast"] = _forecast_json(wf.forecast)
                    forecasts.append(adv.WearForecastInput(corner, part.label, wf.forecast))
                except ValueError as exc:
                    entry["note"] = str(exc)
            out[key] = entry
        elif part.kind == "bush" and grp["deflection_mm"].notna().sum() >= 2:
            g = grp[grp["deflection_mm"].notna() & (grp["deflection_mm"] > 0)]
            k = (g["deflection_force_n"] / g["deflection_mm"]).to_numpy(float)
            entry = {"part": part.label, "kind": "stiffness", "km": g["odometer_km"].tolist(),
                     "stiffness_N_per_mm": k.tolist()}
            corner_new = new.get(corner)
            link = part.links[0]
            if corner_new is not None and corner.startswith("R") and len(g) >= 2 \
                    and link in corner_new.link_names:
                try:
                    fit = fit_stiffness_trend(
                        g["odometer_km"].to_numpy(float), k,
                        replaced_before=_replaced_flags(g, events, corner, part_code),
                        relative_sd=ASSUMPTIONS["stiffness_relative_sd"])
                    toe_fn = _toe_change_of_stiffness(data, corner_new, corner, link)
                    wf = forecast_stiffness_criterion(
                        fit, StiffnessCriterion.toe_out(toe_fn), current_km=odo,
                        current_date=today, km_per_day=km_per_day, horizon_km=HORIZON_KM)
                    entry["forecast"] = _forecast_json(wf.forecast)
                    entry["criterion"] = "cornering toe change of the outer rear wheel turns toe-out"
                    forecasts.append(adv.WearForecastInput(corner, part.label, wf.forecast))
                except ValueError as exc:
                    entry["note"] = str(exc)
            out[key] = entry
    return out, forecasts


def _toe_change_of_stiffness(data: VehicleData, corner_new, pos: str, link: str):
    """Vectorised k (N/mm, any shape) → cornering toe change (deg) of this outer rear wheel."""
    lp = _load_platform(data.vehicle.platform)
    force = _cases(lp, CORNER_SIDE[pos])[0].delta_force(pos)

    return LinkStiffnessToe(corner_new, force, link)


def _findings(data: VehicleData) -> list[adv.ComponentFinding]:
    c = data.checks
    if c.empty:
        return []
    latest = c.sort_values("checked_at").groupby(["corner", "part"]).tail(1)
    out = []
    for _, row in latest.iterrows():
        part = PARTS_BY_CODE.get(row["part"])
        # a part replaced after its latest check is no longer the part that was found worn
        ev = data.events
        replaced = not ev[(ev["kind"] == "part_replaced") & (ev["corner"] == row["corner"])
                          & (ev["part"] == row["part"])
                          & (ev["performed_at"] > row["checked_at"])].empty
        if replaced:
            continue
        findings = ", ".join(f for f in row["findings"] if f != "none") or "no finding"
        out.append(adv.ComponentFinding(
            corner=row["corner"], part=part.label if part else row["part"],
            category=row["defect_category"] or None,
            note=f"{findings}; verdict {row['verdict'].replace('_', ' ')}",
            checked_on=row["checked_on"], odometer_km=float(row["odometer_km"])))
    return out


def _interval(km, months, sources: dict, km_field: str, mo_field: str):
    if km is None and months is None:
        return None
    src = sorted({sources.get(km_field, ""), sources.get(mo_field, "")} - {""})
    return adv.ManufacturerInterval(km=float(km) if km else None, months=months,
                                    source=", ".join(src) or "unverified")


def analyse(data: VehicleData) -> tuple[dict, list[adv.Advice]]:
    """The payload and the advice of one vehicle. Pure given ``data``."""
    v = data.vehicle
    p = v.platform
    today = data.today
    r, c, e = data.readings, data.checks, data.events
    odo_values = [float(s.max()) for s in (r["odometer_km"], c["odometer_km"], e["odometer_km"])
                  if not s.empty]
    odo = max(odo_values) if odo_values else 0.0
    km_per_day = None
    sessions = r.drop_duplicates("session_id") if not r.empty else r
    if len(sessions) >= 2:
        rate = daily_distance_rate(days_since(list(sessions["measured_on"]), today),
                                   sessions["odometer_km"].to_numpy(float))
        km_per_day = rate.km_per_day if rate.km_per_day > 0 else None
    drift, drift_fc, steps = _drift(data, km_per_day, today, odo)
    new, measured, conds = _corner_models(data)
    compliance, verdicts = _compliance(data, new, measured)
    wear, wear_fc = _wear(data, new, km_per_day, today, odo)
    last_session = sessions.sort_values("measured_at").iloc[-1] if len(sessions) else None
    last_check = c.sort_values("checked_at").iloc[-1] if not c.empty else None
    state = adv.VehicleState(
        vehicle=f"{v.plate} ({v.vin})", today=today, odometer_km=odo, km_per_day=km_per_day,
        last_alignment=adv.ServiceMark(last_session["measured_on"],
                                       float(last_session["odometer_km"]))
        if last_session is not None else None,
        last_suspension_inspection=adv.ServiceMark(last_check["checked_on"],
                                                   float(last_check["odometer_km"]))
        if last_check is not None else None,
        alignment_interval=_interval(p.alignment_interval_km, p.alignment_interval_months,
                                     p.sources or {}, "alignment_interval_km",
                                     "alignment_interval_months"),
        suspension_interval=_interval(p.suspension_interval_km, p.suspension_interval_months,
                                      p.sources or {}, "suspension_interval_km",
                                      "suspension_interval_months"),
        drift=tuple(drift_fc), wear=tuple(wear_fc), findings=tuple(_findings(data)),
        steps=tuple(steps), compliance=tuple(verdicts),
    )
    advice = adv.advise(state)
    payload = {
        "model_version": adv.MODEL_VERSION,
        "today": today.isoformat(),
        "odometer_km": odo,
        "km_per_day": km_per_day,
        "drift": drift,
        "wear": wear,
        "compliance": compliance,
        "conditions": conds,
        "assumptions": ASSUMPTIONS,
        "advice": [advice_json(a) for a in advice],
    }
    return payload, advice


def advice_json(a: adv.Advice) -> dict:
    hs = a.how_sure
    return {
        "kind": str(a.kind), "area": a.area, "what": a.what, "corner": a.corner,
        "due_date": _iso(a.due_date), "due_km": _f(a.due_km),
        "how_sure": {"earliest_date": _iso(hs.earliest_date), "latest_date": _iso(hs.latest_date),
                     "earliest_km": _f(hs.earliest_km), "latest_km": _f(hs.latest_km)},
        "why": list(a.why), "model": a.model, "model_version": a.model_version,
        "limit": a.limit.describe() if a.limit else None,
        "limit_date": _iso(a.limit_date), "limit_km": _f(a.limit_km),
        "severity": a.severity, "defect_category": a.defect_category, "caution": a.caution,
    }
