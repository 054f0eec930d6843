"""Reads for the manager's and owner's pages and the owner PDF. Every read is scoped.

Fleet-wide figures are aggregated in the database (counts by urgency, drift-rate histograms by
bucket, the toe-out flips) so the pages stay fast on a fleet of thousands; one vehicle's view
builds its charts from the stored analysis payload (see :mod:`analytics.charts`).
"""
from __future__ import annotations

import datetime as dt
import functools
import logging
import math

import numpy as np
from django.db.models import Count, F, OuterRef, Q, QuerySet, Subquery
from django.db.models.fields.json import KT
from django.utils import timezone

from analytics import charts
from analytics.core.advice import MODEL_VERSION, SEVERITIES
from inspections import selectors as records
from inspections.models import Platform, Vehicle
from inspections.scoping import scoped

from .models import (
    AdviceAction,
    AdviceItem,
    AnalysisResult,
    DriftRate,
    PooledRate,
    expand_payload,
)

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
    """Per severity (in :data:`SEVERITIES` order): items, vehicles, overdue items — one query
    grouped by the urgency rank (``SEVERITIES.index(severity)``), which PostgreSQL answers from
    the ``advice_due_order`` index alone where the table's pages are marked all-visible."""
    today = timezone.localdate()
    rows = {r["urgency_rank"]: r for r in advice_for(user).order_by().values("urgency_rank")
            .annotate(items=Count("id"), vehicles=Count("vehicle", distinct=True),
                      overdue=Count("id", filter=Q(due_date__lt=today)))}
    return [{"severity": s, **{k: rows.get(i, {}).get(k, 0) for k in ("items", "vehicles", "overdue")}}
            for i, s in enumerate(SEVERITIES)]


def due_count(counts: list[dict], *, severity: str | None = None, overdue_only: bool = False) -> int:
    """The length of :func:`due_advice` with the same filters, from :func:`urgency_counts`
    (no second count of the advice rows)."""
    key = "overdue" if overdue_only else "items"
    return sum(c[key] for c in counts if severity not in SEVERITIES or c["severity"] == severity)


def latest_results(user) -> QuerySet[AnalysisResult]:
    newest = (AnalysisResult.objects.filter(vehicle=OuterRef("vehicle"), model_version=MODEL_VERSION)
              .order_by("-computed_at", "-pk").values("pk")[:1])
    return scoped(AnalysisResult.objects.filter(model_version=MODEL_VERSION), user,
                  prefix="vehicle__").filter(pk=Subquery(newest))


#: The flip list's figures: attribute → (rear corner, figure of its compliance entry).
FLIP_FIGURES = {
    "rl_new": ("RL", "toe_change_new_deg"), "rl_now": ("RL", "toe_change_measured_deg"),
    "rr_new": ("RR", "toe_change_new_deg"), "rr_now": ("RR", "toe_change_measured_deg"),
    "rl_flip": ("RL", "flips_to_toe_out"), "rr_flip": ("RR", "flips_to_toe_out"),
}
#: The same figures as text, read in the database (the CSV export of every flipped result).
FLIP_VALUES = {name: KT(f"payload__compliance__{pos}__{figure}")
               for name, (pos, figure) in FLIP_FIGURES.items()}


def toe_out_flips(user) -> QuerySet[AnalysisResult]:
    """Latest results where worn parts flip a rear corner's cornering toe change to toe-out.

    Ordered by plate, without the payload (reading every flipped result's JSON to sort them
    took 0.2 s on 10,000 vehicles): page it, then :func:`with_flip_values` reads the rear
    corners' toe changes for the rows shown.
    """
    return (latest_results(user).filter(flips_to_toe_out=True)
            .select_related("vehicle", "vehicle__platform").defer("payload")
            .order_by("vehicle__plate", "pk"))


def with_flip_values(results) -> list[AnalysisResult]:
    """The given flipped results with ``rl_new``, ``rl_now``, ``rr_new``, ``rr_now`` (deg,
    ``float``) and ``rl_flip``/``rr_flip`` (``bool``) set — None where the payload has no such
    figure — in one query that reads each payload's compliance part once (six ``#>>`` paths
    parsed every payload six times: 17 → 4 ms for a page of 25 on the 10 000-vehicle fleet)."""
    rows = list(results)
    comp = dict(AnalysisResult.objects.filter(pk__in=[r.pk for r in rows])
                .values_list("pk", "payload__compliance"))
    for r in rows:
        c = comp.get(r.pk) or {}
        for name, (pos, figure) in FLIP_FIGURES.items():
            setattr(r, name, (c.get(pos) or {}).get(figure))
    return rows


def toe_out_flips_export(user) -> QuerySet[AnalysisResult]:
    """Every flipped latest result with its rear corners' values (the CSV export)."""
    return toe_out_flips(user).annotate(**FLIP_VALUES)


def _rates_by_group(user) -> dict[tuple[int, str, str], np.ndarray]:
    """Visible vehicles' own rates (deg/10,000 km) per (platform id, corner, angle).

    On PostgreSQL one array per group comes back (``array_agg``: 96 rows instead of one per
    vehicle and angle, 60,000 on a 10,000-vehicle fleet), in binary, straight into numpy
    (:func:`analytics.column_read.fetch_arrays`; parsing them as text into Python floats was
    ≈ 25 ms of the fleet page); elsewhere the rows are grouped here.
    """
    from django.db import connection

    rows = scoped(DriftRate.objects.all(), user, prefix="vehicle__")
    if connection.vendor == "postgresql":
        from django.contrib.postgres.aggregates import ArrayAgg

        from analytics.column_read import fetch_arrays

        grouped = (rows.order_by().values("platform_id", "corner", "angle")
                   .annotate(rates=ArrayAgg("slope_deg_per_10k"))
                   .values_list("platform_id", "corner", "angle", "rates"))
        sql, params = grouped.query.sql_with_params()
        return {(p, c, a): r for p, c, a, r in fetch_arrays(sql, list(params))}
    groups: dict[tuple[int, str, str], list[float]] = {}
    for p, c, a, rate in rows.values_list("platform_id", "corner", "angle",
                                          "slope_deg_per_10k").iterator(chunk_size=10_000):
        groups.setdefault((p, c, a), []).append(rate)
    return {k: np.asarray(v, dtype=float) for k, v in groups.items()}


@functools.lru_cache(maxsize=2048)
def _rate_histogram_svg(counts: tuple[int, ...], edges: tuple[float, ...],
                        pooled_mean: float | None, title: str) -> str:
    """:func:`analytics.charts.rate_histogram_svg`, remembered: a chart is ≈ 0.3 ms to draw and
    the fleet page shows one per platform, corner and angle (96 on twelve platforms), which
    change only when results or pooled rates do. A pure function of its arguments, so a
    remembered drawing is the drawing (2048 of ≈ 3 KB each at most)."""
    return charts.rate_histogram_svg(counts=counts, edges=edges, pooled_mean=pooled_mean,
                                     title=title)


def drift_distribution(user) -> list[dict]:
    """Per platform, corner and angle: the pooled rate and a histogram of vehicles' own rates.

    Rates in deg per 10,000 km from the narrow ``DriftRate`` table (each visible vehicle's
    latest result): ``HIST_BINS`` equal bins between the lowest and highest rate (± 0.005 when
    they are equal), a rate on the top edge in the last bin.
    """
    visible_platforms = (Vehicle.objects.visible_to(user).values("platform_id").distinct())
    pooled = {(p.platform_id, p.corner, p.angle): p for p in PooledRate.objects.filter(
        platform_id__in=visible_platforms).select_related("platform")}
    groups = _rates_by_group(user)
    names = dict(Platform.objects.filter(pk__in={k[0] for k in groups}).values_list("pk", "name"))
    out: list[dict] = []
    for (pid, corner, angle), rates in groups.items():
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
            "vehicles": n, "lo": lo, "hi": hi, "counts": counts,
            "pooled_mean": mean, "pooled_se": p.mean_se * 1e4 if p else None,
            "spread": spread, "pooled_vehicles": p.vehicles if p else 0,
            "method": p.method if p else "",
            "svg": _rate_histogram_svg(
                tuple(counts), tuple(lo + i * width for i in range(HIST_BINS + 1)), mean,
                f"{n} vehicle{'s' if n != 1 else ''} · {lo0:+.3f} … {hi0:+.3f}"),
        })
    out.sort(key=lambda r: (r["platform"], r["corner"], r["angle"]))
    return out


def actions_of(vehicle: Vehicle) -> dict[str, AdviceAction]:
    """The newest action per advice key."""
    latest: dict[str, AdviceAction] = {}
    for a in AdviceAction.objects.filter(vehicle=vehicle).select_related("by").order_by("-at", "-pk"):
        latest.setdefault(a.key, a)
    return latest


def _is_demo(vehicle: Vehicle) -> bool:
    return bool(vehicle.is_demo or vehicle.platform.is_demo)


def vehicle_picture(vehicle: Vehicle, result: AnalysisResult) -> dict:
    """Everything the vehicle page and the owner PDF show, charts included (SVG strings).

    The charts are drawn on every call (about 0.2 ms each, see :mod:`analytics.charts`), so they
    never go stale and no cache or pre-drawing job is needed.
    """
    payload = expand_payload(result.payload)
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
        svg = charts.angle_history_svg(title=title, found=points.get((corner, angle, "as_found"), []),
                                       adjusted=points.get((corner, angle, "as_adjusted"), []),
                                       entry=entry, demo=demo)
        angles.append({"key": key, "corner": corner, "angle": angle, "entry": entry, "svg": svg,
                       "forecast": entry.get("forecast") or {}, "spec": entry.get("spec")})
    loads = []
    for corner in CORNERS:
        c = payload.get("compliance", {}).get(corner)
        if not c:
            continue
        svg = charts.load_case_svg(corner=corner, rows=c["rows"], demo=demo)
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
        svg = charts.wear_trend_svg(title=title, entry=entry, demo=demo)
        wear.append({"key": key, "corner": corner, "entry": entry, "svg": svg,
                     "forecast": entry.get("forecast") or {}})
    spec_sources = sorted({a["spec"]["source"] for a in angles if a["spec"]}
                          | {w["entry"]["limit_source"] for w in wear if w["entry"].get("limit_source")})
    return {"result": result, "payload": payload, "demo": demo, "angles": angles, "loads": loads,
            "wear": wear, "spec_sources": spec_sources,
            "platform_sources": vehicle.platform.sources or {},
            "assumptions": payload.get("assumptions", {}),
            "today": dt.date.fromisoformat(payload["today"]) if payload.get("today") else None}
