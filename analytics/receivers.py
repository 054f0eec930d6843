"""Connects inspections' ``record_submitted`` to analysis requests (same transaction)."""
from __future__ import annotations

import logging

from django.db import transaction
from django.dispatch import receiver

from inspections.signals import record_submitted

from .models import AnalysisRequest

log = logging.getLogger(__name__)


@receiver(record_submitted, dispatch_uid="analytics.request_on_record")
def request_analysis(sender, record, vehicle, **kwargs) -> None:
    request = AnalysisRequest.objects.create(
        vehicle=vehicle, reason=f"{sender.__name__}:{record.pk}")
    transaction.on_commit(lambda: enqueue_request(request.pk))


def enqueue_request(request_id: int) -> bool:
    """Send a request to the queue. A broker that is down leaves it for the periodic sweep."""
    from . import tasks

    try:
        tasks.analyse_vehicle.apply_async(args=[request_id], retry=False)
    except Exception as exc:  # broker down: the sweep resends it later
        log.warning("analysis request %s not sent (%s); the sweep will resend it",
                    request_id, exc)
        return False
    AnalysisRequest.objects.filter(pk=request_id, sent_at__isnull=True).update(
        sent_at=_now())
    return True


def _now():
    from django.utils import timezone

    return timezone.now()
