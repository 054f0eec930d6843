"""Celery tasks: thin adapters that take ids, call one service and hold the retry policy."""
from __future__ import annotations

from celery import shared_task

from . import services

RETRY = dict(autoretry_for=(Exception,), retry_backoff=2, retry_backoff_max=120,
             retry_jitter=True, max_retries=5)


@shared_task(name="analytics.tasks.analyse_vehicle", acks_late=True, **RETRY)
def analyse_vehicle(request_id: int) -> int | None:
    """Process one analysis request; returns the result id (the same one if run twice)."""
    return services.request_process(request_id=request_id)


@shared_task(name="analytics.tasks.sweep_pending_requests", acks_late=True)
def sweep_pending_requests() -> int:
    """Resend requests that were never sent or never finished (e.g. Redis was down)."""
    return services.requests_sweep()


@shared_task(name="analytics.tasks.recompute_fleet", acks_late=True)
def recompute_fleet() -> int:
    """Nightly: recompute every vehicle whose inputs or model version changed (chunks fanned
    out to the workers as :func:`recompute_chunk` tasks)."""
    return services.fleet_recompute(fan_out=True)


@shared_task(name="analytics.tasks.recompute_chunk", acks_late=True, **RETRY)
def recompute_chunk(platform_id: int, vehicle_ids: list[int], pool: bool = False) -> int:
    """One platform chunk of the fleet recompute; returns the results written (0 on a rerun).
    ``pool``: the chunk is the whole platform and refreshes its pooled rates first."""
    from . import fleet_recompute

    return fleet_recompute.recompute_chunk(platform_id, vehicle_ids, pool=pool).written


@shared_task(name="analytics.tasks.pool_platform", acks_late=True, **RETRY)
def pool_platform(platform_id: int) -> int:
    """Refresh one platform's pooled drift rates (the first phase of a fanned-out recompute of a
    platform larger than one chunk)."""
    from inspections.models import Platform

    from . import fleet_recompute

    return fleet_recompute.platform_pool_fast(platform=Platform.objects.get(pk=platform_id))


@shared_task(name="analytics.tasks.make_owner_report", acks_late=True, **RETRY)
def make_owner_report(result_id: int, paper: str = "A4", email: bool = True, *,
                      only_if_latest: bool = False) -> int | None:
    """Render (once) the owner PDF for a result and e-mail it to the owner; with
    ``only_if_latest``, nothing when a newer result of the vehicle exists."""
    from . import reports

    return reports.owner_report_issue(result_id=result_id, paper=paper, email=email,
                                      only_if_latest=only_if_latest)
