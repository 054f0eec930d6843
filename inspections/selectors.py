"""Reads of inspection records, scoped and shaped for views and for analytics services."""
from __future__ import annotations

from django.db.models import Q, QuerySet

from .models import (
    AlignmentSession,
    ComponentCheck,
    ServiceEvent,
    Vehicle,
    WheelReading,
    normalise_identifier,
)


def vehicles_for(user) -> QuerySet[Vehicle]:
    return Vehicle.objects.visible_to(user).select_related("platform", "fleet", "workshop")


def vehicle_search(user, text: str, *, limit: int = 25) -> QuerySet[Vehicle]:
    """Vehicles the user may see whose plate, VIN or fleet number matches ``text``.

    Case, spaces and dashes are ignored; a partial match at the start or inside counts.
    """
    key = normalise_identifier(text)
    if not key:
        return vehicles_for(user).none()
    return vehicles_for(user).filter(
        Q(plate_key__contains=key) | Q(vin__contains=key) | Q(fleet_number_key__contains=key)
    ).order_by("plate")[:limit]


def sessions_of(vehicle: Vehicle, *, current_only: bool = True) -> QuerySet[AlignmentSession]:
    qs = AlignmentSession.objects.filter(vehicle=vehicle)
    if current_only:
        qs = qs.current()
    return qs.prefetch_related("readings").order_by("measured_at", "id")


def readings_of(vehicle: Vehicle) -> QuerySet[WheelReading]:
    """Current wheel readings with their session's kind, time and odometer, oldest first."""
    current = AlignmentSession.objects.filter(vehicle=vehicle).current()
    return (WheelReading.objects.filter(session__in=current)
            .select_related("session").order_by("session__measured_at", "session_id", "corner"))


def checks_of(vehicle: Vehicle, *, current_only: bool = True) -> QuerySet[ComponentCheck]:
    qs = ComponentCheck.objects.filter(vehicle=vehicle)
    if current_only:
        qs = qs.current()
    return qs.order_by("checked_at", "id")


def service_events_of(vehicle: Vehicle) -> QuerySet[ServiceEvent]:
    return ServiceEvent.objects.filter(vehicle=vehicle).order_by("performed_at", "id")


def history_of_session(session: AlignmentSession) -> list[AlignmentSession]:
    """The chain a session belongs to, original first, each correction after it."""
    first = session
    while first.supersedes_id:
        first = first.supersedes
    chain = [first]
    while True:
        nxt = AlignmentSession.objects.filter(supersedes=chain[-1]).first()
        if nxt is None:
            return chain
        chain.append(nxt)
