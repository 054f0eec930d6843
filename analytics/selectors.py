"""Reads for the manager's and owner's pages and the owner PDF. Every read is scoped.

Fleet-wide figures are aggregated in the database (counts by urgency, drift-rate histograms by
bucket, the toe-out flips) so the pages stay fast on a fleet of thousands; one vehicle's view
builds its charts from the stored analysis payload (see :mod:`analytics.charts`).
"""
from __future__ import annotations

import datetime as dt
import hashlib
import json
import logging
import math

import numpy as np
from django.core.cache import cache
from django.db.models import Count, F, OuterRef, Q, QuerySet, Subquery
from django.db.models.fields.json import KT
from django.utils import timezone

from analytics import charts
from analytics.core.advice import MODEL_VERSION, SEVERITIES
from inspections import selectors as records
from inspections.models import Vehicle
from inspections.scoping import scoped

from .models import AdviceAction, AdviceItem, AnalysisResult, DriftRate, PooledRate

CORNERS = ("FL", "FR", "RL", "RR")
ANGLES = ("toe", "camber")
HIST_BINS = 12

log = logging.getLogger(__name__)


def advice_for(user) -> QuerySet[AdviceItem]:
    return scoped(AdviceItem.objects.all(), user, prefix="vehicle__").select_related(
        "vehicle", "vehicle__platform")


def due_advice(user, *, severity: str | None = None, overdue_only: bool = False) -> QuerySet:
    qs = advice_for(user).order_by("urgency_rank", F("due_date").asc(nulls_last=True), "id")
    if severity in SEVERITIES:
        qs = qs.filter(severity=severity)
    if overdue_only:
        qs = qs.filter(due_date__lt=timezone.localdate())
    return qs


def urgency_counts(user) -> list[dict]:
    """Per severity: items, vehicles, overdue items (one grouped query)."""
    today = timezone.localdate()
    rows = {r["severity"]: r for r in advice_for(user).order_by().values("severity").annotate(
        items=Count("id"), vehicles=Count("vehicle", distinct=True),
        overdue=Count("id", filter=Q(due_date__lt=today)))}
    return [rows.get(s, {"severity": s, "items": 0, "vehicles": 0, "overdue": 0})
            for s in SEVERITIES]


def latest_results(user) -> QuerySet[AnalysisResult]:
    newest = (AnalysisResult.objects.filter(vehicle=OuterRef("vehicle"), model_version=MODEL_VERSION)
              .order_by("-computed_at", "-pk").values("pk")[:1])
    return scoped(AnalysisResult.objects.filter(model_version=MODEL_VERSION), user,
                  prefix="vehicle__").filter(pk=Subquery(newest))


def toe_out_flips(user) -> QuerySet[AnalysisResult]:
    """Latest results where worn parts flip a rear corner's cornering toe change to toe-out."""
    return (latest_results(user).filter(flips_to_toe_out=True)
            .select_related("vehicle", "vehicle__platform")
            .annotate(rl_new=KT("payload__compliance__RL__toe_change_new_deg"),
                      rl_now=KT("payload__compliance__RL__toe_change_measured_deg"),
                      rr_new=KT("payload__compliance__RR__toe_change_new_deg"),
                      rr_now=KT("payload__compliance__RR__toe_change_measured_deg"),
                      rl_flip=KT("payload__compliance__RL__flips_to_toe_out"),
                      rr_flip=KT("payload__compliance__RR__flips_to_toe_out"))
            .order_by("vehicle__plate"))


def drift_distribution(user) -> list[dict]:
    """Per platform, corner and angle: the pooled rate and a histogram of vehicles' own rates.

    Rates in deg per 10,000 km, read in one query from the narrow ``DriftRate`` table (each
    visible vehicle's latest result), binned here.
    """
    visible_platforms = (Vehicle.objects.visible_to(user).values("platform_id").distinct())
    pooled = {(p.platform_id, p.corner, p.angle): p for p in PooledRate.objects.filter(
        platform_id__in=visible_platforms).select_related("platform")}
    groups: dict[tuple[int, str, str], list[float]] = {}
    names: dict[int, str] = {}
    rows = scoped(DriftRate.objects.all(), user, prefix="vehicle__").values_list(
        "platform_id", "platform__name", "corner", "angle", "slope_deg_per_10k")
    for pid, name, corner, angle, rate in rows.iterator(chunk_size=10_000):
        groups.setdefault((pid, corner, angle), []).append(rate)
        names[pid] = name
    out: list[dict] = []
    for (pid, corner, angle), values in groups.items():
        rates = np.asarray(values, dtype=float)
        lo0, hi0, n = float(rates.min()), float(rates.max()), int(rates.size)
        lo, hi = (lo0, hi0) if hi0 > lo0 else (lo0 - 0.005, hi0 + 0.005)
        width = (hi - lo) / HIST_BINS
        idx = np.clip(np.floor((rates - lo) / width).astype(int), 0, HIST_BINS - 1)
        counts = np.bincount(idx, minlength=HIST_BINS).tolist()
        p = pooled.get((pid, corner, angle))
        mean = p.mean * 1e4 if p else None
        spread = math.sqrt(p.tau2) * 1e4 if p and math.isfinite(p.tau2) else None
        out.append({
            "platform": names[pid], "platform_id": pid, "corner": corner, "angle": angle,
            "vehicles": n, "lo": lo, "hi": hi,
            "pooled_mean": mean, "pooled_se": p.mean_se * 1e4 if p else None,
            "spread": spread, "pooled_vehicles": p.vehicles if p else 0,
            "method": p.method if p else "",
            "svg": _histogram(counts, [lo + i * width for i in range(HIST_BINS + 1)], mean,
                              f"{n} vehicle{'s' if n != 1 else ''} · {lo0:+.3f} … {hi0:+.3f}"),
        })
    out.sort(key=lambda r: (r["platform"], r["corner"], r["angle"]))
    return out


def _histogram(counts: list[int], edges: list[float], mean: float | None, title: str) -> str:
    """The histogram SVG, drawn once per distinct content (drawing costs ~0.2 s each)."""
    digest = hashlib.sha1(json.dumps([counts, edges, mean, title]).encode()).hexdigest()
    return _cached(f"chart:hist:{digest}", lambda: charts.rate_histogram_svg(
        counts=counts, edges=edges, pooled_mean=mean, title=title))


def actions_of(vehicle: Vehicle) -> dict[str, AdviceAction]:
    """The newest action per advice key."""
    latest: dict[str, AdviceAction] = {}
    for a in AdviceAction.objects.filter(vehicle=vehicle).select_related("by").order_by("-at", "-pk"):
        latest.setdefault(a.key, a)
    return latest


def _is_demo(vehicle: Vehicle) -> bool:
    return bool(vehicle.is_demo or vehicle.platform.is_demo)


def _cached(key: str, make):
    """A chart from the cache, else drawn and stored. A cache that is down only costs time."""
    try:
        svg = cache.get(key)
    except Exception as exc:  # noqa: BLE001 - e.g. Redis stopped: draw it instead
        log.warning("chart cache unavailable (%s); drawing %s", exc, key)
        return make()
    if svg is None:
        svg = make()
        try:
            cache.set(key, svg, 60 * 60 * 24)
        except Exception as exc:  # noqa: BLE001
            log.warning("chart cache unavailable (%s)", exc)
    return svg


def vehicle_picture(vehicle: Vehicle, result: AnalysisResult) -> dict:
    """Everything the vehicle page and the owner PDF show, charts included (SVG strings)."""
    payload = result.payload
    stamp = f"{result.pk}:{result.computed_at.timestamp():.6f}"
    demo = _is_demo(vehicle)
    points: dict[tuple[str, str, str], list] = {}
    for r in records.readings_of(vehicle).select_related("session"):
        for angle in ANGLES:
            points.setdefault((r.corner, angle, r.session.kind), []).append(
                (float(r.session.odometer_km), float(getattr(r, f"{angle}_deg"))))
    angles = []
    for key, entry in sorted(payload.get("drift", {}).items(),
                             key=lambda kv: (CORNERS.index(kv[0][:2]), kv[0])):
        corner, angle = key.split(".")
        title = f"{corner} {angle}"
        svg = _cached(f"chart:{stamp}:angle:{key}", lambda c=corner, a=angle, e=entry, t=title:
                      charts.angle_history_svg(title=t, found=points.get((c, a, "as_found"), []),
                                               adjusted=points.get((c, a, "as_adjusted"), []),
                                               entry=e, demo=demo))
        angles.append({"key": key, "corner": corner, "angle": angle, "entry": entry, "svg": svg,
                       "forecast": entry.get("forecast") or {}, "spec": entry.get("spec")})
    loads = []
    for corner in CORNERS:
        c = payload.get("compliance", {}).get(corner)
        if not c:
            continue
        svg = _cached(f"chart:{stamp}:load:{corner}",
                      lambda c=c, k=corner: charts.load_case_svg(corner=k, rows=c["rows"], demo=demo))
        assumptions = sorted({a for row in c["rows"] for a in row["assumptions"]})
        loads.append({"corner": corner, "rows": c["rows"], "svg": svg, "notes": c.get("notes", []),
                      "assumptions": assumptions, "verdict_new": c.get("verdict_new"),
                      "verdict_measured": c.get("verdict_measured"),
                      "flips": c.get("flips_to_toe_out", False),
                      "stability_new": c.get("stability_new"),
                      "stability_measured": c.get("stability_measured")})
    wear = []
    for key, entry in sorted(payload.get("wear", {}).items()):
        corner = key.split(".")[0]
        title = f"{corner} {entry['part']}"
        svg = _cached(f"chart:{stamp}:wear:{key}",
                      lambda e=entry, t=title: charts.wear_trend_svg(title=t, entry=e, demo=demo))
        wear.append({"key": key, "corner": corner, "entry": entry, "svg": svg,
                     "forecast": entry.get("forecast") or {}})
    spec_sources = sorted({a["spec"]["source"] for a in angles if a["spec"]}
                          | {w["entry"]["limit_source"] for w in wear if w["entry"].get("limit_source")})
    return {"result": result, "payload": payload, "demo": demo, "angles": angles, "loads": loads,
            "wear": wear, "spec_sources": spec_sources,
            "platform_sources": vehicle.platform.sources or {},
            "assumptions": payload.get("assumptions", {}),
            "today": dt.date.fromisoformat(payload["today"]) if payload.get("today") else None}
