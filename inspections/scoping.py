"""The one mechanism that scopes every query to what a user may see.

Every view, export, PDF and API asks this module. A vehicle is visible to:

- an administrator (role or Django superuser): every vehicle;
- a technician: the vehicles their workshop maintains;
- a manager: the vehicles of their workshop, or of their fleet;
- an owner: their own vehicles.

Anything else is not found (views answer 404, never 403, so ids of others' records leak nothing).
"""
from __future__ import annotations

from django.db.models import Model, Q, QuerySet
from django.http import Http404

from .models.org import Profile, Role

NOTHING = Q(pk__in=[])


def role_of(user) -> str | None:
    """The user's role, or None for anonymous users and users without a profile."""
    if not getattr(user, "is_authenticated", False):
        return None
    if user.is_superuser:
        return Role.ADMINISTRATOR
    try:
        return user.profile.role
    except Profile.DoesNotExist:
        return None


def vehicle_filter(user, *, prefix: str = "") -> Q:
    """A Q object over a model that reaches Vehicle through ``prefix`` ("" for Vehicle itself)."""
    role = role_of(user)
    if role is None:
        return NOTHING
    if role == Role.ADMINISTRATOR:
        return Q()
    profile = user.profile
    if role == Role.TECHNICIAN:
        return Q(**{f"{prefix}workshop_id": profile.workshop_id})
    if role == Role.MANAGER:
        q = NOTHING
        if profile.workshop_id:
            q |= Q(**{f"{prefix}workshop_id": profile.workshop_id})
        if profile.fleet_id:
            q |= Q(**{f"{prefix}fleet_id": profile.fleet_id})
        return q
    if role == Role.OWNER:
        return Q(**{f"{prefix}owner_id": user.pk})
    return NOTHING


def scoped(queryset: QuerySet, user, *, prefix: str) -> QuerySet:
    """Filter any queryset by the vehicles ``user`` may see (``prefix`` leads to Vehicle)."""
    return queryset.filter(vehicle_filter(user, prefix=prefix))


def get_visible_or_404(queryset: QuerySet, user, *, prefix: str, **lookup) -> Model:
    """Fetch one object the user may see, or raise Http404 — the same answer as a missing id."""
    try:
        return scoped(queryset, user, prefix=prefix).get(**lookup)
    except queryset.model.DoesNotExist:
        raise Http404("not found") from None


def can_record(user) -> bool:
    """Technicians and administrators log sessions and checks."""
    return role_of(user) in {Role.TECHNICIAN, Role.ADMINISTRATOR}


def can_manage(user) -> bool:
    return role_of(user) in {Role.MANAGER, Role.ADMINISTRATOR}
