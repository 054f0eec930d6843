"""Workshops, fleets and the people who use fleetsvc with their role."""
from __future__ import annotations

from django.conf import settings
from django.db import models
from django.db.models import Q


class Workshop(models.Model):
    name = models.CharField(max_length=120, unique=True)
    address = models.TextField(blank=True)
    phone = models.CharField(max_length=40, blank=True)
    email = models.EmailField(blank=True)
    time_zone = models.CharField(max_length=64, default="Europe/London")
    is_demo = models.BooleanField(default=False)

    def __str__(self) -> str:
        return self.name


class Fleet(models.Model):
    """An operator's vehicles (a parcel operator, a hire-car company…)."""

    name = models.CharField(max_length=120, unique=True)
    operator = models.CharField(max_length=120, blank=True)
    is_demo = models.BooleanField(default=False)

    def __str__(self) -> str:
        return self.name


class Role(models.TextChoices):
    TECHNICIAN = "technician", "technician"
    MANAGER = "manager", "manager"
    OWNER = "owner", "owner"
    ADMINISTRATOR = "administrator", "administrator"


class Profile(models.Model):
    """A user's role and what it is attached to.

    technician → a workshop; manager → a workshop or a fleet; owner → their own vehicles;
    administrator → everything.
    """

    user = models.OneToOneField(settings.AUTH_USER_MODEL, on_delete=models.CASCADE,
                                related_name="profile")
    role = models.CharField(max_length=20, choices=Role.choices)
    workshop = models.ForeignKey(Workshop, null=True, blank=True, on_delete=models.PROTECT,
                                 related_name="staff")
    fleet = models.ForeignKey(Fleet, null=True, blank=True, on_delete=models.PROTECT,
                              related_name="managers")

    class Meta:
        constraints = [
            models.CheckConstraint(
                name="technician_has_workshop",
                condition=~Q(role="technician") | Q(workshop__isnull=False),
            ),
            models.CheckConstraint(
                name="manager_has_workshop_or_fleet",
                condition=~Q(role="manager") | Q(workshop__isnull=False) | Q(fleet__isnull=False),
            ),
        ]

    def __str__(self) -> str:
        return f"{self.user} ({self.role})"
