"""Who may do what through the API — every answer comes from ``inspections.scoping``.

Order of checks on every route that takes an id: first *may the caller see the object?* (no → 404,
the same answer as a missing id, so ids of other tenants' records leak nothing), then *may the
caller's role do this?* (no → 403). An owner or manager who can see a vehicle may read its records
but not write them: 403 with a message naming the roles that may. Users without a role see nothing
(empty lists, 404 for every id); signed-out callers get 401.
"""
from __future__ import annotations

from rest_framework.exceptions import PermissionDenied

from inspections.models import AlignmentSession, ComponentCheck, Vehicle
from inspections.scoping import can_record, get_visible_or_404

RECORDER_ONLY = "only technicians and administrators record sessions, checks and corrections"


def require_recorder(user) -> None:
    """Call after the object was found visible: a role that may read but not write gets 403."""
    if not can_record(user):
        raise PermissionDenied(RECORDER_ONLY)


def visible_vehicle(user, pk: int) -> Vehicle:
    return get_visible_or_404(Vehicle.objects.select_related("platform", "workshop", "fleet"),
                              user, prefix="", pk=pk)


def visible_session(user, pk: int, queryset=None) -> AlignmentSession:
    qs = queryset if queryset is not None else AlignmentSession.objects.all()
    return get_visible_or_404(qs, user, prefix="vehicle__", pk=pk)


def visible_check(user, pk: int, queryset=None) -> ComponentCheck:
    qs = queryset if queryset is not None else ComponentCheck.objects.all()
    return get_visible_or_404(qs, user, prefix="vehicle__", pk=pk)
