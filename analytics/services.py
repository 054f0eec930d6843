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
from django.db.models import F, Q
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
    compact_payload,
    drift_rate_rows,
    outcomes_store,
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
    from django.db import connection

    if connection.vendor == "postgresql":
        rid = vehicles_analyse(vehicle_ids=[vehicle_id]).get(vehicle_id)
        if rid is not None:
            return AnalysisResult.objects.get(pk=rid)
        # no result: the per-vehicle reference below says why (it refuses the data)
    vehicle = Vehicle.objects.select_related("platform", "workshop").get(pk=vehicle_id)
    key = input_key(vehicle)
    existing = AnalysisResult.objects.filter(vehicle=vehicle, input_key=key,
                                             model_version=MODEL_VERSION).first()
    if existing is not None:
        return existing
    payload, _ = analysis.analyse(vehicle_data(vehicle))
    stored, outcomes = compact_payload(payload)
    previous_keys = set(AdviceItem.objects.filter(vehicle=vehicle).values_list("key", flat=True))
    try:
        with transaction.atomic():
            outcomes_store(outcomes)
            result = AnalysisResult.objects.create(vehicle=vehicle, input_key=key,
                                                   model_version=MODEL_VERSION, payload=stored,
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


def vehicles_analyse(*, vehicle_ids) -> dict[int, int]:
    """Analyse several vehicles at once; returns ``{vehicle id: result id}`` for their current
    inputs (a vehicle whose data the analysis refuses is left out).

    On PostgreSQL the vehicles are analysed per platform through the vectorised path
    (:func:`analytics.fleet_recompute.recompute_chunk`: one read, one write, the same payload as
    the per-vehicle analysis — tested); a vehicle whose inputs already have a result is not
    analysed again. Elsewhere (the SQLite demo) vehicle by vehicle.
    """
    from django.db import connection

    ids = sorted(set(vehicle_ids))
    if connection.vendor != "postgresql":
        out = {}
        for vid in ids:
            try:
                out[vid] = vehicle_analyse(vehicle_id=vid).pk
            except ValueError as exc:
                log.warning("vehicle %s not analysed: %s", vid, exc)
        return out
    from . import fleet_recompute

    by_platform: dict[int, list[int]] = {}
    for vid, pid in Vehicle.objects.filter(pk__in=ids).values_list("pk", "platform_id"):
        by_platform.setdefault(pid, []).append(vid)
    wanted: dict[int, str] = {}
    for pid, vids in sorted(by_platform.items()):
        wanted.update(fleet_recompute.recompute_chunk(pid, vids).keys)
    found = AnalysisResult.objects.filter(
        vehicle_id__in=list(wanted), input_key__in=set(wanted.values()),
        model_version=MODEL_VERSION).values_list("vehicle_id", "input_key", "pk")
    return {v: pk for v, k, pk in found if wanted.get(v) == k}


#: Open requests one job takes along with its own (the analysis of many vehicles at once costs
#: little more than that of one: under a burst of sessions the queue drains in a few jobs).
BATCH_REQUESTS = 200
#: A claim by a job that died is given up after this long (its own task is redelivered anyway).
CLAIM_TTL = dt.timedelta(minutes=5)


def _claim_open_requests(*, exclude: int, limit: int) -> list[tuple[int, int]]:
    """Claim up to ``limit`` open requests nobody has claimed lately, oldest first; returns
    ``(request id, vehicle id)``. ``SKIP LOCKED``: two jobs claiming at once take different ones."""
    now = timezone.now()
    with transaction.atomic():
        rows = list(AnalysisRequest.objects.select_for_update(skip_locked=True)
                    .filter(done_at__isnull=True)
                    .filter(Q(claimed_at__isnull=True) | Q(claimed_at__lt=now - CLAIM_TTL))
                    .exclude(pk=exclude).order_by("created_at", "pk")
                    .values_list("pk", "vehicle_id")[:limit])
        if rows:
            AnalysisRequest.objects.filter(pk__in=[r for r, _ in rows]).update(claimed_at=now)
    return rows


def request_process(*, request_id: int) -> int | None:
    """Run one analysis request, and with it the other open ones (see ``BATCH_REQUESTS``).

    A request already done — answered by another job's batch — or gone is a no-op that returns
    the vehicle's latest result. The job's own request is always analysed, even if another job
    claimed it (that job may have died): a vehicle analysed twice for the same inputs still has
    one result. Every request of the batch is marked done once its vehicle's result is stored;
    the result covers its record, committed before the claim and the reads that follow it.
    """
    req = AnalysisRequest.objects.filter(pk=request_id).first()
    if req is None:
        return None
    if req.done_at is not None:
        latest = latest_result_id(req.vehicle_id)
        if latest is not None:
            AnalysisRequest.objects.filter(pk=req.pk).update(attempts=F("attempts") + 1)
            return latest
    AnalysisRequest.objects.filter(pk=req.pk).update(attempts=F("attempts") + 1,
                                                     claimed_at=timezone.now())
    others = _claim_open_requests(exclude=req.pk, limit=BATCH_REQUESTS - 1)
    results = vehicles_analyse(vehicle_ids=[req.vehicle_id, *(v for _, v in others)])
    if req.vehicle_id not in results:  # refused data: the reference path raises the reason
        results[req.vehicle_id] = vehicle_analyse(vehicle_id=req.vehicle_id).pk
    answered = [req.pk, *(r for r, v in others if v in results)]
    AnalysisRequest.objects.filter(pk__in=answered).update(done_at=timezone.now())
    return results[req.vehicle_id]


def _newest_first(vehicle_id: int):
    """The vehicle's results of this model version, newest first."""
    return (AnalysisResult.objects.filter(vehicle_id=vehicle_id, model_version=MODEL_VERSION)
            .order_by("-computed_at", "-pk"))


def latest_result_id(vehicle_id: int) -> int | None:
    return _newest_first(vehicle_id).values_list("pk", flat=True).first()


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
                try:
                    fit = fit_drift(rows["odometer_km"].to_numpy(float),
                                    rows[f"{angle}_deg"].to_numpy(float), adjusted_before=flags,
                                    measurement_sd=analysis.REPEATABILITY[angle])
                except ValueError:  # refused (an odometer going backwards): not pooled
                    continue
                fits.setdefault((corner, angle), []).append(fit)
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
    chunks read as column arrays; ``fan_out`` sends the chunks to the Celery workers instead of
    running them here). Elsewhere (the SQLite demo) vehicle by vehicle. Returns the vehicles covered.
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
    return _newest_first(vehicle.pk).first()


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

    With a queue the job runs ``OWNER_REPORT_DELAY_S`` later and makes the PDF only if the result
    is still the vehicle's newest (a correction or another session in the meantime sends its own
    — the owner gets one e-mail for the settled advice, and a burst of sessions does not keep
    the workers rendering PDFs nobody will read). A broker that is down only logs: the owner
    can still download the PDF from their page.
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
                tasks.make_owner_report.apply_async(
                    args=[result.pk, "A4", True], kwargs={"only_if_latest": True},
                    countdown=settings.OWNER_REPORT_DELAY_S, retry=False)
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
