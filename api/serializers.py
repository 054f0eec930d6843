"""Shapes of the API: what goes out (records as stored) and what comes in (checked here for type and
physical range, then by ``inspections.services`` for everything that needs the database).

Units are the stored ones (DESIGN.md §3): angles in degrees with ISO 8855 signs — toe positive =
toe-in, camber positive = top of the wheel leans outboard, caster positive = top of the steering
axis leans rearward, SAI positive = top leans inboard — lengths in mm, forces in N, odometer in km,
times in ISO 8601 with a zone (a time without one is read in the workshop's zone, stored UTC).
The bay form's conversions (minutes, linear toe, miles) are for people typing; the API takes the
stored units only.
"""
from __future__ import annotations

import datetime as dt

from django.utils import timezone
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import extend_schema_field
from rest_framework import serializers
from rest_framework.authtoken.serializers import AuthTokenSerializer

from analytics.core.caution import CAUTION
from analytics.models import AdviceItem, AnalysisResult
from inspections.models import (
    CORNERS,
    DEFECT_CATEGORIES,
    FINDINGS,
    VERDICTS,
    AlignmentSession,
    ComponentCheck,
    Vehicle,
    WheelReading,
)
from inspections.models.catalogue import PART_CHOICES, PLAY_DIRECTIONS, PLAY_LOADING
from inspections.models.records import CAMBER_LIMIT_DEG, CASTER_LIMIT_DEG, SAI_LIMIT_DEG, TOE_LIMIT_DEG

from . import concurrency

MAX_ODOMETER_KM = 9_999_999
MAX_RIDE_HEIGHT_MM = 2000.0
MAX_DEFLECTION_FORCE_N = 100_000.0
MAX_DB_ID = 2**63 - 1
CLOCK_SKEW_ALLOWED = dt.timedelta(hours=1)


# ---------------------------------------------------------------------------------------- output


class PlatformRefSerializer(serializers.Serializer):
    id = serializers.IntegerField()
    name = serializers.CharField()
    make = serializers.CharField()
    model = serializers.CharField()


class NamedRefSerializer(serializers.Serializer):
    id = serializers.IntegerField()
    name = serializers.CharField()


class VehicleSerializer(serializers.ModelSerializer):
    platform = PlatformRefSerializer(read_only=True)
    workshop = NamedRefSerializer(read_only=True, help_text="The workshop that maintains the vehicle.")
    fleet = NamedRefSerializer(read_only=True, allow_null=True)

    class Meta:
        model = Vehicle
        fields = ["id", "vin", "plate", "fleet_number", "platform", "workshop", "fleet",
                  "in_service_date", "is_demo"]
        read_only_fields = fields


class VehicleDetailSerializer(VehicleSerializer):
    newest_session_id = serializers.IntegerField(
        read_only=True, allow_null=True,
        help_text="The most recently stored alignment session of the vehicle (corrections included).")
    newest_check_id = serializers.IntegerField(
        read_only=True, allow_null=True,
        help_text="The most recently stored component check of the vehicle (corrections included).")
    last_odometer_km = serializers.IntegerField(
        read_only=True, allow_null=True,
        help_text="The highest odometer (km) of the vehicle's current records.")
    etag = serializers.CharField(read_only=True, help_text="The same value as the ETag header.")

    class Meta(VehicleSerializer.Meta):
        fields = [*VehicleSerializer.Meta.fields, "newest_session_id", "newest_check_id",
                  "last_odometer_km", "etag"]
        read_only_fields = fields


class WheelReadingSerializer(serializers.ModelSerializer):
    class Meta:
        model = WheelReading
        fields = ["corner", "toe_deg", "camber_deg", "caster_deg", "sai_deg"]
        read_only_fields = fields


class _RecordOutMixin(serializers.Serializer):
    technician = serializers.CharField(source="technician.username", read_only=True,
                                       help_text="Who recorded it (user name).")
    superseded_by = serializers.SerializerMethodField(
        help_text="The correction that replaced this record, or null while it is current.")
    etag = serializers.SerializerMethodField(help_text="The same value as the ETag header.")

    @extend_schema_field(serializers.IntegerField(allow_null=True))
    def get_superseded_by(self, obj) -> int | None:
        return concurrency.newer_id(obj)

    @extend_schema_field(OpenApiTypes.STR)
    def get_etag(self, obj) -> str:
        return concurrency.record_etag(obj)


class SessionSerializer(_RecordOutMixin, serializers.ModelSerializer):
    readings = WheelReadingSerializer(many=True, read_only=True)

    class Meta:
        model = AlignmentSession
        fields = ["id", "vehicle", "workshop", "technician", "measured_at", "odometer_km",
                  "odometer_change_reason", "kind", "equipment_id", "equipment_calibrated_on",
                  "ride_height_fl_mm", "ride_height_fr_mm", "ride_height_rl_mm", "ride_height_rr_mm",
                  "notes", "supersedes", "correction_reason", "superseded_by", "client_token",
                  "created_at", "etag", "readings"]
        read_only_fields = fields


class ComponentCheckSerializer(_RecordOutMixin, serializers.ModelSerializer):
    class Meta:
        model = ComponentCheck
        fields = ["id", "vehicle", "workshop", "technician", "session", "checked_at", "odometer_km",
                  "odometer_change_reason", "corner", "part", "play_mm", "play_direction",
                  "play_loading", "deflection_mm", "deflection_force_n", "findings", "verdict",
                  "defect_category", "notes", "supersedes", "correction_reason", "superseded_by",
                  "client_token", "created_at", "etag"]
        read_only_fields = fields

    findings = serializers.ListField(child=serializers.ChoiceField(choices=FINDINGS), read_only=True)


@extend_schema_field(OpenApiTypes.OBJECT)
class JSONObjectField(serializers.JSONField):
    """A stored JSON object, passed through."""


class AdviceItemSerializer(serializers.ModelSerializer):
    caution = serializers.SerializerMethodField(
        help_text="Advisory only: the caution every piece of advice carries.")
    detail = JSONObjectField(
        source="body", read_only=True,
        help_text="The full advice: why (evidence), the model that produced it, how sure (an "
                  "interval of dates and km), the manufacturer limit it respects.")

    class Meta:
        model = AdviceItem
        fields = ["key", "kind", "severity", "what", "due_date", "due_km", "corner",
                  "defect_category", "caution", "detail"]
        read_only_fields = fields

    @extend_schema_field(OpenApiTypes.STR)
    def get_caution(self, obj) -> str:
        body = obj.body if isinstance(obj.body, dict) else {}
        return body.get("caution") or CAUTION


class AnalysisResultRefSerializer(serializers.ModelSerializer):
    class Meta:
        model = AnalysisResult
        fields = ["id", "computed_at", "model_version"]
        read_only_fields = fields


class AdviceSerializer(serializers.Serializer):
    vehicle = serializers.IntegerField(read_only=True)
    status = serializers.ChoiceField(
        choices=[("ready", "ready"), ("updating", "updating"), ("pending", "pending")], read_only=True,
        help_text="ready: the advice of the latest analysis; updating: that advice while newer records "
                  "are being analysed; pending: no analysis is stored yet.")
    result = AnalysisResultRefSerializer(read_only=True, allow_null=True)
    caution = serializers.CharField(read_only=True)
    items = AdviceItemSerializer(many=True, read_only=True)


class TokenRequestSerializer(AuthTokenSerializer):
    """DRF's own credentials check, with lengths bounded before anything is looked up (a user name
    longer than the user model allows is no user; the sign-in throttle stores what it is given)."""

    username = serializers.CharField(label="Username", write_only=True, max_length=150)
    password = serializers.CharField(label="Password", write_only=True, max_length=1024,
                                     style={"input_type": "password"}, trim_whitespace=False)


class TokenSerializer(serializers.Serializer):
    token = serializers.CharField(read_only=True)


# ----------------------------------------------------------------------------------------- input


def _angle(limit: float, *, required: bool = True) -> serializers.FloatField:
    if required:
        return serializers.FloatField(min_value=-limit, max_value=limit)
    return serializers.FloatField(min_value=-limit, max_value=limit, required=False, allow_null=True,
                                  default=None)


class ReadingInputSerializer(serializers.Serializer):
    """One corner's reading in degrees (ISO 8855 signs). Caster only on the front corners."""

    corner = serializers.ChoiceField(choices=CORNERS)
    toe_deg = _angle(TOE_LIMIT_DEG)
    camber_deg = _angle(CAMBER_LIMIT_DEG)
    caster_deg = _angle(CASTER_LIMIT_DEG, required=False)
    sai_deg = _angle(SAI_LIMIT_DEG, required=False)


def _ride_height() -> serializers.FloatField:
    return serializers.FloatField(min_value=0, max_value=MAX_RIDE_HEIGHT_MM, required=False,
                                  allow_null=True, default=None)


def _not_in_future(value):
    if value is not None and value > timezone.now() + CLOCK_SKEW_ALLOWED:
        raise serializers.ValidationError("cannot be in the future")
    return value


class SessionCreateSerializer(serializers.Serializer):
    client_token = serializers.UUIDField(
        help_text="Made by the tablet once per session; sending it again returns the stored session "
                  "(200) instead of storing a second one.")
    kind = serializers.ChoiceField(choices=AlignmentSession.KINDS)
    measured_at = serializers.DateTimeField(validators=[_not_in_future])
    odometer_km = serializers.IntegerField(min_value=0, max_value=MAX_ODOMETER_KM)
    odometer_change_reason = serializers.CharField(
        max_length=200, required=False, allow_blank=True, default="",
        help_text="Needed only when the odometer reads lower than the vehicle's last record.")
    equipment_id = serializers.CharField(max_length=60, help_text="The alignment rig's id.")
    equipment_calibrated_on = serializers.DateField()
    ride_height_fl_mm = _ride_height()
    ride_height_fr_mm = _ride_height()
    ride_height_rl_mm = _ride_height()
    ride_height_rr_mm = _ride_height()
    notes = serializers.CharField(max_length=4000, required=False, allow_blank=True, default="")
    readings = ReadingInputSerializer(many=True, min_length=1, max_length=4)

    def service_kwargs(self) -> dict:
        d = dict(self.validated_data)
        d["readings"] = [dict(r) for r in d["readings"]]
        d["ride_heights_mm"] = {c: d.pop(f"ride_height_{c.lower()}_mm", None) for c, _ in CORNERS}
        return d


class CorrectionSerializer(serializers.Serializer):
    """The reason and the values that change; what is left out is carried from the corrected session.

    ``readings``, when given, replace all of the session's readings.
    """

    client_token = serializers.UUIDField(
        help_text="Made by the tablet once per correction; sending it again returns the stored "
                  "correction (200).")
    correction_reason = serializers.CharField(max_length=300)
    kind = serializers.ChoiceField(choices=AlignmentSession.KINDS, required=False)
    measured_at = serializers.DateTimeField(required=False, validators=[_not_in_future])
    odometer_km = serializers.IntegerField(min_value=0, max_value=MAX_ODOMETER_KM, required=False)
    odometer_change_reason = serializers.CharField(max_length=200, required=False, allow_blank=True)
    equipment_id = serializers.CharField(max_length=60, required=False)
    equipment_calibrated_on = serializers.DateField(required=False)
    ride_height_fl_mm = serializers.FloatField(min_value=0, max_value=MAX_RIDE_HEIGHT_MM,
                                               required=False, allow_null=True)
    ride_height_fr_mm = serializers.FloatField(min_value=0, max_value=MAX_RIDE_HEIGHT_MM,
                                               required=False, allow_null=True)
    ride_height_rl_mm = serializers.FloatField(min_value=0, max_value=MAX_RIDE_HEIGHT_MM,
                                               required=False, allow_null=True)
    ride_height_rr_mm = serializers.FloatField(min_value=0, max_value=MAX_RIDE_HEIGHT_MM,
                                               required=False, allow_null=True)
    notes = serializers.CharField(max_length=4000, required=False, allow_blank=True)
    readings = ReadingInputSerializer(many=True, min_length=1, max_length=4, required=False)

    def changes_for(self, original: AlignmentSession) -> dict:
        """Keyword arguments for ``services.session_correct`` besides original/author/reason."""
        d = dict(self.validated_data)
        d.pop("correction_reason")
        if "readings" in d:
            d["readings"] = [dict(r) for r in d["readings"]]
        heights = {}
        for corner, _ in CORNERS:
            field = f"ride_height_{corner.lower()}_mm"
            heights[corner] = d.pop(field) if field in d else getattr(original, field)
        d["ride_heights_mm"] = heights
        return d


class ComponentCheckCreateSerializer(serializers.Serializer):
    client_token = serializers.UUIDField(
        help_text="Made by the tablet once per check; sending it again returns the stored check (200).")
    checked_at = serializers.DateTimeField(validators=[_not_in_future])
    odometer_km = serializers.IntegerField(min_value=0, max_value=MAX_ODOMETER_KM)
    odometer_change_reason = serializers.CharField(max_length=200, required=False, allow_blank=True,
                                                   default="")
    corner = serializers.ChoiceField(choices=CORNERS)
    part = serializers.ChoiceField(choices=PART_CHOICES,
                                   help_text="A catalogue part of the corner's axle.")
    verdict = serializers.ChoiceField(choices=VERDICTS)
    findings = serializers.ListField(child=serializers.ChoiceField(choices=FINDINGS), required=False,
                                     max_length=len(FINDINGS), default=list)
    play_mm = serializers.FloatField(min_value=0, max_value=50, required=False, allow_null=True,
                                     default=None, help_text="Free play of a joint (mm).")
    play_direction = serializers.ChoiceField(choices=PLAY_DIRECTIONS, required=False, allow_blank=True,
                                             default="", help_text="Required with play_mm.")
    play_loading = serializers.ChoiceField(choices=PLAY_LOADING, required=False, allow_blank=True,
                                           default="", help_text="Required with play_mm.")
    deflection_mm = serializers.FloatField(min_value=0, max_value=100, required=False, allow_null=True,
                                           default=None, help_text="Bush deflection (mm).")
    deflection_force_n = serializers.FloatField(
        min_value=0, max_value=MAX_DEFLECTION_FORCE_N, required=False, allow_null=True, default=None,
        help_text="The force (N) the deflection was measured under; required with deflection_mm.")
    defect_category = serializers.ChoiceField(
        choices=DEFECT_CATEGORIES, required=False, allow_blank=True, default="",
        help_text="minor / major / dangerous after the EU roadworthiness directive 2014/45/EU.")
    session = serializers.IntegerField(min_value=1, max_value=MAX_DB_ID, required=False,
                                       allow_null=True, default=None,
                                       help_text="The alignment session of the same vehicle, if any.")
    notes = serializers.CharField(max_length=4000, required=False, allow_blank=True, default="")


# ---------------------------------------------------------------------------- errors (schema only)


class ErrorSerializer(serializers.Serializer):
    detail = serializers.CharField()


class RecordRefSerializer(serializers.Serializer):
    id = serializers.IntegerField()
    etag = serializers.CharField()
    url = serializers.CharField()


class ConflictSerializer(serializers.Serializer):
    detail = serializers.CharField(help_text="What happened and what to do.")
    code = serializers.ChoiceField(choices=[("already_corrected", "already_corrected")])
    newer = RecordRefSerializer(help_text="The correction that replaced the session you sent.")
    latest = RecordRefSerializer(help_text="The current end of the session's correction chain.")


class PreconditionFailedSerializer(serializers.Serializer):
    detail = serializers.CharField()
    current_etag = serializers.CharField()


VALIDATION_ERRORS_SCHEMA = {
    "type": "object",
    "description": "Each refused field with its reasons. Nested fields are named like "
                   "`readings[FL].toe_deg`; `non_field_errors` for the request as a whole.",
    "additionalProperties": {"type": "array", "items": {"type": "string"}},
}
