"""Append-only inspection records: alignment sessions with wheel readings, component checks,
service events.

A submitted session or check is never edited in place. A correction is a new record whose
``supersedes`` points at the one it replaces, with its author and reason; the original stays and
the history shows both. ``current()`` querysets hold only records nobody has superseded.
Physical ranges are database constraints, so they hold through ``bulk_create`` too.
"""
from __future__ import annotations

import uuid

from django.conf import settings
from django.db import models
from django.db.models import Exists, OuterRef, Q

from .catalogue import (
    CORNERS,
    DEFECT_CATEGORIES,
    PART_CHOICES,
    PLAY_DIRECTIONS,
    PLAY_LOADING,
    VERDICTS,
)
from .org import Workshop
from .vehicle import Vehicle

# Physical ranges (degrees / mm). Wider than any real vehicle's spec; they catch typing errors.
TOE_LIMIT_DEG = 10.0
CAMBER_LIMIT_DEG = 15.0
CASTER_LIMIT_DEG = 20.0
SAI_LIMIT_DEG = 25.0


class AppendOnlyError(Exception):
    """Raised when code tries to change a submitted record in place."""


class RecordQuerySet(models.QuerySet):
    def visible_to(self, user) -> RecordQuerySet:
        from inspections.scoping import vehicle_filter

        return self.filter(vehicle_filter(user, prefix="vehicle__"))

    def current(self) -> RecordQuerySet:
        """Records that no correction supersedes."""
        newer = self.model.objects.filter(supersedes=OuterRef("pk"))
        return self.filter(~Exists(newer))


class AppendOnlyRecord(models.Model):
    """Common columns and the append-only rule of submitted records."""

    vehicle = models.ForeignKey(Vehicle, on_delete=models.PROTECT)
    workshop = models.ForeignKey(Workshop, on_delete=models.PROTECT)
    technician = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.PROTECT)
    odometer_km = models.PositiveIntegerField()
    odometer_change_reason = models.CharField(
        max_length=200, blank=True,
        help_text="Filled only when the odometer reads lower than before (instrument changed).")
    notes = models.TextField(blank=True)
    supersedes = models.OneToOneField("self", null=True, blank=True, on_delete=models.PROTECT,
                                      related_name="superseded_by")
    correction_reason = models.CharField(max_length=300, blank=True)
    client_token = models.UUIDField(default=uuid.uuid4, unique=True,
                                    help_text="Sent by the tablet; a repeated submit is ignored.")
    created_at = models.DateTimeField(auto_now_add=True)

    objects = RecordQuerySet.as_manager()

    class Meta:
        abstract = True

    def save(self, *args, **kwargs) -> None:
        if not self._state.adding:
            raise AppendOnlyError(
                f"{type(self).__name__} {self.pk} is submitted; record a correction instead")
        super().save(*args, **kwargs)

    @property
    def is_superseded(self) -> bool:
        return type(self).objects.filter(supersedes=self).exists()


class AlignmentSession(AppendOnlyRecord):
    KINDS = [("as_found", "as found"), ("as_adjusted", "as adjusted")]

    measured_at = models.DateTimeField()
    kind = models.CharField(max_length=12, choices=KINDS)
    equipment_id = models.CharField(max_length=60)
    equipment_calibrated_on = models.DateField()
    ride_height_fl_mm = models.FloatField(null=True, blank=True)
    ride_height_fr_mm = models.FloatField(null=True, blank=True)
    ride_height_rl_mm = models.FloatField(null=True, blank=True)
    ride_height_rr_mm = models.FloatField(null=True, blank=True)

    class Meta:
        constraints = [
            models.CheckConstraint(name="session_correction_has_reason", condition=(
                Q(supersedes__isnull=True) | ~Q(correction_reason=""))),
        ]
        indexes = [models.Index(fields=["vehicle", "measured_at"]),
                   # a vehicle's newest record id (the analysis input key) as one index probe
                   models.Index(fields=["vehicle", "id"], name="session_vehicle_newest")]
        ordering = ["measured_at", "id"]

    def __str__(self) -> str:
        return f"session {self.pk} {self.vehicle.plate} {self.measured_at:%Y-%m-%d} {self.kind}"


class WheelReading(models.Model):
    """One corner's reading in one session, in degrees (ISO 8855 signs, DESIGN.md §3)."""

    session = models.ForeignKey(AlignmentSession, on_delete=models.CASCADE,
                                related_name="readings")
    corner = models.CharField(max_length=2, choices=CORNERS)
    toe_deg = models.FloatField()
    camber_deg = models.FloatField()
    caster_deg = models.FloatField(null=True, blank=True)
    sai_deg = models.FloatField(null=True, blank=True)

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["session", "corner"], name="one_reading_per_corner"),
            models.CheckConstraint(name="toe_physical_range", condition=Q(
                toe_deg__gte=-TOE_LIMIT_DEG, toe_deg__lte=TOE_LIMIT_DEG)),
            models.CheckConstraint(name="camber_physical_range", condition=Q(
                camber_deg__gte=-CAMBER_LIMIT_DEG, camber_deg__lte=CAMBER_LIMIT_DEG)),
            models.CheckConstraint(name="caster_physical_range", condition=Q(
                caster_deg__isnull=True) | Q(caster_deg__gte=-CASTER_LIMIT_DEG,
                                             caster_deg__lte=CASTER_LIMIT_DEG)),
            models.CheckConstraint(name="caster_only_on_front", condition=Q(
                caster_deg__isnull=True) | Q(corner__in=["FL", "FR"])),
            models.CheckConstraint(name="sai_physical_range", condition=Q(
                sai_deg__isnull=True) | Q(sai_deg__gte=-SAI_LIMIT_DEG, sai_deg__lte=SAI_LIMIT_DEG)),
        ]
        ordering = ["session_id", "corner"]


class ComponentCheck(AppendOnlyRecord):
    """An inspection of one catalogue part at one corner."""

    session = models.ForeignKey(AlignmentSession, null=True, blank=True,
                                on_delete=models.SET_NULL, related_name="component_checks")
    checked_at = models.DateTimeField()
    corner = models.CharField(max_length=2, choices=CORNERS)
    part = models.CharField(max_length=40, choices=PART_CHOICES)
    play_mm = models.FloatField(null=True, blank=True)
    play_direction = models.CharField(max_length=8, choices=PLAY_DIRECTIONS, blank=True)
    play_loading = models.CharField(max_length=8, choices=PLAY_LOADING, blank=True)
    deflection_mm = models.FloatField(null=True, blank=True)
    deflection_force_n = models.FloatField(null=True, blank=True)
    findings = models.JSONField(default=list, blank=True)
    verdict = models.CharField(max_length=12, choices=VERDICTS)
    defect_category = models.CharField(max_length=10, choices=DEFECT_CATEGORIES, blank=True)

    class Meta:
        constraints = [
            models.CheckConstraint(name="play_non_negative", condition=Q(
                play_mm__isnull=True) | Q(play_mm__gte=0, play_mm__lte=50)),
            models.CheckConstraint(name="deflection_non_negative", condition=Q(
                deflection_mm__isnull=True) | Q(deflection_mm__gte=0, deflection_mm__lte=100)),
            models.CheckConstraint(name="deflection_has_force", condition=Q(
                deflection_mm__isnull=True) | Q(deflection_force_n__isnull=False, deflection_force_n__gt=0)),
            models.CheckConstraint(name="play_has_method", condition=Q(play_mm__isnull=True) | (
                ~Q(play_direction="") & ~Q(play_loading=""))),
            models.CheckConstraint(name="check_correction_has_reason", condition=(
                Q(supersedes__isnull=True) | ~Q(correction_reason=""))),
        ]
        indexes = [models.Index(fields=["vehicle", "checked_at"]),
                   # a vehicle's newest record id (the analysis input key) as one index probe
                   models.Index(fields=["vehicle", "id"], name="check_vehicle_newest")]
        ordering = ["checked_at", "id"]


class ComponentPhoto(models.Model):
    check_record = models.ForeignKey(ComponentCheck, on_delete=models.CASCADE,
                                     related_name="photos")
    image = models.ImageField(upload_to="checks/%Y/%m/")
    uploaded_at = models.DateTimeField(auto_now_add=True)


class ServiceEvent(models.Model):
    KINDS = [("alignment_adjusted", "alignment adjusted"), ("part_replaced", "part replaced")]
    REASONS = [("", "—"), ("failed", "failed"), ("preventive", "preventive")]

    vehicle = models.ForeignKey(Vehicle, on_delete=models.PROTECT, related_name="service_events")
    workshop = models.ForeignKey(Workshop, on_delete=models.PROTECT)
    recorded_by = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.PROTECT)
    performed_at = models.DateTimeField()
    odometer_km = models.PositiveIntegerField()
    kind = models.CharField(max_length=20, choices=KINDS)
    corner = models.CharField(max_length=2, choices=CORNERS, blank=True)
    part = models.CharField(max_length=40, choices=PART_CHOICES, blank=True)
    reason = models.CharField(max_length=12, choices=REASONS, blank=True)
    notes = models.TextField(blank=True)
    client_token = models.UUIDField(default=uuid.uuid4, unique=True)
    created_at = models.DateTimeField(auto_now_add=True)

    objects = RecordQuerySet.as_manager()

    class Meta:
        constraints = [
            models.CheckConstraint(name="replacement_names_part", condition=~Q(
                kind="part_replaced") | (~Q(part="") & ~Q(corner="") & ~Q(reason=""))),
        ]
        indexes = [models.Index(fields=["vehicle", "performed_at"]),
                   # a vehicle's newest record id (the analysis input key) as one index probe
                   models.Index(fields=["vehicle", "id"], name="event_vehicle_newest")]
        ordering = ["performed_at", "id"]
