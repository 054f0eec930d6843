"""Vehicle platforms (a model/variant) with their specifications, each value with its source.

Every spec value records where it came from: a document reference typed by the user, or the
labels ``demo`` (invented demo data) / ``unverified``. Scalar platform data keep their sources in
``Platform.sources`` (field name → source); alignment specs, component limits and corner files
carry a ``source`` column of their own.
"""
from __future__ import annotations

from django.core.exceptions import ValidationError
from django.db import models
from django.db.models import Q

from .catalogue import AXLES, PART_CHOICES

SOURCE_HELP = "Document reference (manual, page), or 'demo' for invented data, or 'unverified'."

# Platform fields that are specification values and therefore need a source.
SPEC_FIELDS = (
    "reference_diameter_mm",
    "front_axle_load_n",
    "rear_axle_load_n",
    "track_front_mm",
    "track_rear_mm",
    "wheelbase_mm",
    "cg_height_mm",
    "loaded_tyre_radius_mm",
    "brake_balance_front",
    "alignment_interval_km",
    "alignment_interval_months",
    "suspension_interval_km",
    "suspension_interval_months",
)


class Platform(models.Model):
    DIAMETER_KINDS = [("rim", "rim diameter"), ("tyre", "tyre outside diameter")]
    DRIVEN = [("front", "front"), ("rear", "rear"), ("all", "all wheels")]

    name = models.CharField(max_length=120, unique=True)
    make = models.CharField(max_length=60)
    model = models.CharField(max_length=60)
    variant = models.CharField(max_length=60, blank=True)
    is_demo = models.BooleanField(default=False, help_text="Invented demo data.")

    reference_diameter_mm = models.FloatField(
        help_text="Reference diameter D for linear toe, x = D·sin(toe), mm.")
    reference_diameter_kind = models.CharField(max_length=8, choices=DIAMETER_KINDS, default="rim")
    front_axle_load_n = models.FloatField(help_text="Static front axle load, N.")
    rear_axle_load_n = models.FloatField(help_text="Static rear axle load, N.")
    track_front_mm = models.FloatField()
    track_rear_mm = models.FloatField()
    wheelbase_mm = models.FloatField()
    cg_height_mm = models.FloatField()
    loaded_tyre_radius_mm = models.FloatField()
    brake_balance_front = models.FloatField(help_text="Fraction of braking force on the front axle.")
    driven_axle = models.CharField(max_length=8, choices=DRIVEN, default="front")

    # Manufacturer intervals; blank means "not entered" — advice then asks for them.
    alignment_interval_km = models.PositiveIntegerField(null=True, blank=True)
    alignment_interval_months = models.PositiveSmallIntegerField(null=True, blank=True)
    suspension_interval_km = models.PositiveIntegerField(null=True, blank=True)
    suspension_interval_months = models.PositiveSmallIntegerField(null=True, blank=True)

    sources = models.JSONField(default=dict, blank=True, help_text=SOURCE_HELP)

    class Meta:
        constraints = [
            models.CheckConstraint(name="platform_positive_dims", condition=Q(
                reference_diameter_mm__gt=0, front_axle_load_n__gt=0, rear_axle_load_n__gt=0,
                track_front_mm__gt=0, track_rear_mm__gt=0, wheelbase_mm__gt=0,
                cg_height_mm__gt=0, loaded_tyre_radius_mm__gt=0)),
            models.CheckConstraint(name="platform_brake_balance_fraction", condition=Q(
                brake_balance_front__gte=0, brake_balance_front__lte=1)),
        ]

    def __str__(self) -> str:
        return self.name

    def source_for(self, field: str) -> str:
        return (self.sources or {}).get(field, "") or "no source recorded"

    def clean(self) -> None:
        missing = [f for f in SPEC_FIELDS
                   if getattr(self, f) is not None and not (self.sources or {}).get(f)]
        if missing:
            raise ValidationError({"sources": "a source is needed for: " + ", ".join(missing)})


class AlignmentSpec(models.Model):
    """Nominal ± tolerance of one alignment quantity on one axle, in degrees."""

    QUANTITIES = [
        ("toe", "toe (per wheel)"),
        ("total_toe", "total toe"),
        ("camber", "camber"),
        ("caster", "caster"),
        ("cross_camber", "cross-camber (left − right)"),
        ("cross_caster", "cross-caster (left − right)"),
        ("thrust_angle", "thrust angle (+ = thrust line to the right)"),
    ]
    platform = models.ForeignKey(Platform, on_delete=models.CASCADE, related_name="specs")
    axle = models.CharField(max_length=5, choices=AXLES)
    quantity = models.CharField(max_length=16, choices=QUANTITIES)
    nominal_deg = models.FloatField()
    tolerance_deg = models.FloatField(help_text="Symmetric tolerance ± degrees.")
    source = models.CharField(max_length=200, help_text=SOURCE_HELP)

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["platform", "axle", "quantity"],
                                    name="one_spec_per_axle_quantity"),
            models.CheckConstraint(name="spec_tolerance_positive", condition=Q(tolerance_deg__gt=0)),
            models.CheckConstraint(name="spec_source_given", condition=~Q(source="")),
        ]

    @property
    def lower_deg(self) -> float:
        return self.nominal_deg - self.tolerance_deg

    @property
    def upper_deg(self) -> float:
        return self.nominal_deg + self.tolerance_deg

    def __str__(self) -> str:
        return f"{self.platform} {self.axle} {self.quantity} {self.nominal_deg:+.2f}±{self.tolerance_deg}"


class ComponentLimit(models.Model):
    """The manufacturer's limit for one catalogue part: play and the findings that fail it."""

    platform = models.ForeignKey(Platform, on_delete=models.CASCADE, related_name="limits")
    part = models.CharField(max_length=40, choices=PART_CHOICES)
    max_play_mm = models.FloatField(null=True, blank=True)
    refused_findings = models.JSONField(default=list, blank=True,
                                        help_text="Findings that fail the part, e.g. ['debonding'].")
    source = models.CharField(max_length=200, help_text=SOURCE_HELP)

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["platform", "part"], name="one_limit_per_part"),
            models.CheckConstraint(name="limit_play_non_negative",
                                   condition=Q(max_play_mm__isnull=True) | Q(max_play_mm__gte=0)),
            models.CheckConstraint(name="limit_source_given", condition=~Q(source="")),
        ]


class PlatformCorner(models.Model):
    """The left-side corner file (DESIGN.md §4) of one axle; the right side is its mirror."""

    platform = models.ForeignKey(Platform, on_delete=models.CASCADE, related_name="corners")
    axle = models.CharField(max_length=5, choices=AXLES)
    geometry = models.JSONField()
    source = models.CharField(max_length=200, help_text=SOURCE_HELP)

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["platform", "axle"], name="one_corner_per_axle"),
        ]
