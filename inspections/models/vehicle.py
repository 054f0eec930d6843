"""Vehicles: VIN (ISO 3779 character set), plate, fleet number, platform, owner, fleet."""
from __future__ import annotations

import re

from django.conf import settings
from django.core.validators import RegexValidator
from django.db import models
from django.db.models import F, Q, Value
from django.db.models.functions import Replace, Upper

from .org import Fleet, Workshop
from .platform import Platform

VIN_PATTERN = r"^[A-HJ-NPR-Z0-9]{17}$"
vin_validator = RegexValidator(
    VIN_PATTERN, "VIN must be 17 characters of A–Z and 0–9 without I, O or Q (ISO 3779).")


def normalise_identifier(text: str) -> str:
    """Upper-case and drop spaces and dashes: how plates, VINs and fleet numbers are searched."""
    return re.sub(r"[\s\-]+", "", text or "").upper()


def _key(field: str):
    """Database expression equal to :func:`normalise_identifier` (spaces and dashes dropped)."""
    return Upper(Replace(Replace(F(field), Value(" "), Value("")), Value("-"), Value("")))


class VehicleQuerySet(models.QuerySet):
    def visible_to(self, user) -> VehicleQuerySet:
        from inspections.scoping import vehicle_filter

        return self.filter(vehicle_filter(user, prefix=""))


class Vehicle(models.Model):
    vin = models.CharField(max_length=17, unique=True, validators=[vin_validator])
    plate = models.CharField(max_length=16)
    plate_key = models.GeneratedField(expression=_key("plate"), db_persist=True,
                                      output_field=models.CharField(max_length=16))
    fleet_number = models.CharField(max_length=32, blank=True)
    fleet_number_key = models.GeneratedField(expression=_key("fleet_number"), db_persist=True,
                                             output_field=models.CharField(max_length=32))
    platform = models.ForeignKey(Platform, on_delete=models.PROTECT, related_name="vehicles")
    workshop = models.ForeignKey(Workshop, on_delete=models.PROTECT, related_name="vehicles",
                                 help_text="The workshop that maintains the vehicle.")
    owner = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True,
                              on_delete=models.SET_NULL, related_name="owned_vehicles")
    fleet = models.ForeignKey(Fleet, null=True, blank=True, on_delete=models.SET_NULL,
                              related_name="vehicles")
    in_service_date = models.DateField()
    is_demo = models.BooleanField(default=False)

    objects = VehicleQuerySet.as_manager()

    class Meta:
        constraints = [
            models.CheckConstraint(name="vin_iso3779", condition=Q(vin__regex=VIN_PATTERN)),
        ]
        indexes = [
            models.Index(fields=["workshop", "platform"]),
            models.Index(fields=["plate_key"]),
            models.Index(fields=["fleet_number_key"]),
        ]

    def __str__(self) -> str:
        return f"{self.plate} ({self.vin})"
