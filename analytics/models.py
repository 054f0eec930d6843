"""Analysis requests, results keyed by their inputs and model version, and advice actions.

A result is keyed by (vehicle, input_key, model_version): ``input_key`` names the latest record
ids the analysis saw, so a job run twice — or two runs at once — writes one result.
"""
from __future__ import annotations

import hashlib
import json

from django.conf import settings
from django.db import models

from inspections.models import Vehicle

from .fields import JSONDocumentField


class AnalysisRequest(models.Model):
    """Written in the same transaction as the record that caused it; sent after commit."""

    vehicle = models.ForeignKey(Vehicle, on_delete=models.CASCADE, related_name="analysis_requests")
    reason = models.CharField(max_length=80)
    created_at = models.DateTimeField(auto_now_add=True)
    sent_at = models.DateTimeField(null=True, blank=True)
    done_at = models.DateTimeField(null=True, blank=True)
    claimed_at = models.DateTimeField(
        null=True, blank=True,
        help_text="When a job took this request into its batch (given up after a few minutes).")
    attempts = models.PositiveSmallIntegerField(default=0)
    last_error = models.TextField(blank=True)

    class Meta:
        indexes = [models.Index(fields=["done_at", "sent_at"])]


class AnalysisResult(models.Model):
    # db_index=False here and below: a composite index led by the same column serves the lookups
    # (one index fewer to maintain on every bulk write of the recompute)
    vehicle = models.ForeignKey(Vehicle, on_delete=models.CASCADE, related_name="analysis_results",
                                db_index=False)
    input_key = models.CharField(max_length=120)
    model_version = models.CharField(max_length=40)
    computed_at = models.DateTimeField(auto_now_add=True)
    payload = JSONDocumentField()
    flips_to_toe_out = models.BooleanField(
        default=False, db_index=True,
        help_text="A rear corner's cornering toe change turns from toe-in (new) "
                  "to toe-out (as measured): copied from the payload for the fleet view.")

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["vehicle", "input_key", "model_version"],
                                    name="one_result_per_inputs"),
        ]
        indexes = [models.Index(fields=["vehicle", "-computed_at"])]


class ComplianceOutcome(models.Model):
    """One corner position's load-case comparison (new against measured) and outer-rear verdict,
    stored once and referenced from every result that has it.

    Content-addressed: ``key`` is the SHA-256 of the entry's canonical JSON, so the many vehicles
    of a platform whose parts were found in the same condition share one row, and writing it
    again changes nothing. A result's payload keeps, per position, the key and the few figures
    the fleet view filters and sorts on (:data:`OUTCOME_INLINE`); :func:`expand_payload` puts
    the whole entries back.
    """

    key = models.CharField(max_length=64, primary_key=True)
    entry = models.JSONField()
    created_at = models.DateTimeField(auto_now_add=True)


#: Figures of a compliance entry kept in the result's own payload (the fleet view's flip list).
OUTCOME_INLINE = ("verdict_new", "verdict_measured", "toe_change_new_deg",
                  "toe_change_measured_deg", "toe_band_measured_deg", "lateral_force_N",
                  "flips_to_toe_out")


def outcome_key(entry: dict) -> str:
    """SHA-256 (hex) of the entry's canonical JSON (sorted keys, no spaces)."""
    text = json.dumps(entry, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode()).hexdigest()


def compact_payload(payload: dict, memo: dict | None = None) -> tuple[dict, dict[str, dict]]:
    """The payload as stored — each compliance entry replaced by its outcome key and inline
    figures — and the outcomes it refers to (``{key: entry}``). ``memo``: keys already worked
    out, by ``id(entry)``, for entries shared between payloads (the caller keeps them alive)."""
    comp = payload.get("compliance") or {}
    outcomes: dict[str, dict] = {}
    stored: dict[str, dict] = {}
    for pos, entry in comp.items():
        if memo is None:
            k = outcome_key(entry)
        else:
            k = memo.get(id(entry))
            if k is None:
                k = memo[id(entry)] = outcome_key(entry)
        outcomes[k] = entry
        stored[pos] = {"outcome": k, **{f: entry[f] for f in OUTCOME_INLINE if f in entry}}
    return {**payload, "compliance": stored}, outcomes


def outcomes_store(outcomes: dict[str, dict]) -> None:
    """Store outcomes not stored yet (an existing key holds the same entry by construction)."""
    if outcomes:
        ComplianceOutcome.objects.bulk_create(
            [ComplianceOutcome(key=k, entry=e) for k, e in sorted(outcomes.items())],
            ignore_conflicts=True, batch_size=500)


def expand_payload(payload: dict) -> dict:
    """The payload with its compliance entries whole again (one query; a payload stored before
    outcomes were shared already holds them)."""
    comp = payload.get("compliance") or {}
    keys = [e["outcome"] for e in comp.values() if "outcome" in e]
    if not keys:
        return payload
    entries = dict(ComplianceOutcome.objects.filter(key__in=keys).values_list("key", "entry"))
    missing = sorted(set(keys) - set(entries))
    if missing:
        raise ComplianceOutcome.DoesNotExist(f"compliance outcome {missing[0]} is not stored")
    return {**payload, "compliance": {pos: entries[e["outcome"]] if "outcome" in e else e
                                      for pos, e in comp.items()}}


def payload_flips(payload: dict) -> bool:
    """Whether the payload says worn parts flip a rear corner's cornering toe change to toe-out."""
    comp = payload.get("compliance") or {}
    return any(bool((comp.get(c) or {}).get("flips_to_toe_out")) for c in ("RL", "RR"))


#: Foreign keys that copy what another key of the same row already implies, kept without a
#: database constraint: an advice item's or drift rate's vehicle is its result's vehicle (the
#: result's own key is constrained, so a vehicle with results cannot be deleted under them), and
#: a drift rate's platform is that vehicle's platform. A constraint on the copy would only
#: re-check, at every commit, rows the recompute writes from the result it has just inserted
#: (≈ 12 000 checks a 791-vehicle chunk: PostgreSQL's part of writing a chunk 0.27 → 0.20 s,
#: measured). Django still treats them as keys: joins, and deletion through the ORM cascades.
DENORMALISED_NO_CONSTRAINT = (("adviceitem", "vehicle"), ("driftrate", "vehicle"),
                              ("driftrate", "platform"))


class AdviceItem(models.Model):
    """One recommendation of a result, flattened for dashboards (due ordering, filtering)."""

    result = models.ForeignKey(AnalysisResult, on_delete=models.CASCADE, related_name="advice")
    # the result's vehicle, copied for the dashboards' filters; no database constraint of its
    # own (see DENORMALISED_NO_CONSTRAINT)
    vehicle = models.ForeignKey(Vehicle, on_delete=models.CASCADE, related_name="advice",
                                db_index=False, db_constraint=False)
    key = models.CharField(max_length=120, help_text="Stable id of the advice across recomputes.")
    kind = models.CharField(max_length=40)
    severity = models.CharField(max_length=20)
    urgency_rank = models.PositiveSmallIntegerField()
    what = models.CharField(max_length=300)
    due_date = models.DateField(null=True, blank=True)
    due_km = models.PositiveIntegerField(null=True, blank=True)
    corner = models.CharField(max_length=2, blank=True)
    defect_category = models.CharField(max_length=10, blank=True)
    body = JSONDocumentField(help_text="The full advice: evidence, interval, limit, caution.")

    class Meta:
        indexes = [models.Index(fields=["vehicle", "urgency_rank"]),
                   models.Index(fields=["due_date"]),
                   # the fleet view's "what is due" order: a page is an index range, not a sort;
                   # with the vehicle included, its counts by urgency (items, vehicles, overdue)
                   # are an index-only scan of this narrow index, not of the wide rows (≈ 1.3 KB
                   # each with their bodies: 74 MB for 57 000 items on 10 000 vehicles)
                   models.Index(fields=["urgency_rank", "due_date", "id"], include=["vehicle"],
                                name="advice_due_order")]
        ordering = ["urgency_rank", "due_date", "id"]


class AdviceAction(models.Model):
    """A manager's acknowledgement or scheduling of an advice key; survives recomputes."""

    ACTIONS = [("acknowledged", "acknowledged"), ("scheduled", "scheduled")]
    vehicle = models.ForeignKey(Vehicle, on_delete=models.CASCADE, related_name="advice_actions")
    key = models.CharField(max_length=120)
    action = models.CharField(max_length=14, choices=ACTIONS)
    scheduled_for = models.DateField(null=True, blank=True)
    note = models.CharField(max_length=300, blank=True)
    by = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.PROTECT)
    at = models.DateTimeField(auto_now_add=True)

    class Meta:
        ordering = ["-at"]


class OwnerReport(models.Model):
    """A PDF of service advice made for an owner, keyed by the result and the paper size."""

    PAPER = [("A4", "A4"), ("Letter", "Letter")]
    vehicle = models.ForeignKey(Vehicle, on_delete=models.CASCADE, related_name="reports")
    result = models.ForeignKey(AnalysisResult, on_delete=models.CASCADE, related_name="reports")
    paper = models.CharField(max_length=6, choices=PAPER, default="A4")
    pdf = models.FileField(upload_to="reports/%Y/%m/")
    created_at = models.DateTimeField(auto_now_add=True)
    emailed_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["result", "paper"], name="one_report_per_result_paper"),
        ]


class PooledRate(models.Model):
    """A platform's pooled drift rate for one corner and angle (deg/km), from the fleet recompute."""

    platform = models.ForeignKey("inspections.Platform", on_delete=models.CASCADE,
                                 related_name="pooled_rates")
    corner = models.CharField(max_length=2)
    angle = models.CharField(max_length=10)
    mean = models.FloatField()
    mean_se = models.FloatField()
    tau2 = models.FloatField()
    vehicles = models.PositiveIntegerField()
    method = models.CharField(max_length=200)
    computed_at = models.DateTimeField(auto_now=True)

    class Meta:
        constraints = [models.UniqueConstraint(fields=["platform", "corner", "angle"],
                                               name="one_pooled_rate")]


class DriftRate(models.Model):
    """One vehicle's own drift rate of one corner and angle, from its latest result only.

    A narrow copy of ``payload["drift"][…]["slope_deg_per_10k"]`` so that fleet-wide
    distributions are read from an index instead of every result's JSON. Rewritten with the
    vehicle's advice whenever a new result is stored.
    """

    # vehicle and platform: the result's vehicle and its platform, copied for the fleet
    # distributions; no database constraint of their own (see DENORMALISED_NO_CONSTRAINT)
    vehicle = models.ForeignKey(Vehicle, on_delete=models.CASCADE, related_name="drift_rates",
                                db_index=False, db_constraint=False)
    result = models.ForeignKey(AnalysisResult, on_delete=models.CASCADE, related_name="drift_rates")
    platform = models.ForeignKey("inspections.Platform", on_delete=models.CASCADE,
                                 related_name="drift_rates", db_index=False, db_constraint=False)
    corner = models.CharField(max_length=2)
    angle = models.CharField(max_length=10)
    slope_deg_per_10k = models.FloatField(help_text="deg per 10,000 km")

    class Meta:
        indexes = [models.Index(fields=["platform", "corner", "angle"])]
        constraints = [models.UniqueConstraint(fields=["vehicle", "corner", "angle"],
                                               name="one_drift_rate_per_vehicle_angle")]


def drift_rate_values(payload: dict) -> list[tuple[str, str, float]]:
    """``(corner, angle, slope deg per 10,000 km)`` of each drift series of a payload that has a
    rate of its own."""
    out = []
    for key, entry in (payload.get("drift") or {}).items():
        slope = entry.get("slope_deg_per_10k")
        if slope is not None:
            corner, angle = key.split(".", 1)
            out.append((corner, angle, float(slope)))
    return out


def drift_rate_rows(*, result_id: int, vehicle_id: int, platform_id: int,
                    payload: dict) -> list[DriftRate]:
    """The DriftRate rows of one result's payload (only series with a rate of their own)."""
    return [DriftRate(vehicle_id=vehicle_id, result_id=result_id, platform_id=platform_id,
                      corner=corner, angle=angle, slope_deg_per_10k=slope)
            for corner, angle, slope in drift_rate_values(payload)]
