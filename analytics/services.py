"""Analysis services: ORM ⇄ core. Every job is safe to run twice.

A result is keyed by (vehicle, input key, model version); running the same analysis again — or
two at once — finds or inserts that one row, and its advice is written with it in one
transaction.
"""
from __future__ import annotations

import contextlib
import contextvars
import datetime as dt
import logging

from django.db import IntegrityError, transaction
from django.db.models import Q
from django.utils import timezone

from analytics.core.advice import MODEL_VERSION, SEVERITIES
from analytics.core.drift import fit_drift, shrink_drift
from inspections.models import Platform, Vehicle

from . import analysis
from .inputs import input_key, vehicle_data
from .models import (
    AdviceAction,
    AdviceItem,
    AnalysisRequest,
    AnalysisResult,
    DriftRate,
    PooledRate,
    drift_rate_rows,
    payload_flips,
)

log = logging.getLogger(__name__)
RESEND_AFTER = dt.timedelta(minutes=10)


def _advice_key(a: dict) -> str:
    subject = a["corner"] or "vehicle"
    what = a["what"].split(":")[0][:60]
    return f"{a['kind']}:{subject}:{what}"[:120]


def vehicle_analyse(*, vehicle_id: int) -> AnalysisResult:
    """Analyse one vehicle; returns the stored result for its current inputs."""
    vehicle = Vehicle.objects.select_related("platform", "workshop").get(pk=vehicle_id)
    key = input_key(vehicle)
    existing = AnalysisResult.objects.filter(vehicle=vehicle, input_key=key,
                                             model_version=MODEL_VERSION).first()
    if existing is not None:
        return existing
    payload = _analysis_payload(vehicle)
    previous_keys = set(AdviceItem.objects.filter(vehicle=vehicle).values_list("key", flat=True))
    try:
        with transaction.atomic():
            result = AnalysisResult.objects.create(vehicle=vehicle, input_key=key,
                                                   model_version=MODEL_VERSION, payload=payload,
                                                   flips_to_toe_out=payload_flips(payload))
            owner_report_on_commit(result=result, previous_keys=previous_keys)
            AdviceItem.objects.filter(vehicle=vehicle).exclude(result=result).delete()
            DriftRate.objects.filter(vehicle=vehicle).delete()
            DriftRate.objects.bulk_create(drift_rate_rows(
                result_id=result.pk, vehicle_id=vehicle.pk, platform_id=vehicle.platform_id,
                payload=payload))
            AdviceItem.objects.bulk_create(
                AdviceItem(result=result, vehicle=vehicle, key=_advice_key(a), kind=a["kind"],
                           severity=a["severity"], urgency_rank=SEVERITIES.index(a["severity"]),
                           what=a["what"][:300],
                           due_date=dt.date.fromisoformat(a["due_date"]) if a["due_date"] else None,
                           due_km=int(a["due_km"]) if a["due_km"] is not None else None,
                           corner=a["corner"] or "", defect_category=a["defect_category"] or "",
                           body=a)
                for a in payload["advice"])
    except IntegrityError:  # a concurrent run stored the same inputs first
        return AnalysisResult.objects.get(vehicle=vehicle, input_key=key,
                                          model_version=MODEL_VERSION)
    return result


def _analysis_payload(vehicle: Vehicle) -> dict:
    """One vehicle's payload: on PostgreSQL through the vectorised path (the same result as
    ``analysis.analyse``, tested; a worker keeps the platform's compliance caches warm), else —
    or for data the fast path hands back — the per-vehicle reference."""
    from django.db import connection

    if connection.vendor == "postgresql":
        from .fleet_recompute import analyse_chunk

        hit = analyse_chunk(vehicle.platform_id, [vehicle.pk]).get(vehicle.pk)
        if hit is not None:
            return hit[0]
    payload, _ = analysis.analyse(vehicle_data(vehicle))
    return payload


def request_process(*, request_id: int) -> int | None:
    """Run one analysis request. A request already done, or gone, is a no-op."""
    req = AnalysisRequest.objects.filter(pk=request_id).first()
    if req is None:
        return None
    AnalysisRequest.objects.filter(pk=req.pk).update(attempts=req.attempts + 1)
    result = vehicle_analyse(vehicle_id=req.vehicle_id)
    # Every open request of the vehicle up to now is answered by this result.
    AnalysisRequest.objects.filter(vehicle_id=req.vehicle_id, done_at__isnull=True,
                                   created_at__lte=result.computed_at).update(done_at=timezone.now())
    AnalysisRequest.objects.filter(pk=req.pk).update(done_at=timezone.now())
    return result.pk


def requests_sweep(*, older_than: dt.timedelta = RESEND_AFTER) -> int:
    """Resend requests never sent (broker down at commit) or sent long ago and not done."""
    from .receivers import enqueue_request

    cutoff = timezone.now() - older_than
    pending = AnalysisRequest.objects.filter(done_at__isnull=True).filter(
        Q(sent_at__isnull=True) | Q(sent_at__lt=cutoff)).values_list("pk", flat=True)
    sent = 0
    for pk in list(pending[:5000]):
        AnalysisRequest.objects.filter(pk=pk).update(sent_at=None)
        sent += enqueue_request(pk)
    return sent


def platform_pool(*, platform: Platform) -> int:
    """Refresh a platform's pooled drift rates (deg/km) from its vehicles' own fits."""
    from .inputs import vehicle_data as load

    fits: dict[tuple[str, str], list] = {}
    for vehicle in platform.vehicles.select_related("platform", "workshop"):
        data = load(vehicle)
        r = data.readings
        for corner in ("FL", "FR", "RL", "RR"):
            rows = r[(r["corner"] == corner) & (r["kind"] == "as_found")].sort_values("measured_at")
            if len(rows) < 2:
                continue
            adjusted = list(r.loc[r["kind"] == "as_adjusted", "measured_at"].unique())
            flags = analysis._adjusted_flags(rows, adjusted)
            for angle in analysis.ANGLES:
                fits.setdefault((corner, angle), []).append(fit_drift(
                    rows["odometer_km"].to_numpy(float), rows[f"{angle}_deg"].to_numpy(float),
                    adjusted_before=flags, measurement_sd=analysis.REPEATABILITY[angle]))
    n = 0
    for (corner, angle), group in fits.items():
        shrunk = shrink_drift(group)
        pooled = shrunk.pooled
        if pooled.vehicles < 3:
            continue
        PooledRate.objects.update_or_create(
            platform=platform, corner=corner, angle=angle,
            defaults=dict(mean=pooled.mean, mean_se=pooled.mean_se, tau2=pooled.tau2,
                          vehicles=pooled.vehicles, method=pooled.method))
        n += 1
    return n


def fleet_recompute(*, fan_out: bool = False) -> int:
    """Refresh pooled rates per platform, then analyse every vehicle whose inputs changed.

    On PostgreSQL this is the vectorised path (:mod:`analytics.fleet_recompute`: whole platform
    chunks read with COPY; ``fan_out`` sends the chunks to the Celery workers instead of running
    them here). Elsewhere (the SQLite demo) vehicle by vehicle. Returns the vehicles covered.
    """
    from django.db import connection

    if connection.vendor == "postgresql":
        from . import fleet_recompute as fleet

        return fleet.fleet_recompute(fan_out=fan_out)
    for platform in Platform.objects.all():
        platform_pool(platform=platform)
    n = 0
    for vid in Vehicle.objects.order_by("pk").values_list("pk", flat=True):
        vehicle_analyse(vehicle_id=vid)
        n += 1
    return n


def latest_result(vehicle: Vehicle) -> AnalysisResult | None:
    return (AnalysisResult.objects.filter(vehicle=vehicle, model_version=MODEL_VERSION)
            .order_by("-computed_at", "-pk").first())


@transaction.atomic
def demo_delete() -> None:
    """Remove the demo scenario (records marked demo) so it can be rebuilt."""
    from django.contrib.auth import get_user_model

    from inspections.audit import demo_entries_delete
    from inspections.models import (
        AlignmentSession,
        ComponentCheck,
        Fleet,
        Profile,
        ServiceEvent,
        Workshop,
    )

    vehicles = Vehicle.objects.filter(is_demo=True)
    demo_entries_delete()  # the audit trail of demo vehicles goes with them (the one exception)
    AnalysisRequest.objects.filter(vehicle__in=vehicles).delete()
    AnalysisResult.objects.filter(vehicle__in=vehicles).delete()
    ComponentCheck.objects.filter(vehicle__in=vehicles).update(supersedes=None)
    ComponentCheck.objects.filter(vehicle__in=vehicles).delete()
    AlignmentSession.objects.filter(vehicle__in=vehicles).update(supersedes=None)
    AlignmentSession.objects.filter(vehicle__in=vehicles).delete()
    ServiceEvent.objects.filter(vehicle__in=vehicles).delete()
    vehicles.delete()
    users = get_user_model().objects.filter(username__startswith="demo-")
    Profile.objects.filter(user__in=users).delete()
    users.delete()
    Platform.objects.filter(is_demo=True).delete()
    Workshop.objects.filter(is_demo=True).delete()
    Fleet.objects.filter(is_demo=True).delete()


# --------------------------------------------------------------------------- advice actions, reports


_owner_notifications: contextvars.ContextVar[bool] = contextvars.ContextVar(
    "owner_notifications", default=True)


@contextlib.contextmanager
def owner_notifications_paused():
    """Analyse without sending owners their PDF (the demo builder: nobody to tell yet)."""
    token = _owner_notifications.set(False)
    try:
        yield
    finally:
        _owner_notifications.reset(token)


def owner_report_on_commit(*, result: AnalysisResult, previous_keys: set[str]) -> bool:
    """After commit, enqueue the owner's PDF if the vehicle has an owner and the result new advice.

    A broker that is down only logs: the owner can still download the PDF from their page.
    """
    if result.vehicle.owner_id is None or not _owner_notifications.get():
        return False
    if not {_advice_key(a) for a in result.payload.get("advice", [])} - previous_keys:
        return False

    def send() -> None:
        from django.conf import settings

        from . import reports, tasks

        try:
            if getattr(settings, "CELERY_TASK_ALWAYS_EAGER", False):
                # in-process jobs: call the service itself (an eager Celery run closes the DB
                # connection afterwards, which would end the caller's transaction)
                reports.owner_report_issue(result_id=result.pk, paper="A4", email=True)
            else:
                tasks.make_owner_report.apply_async(args=[result.pk, "A4", True], retry=False)
        except Exception as exc:  # broker down, or an in-process run failed
            log.warning("owner report for result %s not made (%s)", result.pk, exc)

    transaction.on_commit(send, robust=True)
    return True


def advice_act(*, user, vehicle: Vehicle, key: str, action: str,
               scheduled_for: dt.date | None = None, note: str = "") -> AdviceAction:
    """Record a manager's acknowledgement or scheduling of one current advice key (append only)."""
    from inspections.scoping import can_manage

    if not can_manage(user):
        raise PermissionError("only managers act on advice")
    if action not in dict(AdviceAction.ACTIONS):
        raise ValueError("action: must be 'acknowledged' or 'scheduled'")
    if action == "scheduled" and scheduled_for is None:
        raise ValueError("scheduled_for: a date is needed to schedule")
    if action == "acknowledged":
        scheduled_for = None
    if not AdviceItem.objects.filter(vehicle=vehicle, key=key).exists():
        raise ValueError("key: no current advice with this key for the vehicle")
    with transaction.atomic():
        return AdviceAction.objects.create(vehicle=vehicle, key=key, action=action,
                                           scheduled_for=scheduled_for, note=note[:300], by=user)
