"""Forms of the technician's bay pages: they read what the tablet sends and convert units.

Conversions happen here, at the edge (DESIGN.md §3), through ``analytics.core.units`` — the one
module for units: angles typed as decimal degrees or degrees and minutes (``parse_angle``), toe
typed as linear toe in mm at the platform's reference diameter D (``toe_from_linear``,
x = D·sin θ), odometer typed in miles (``km_from_miles``). What leaves a form is in degrees and km,
ready for ``inspections.services``.

Error keys use the services' names (``odometer_km``, ``readings[FL].toe_deg``,
``checks[0].play_mm``) so the page can show each message beside its field.
"""
from __future__ import annotations

import datetime as dt
import warnings

from django import forms
from django.core.exceptions import ValidationError
from django.utils import timezone
from PIL import Image, UnidentifiedImageError

from analytics.core.units import km_from_miles, parse_angle, toe_from_linear

from .models import AlignmentSession
from .models.catalogue import (
    CORNERS,
    DEFECT_CATEGORIES,
    FINDINGS,
    PART_CHOICES,
    PLAY_DIRECTIONS,
    PLAY_LOADING,
    VERDICTS,
)

PHOTO_MAX_BYTES = 5 * 1024 * 1024
PHOTOS_PER_CHECK = 6
FUTURE_SLACK = dt.timedelta(minutes=10)
TOE_UNITS = [("angle", "angle (° or ° ′)"), ("mm", "linear mm at D")]
ODOMETER_UNITS = [("km", "km"), ("mi", "miles")]


def _text(value) -> str:
    return "" if value is None else str(value).strip()


class SessionHeaderForm(forms.Form):
    """The session's own fields (everything but the wheel readings)."""

    client_token = forms.UUIDField()
    kind = forms.ChoiceField(choices=AlignmentSession.KINDS)
    measured_at = forms.DateTimeField(required=False)
    odometer_km = forms.FloatField(min_value=0, label="odometer")  # typed value; km after clean()
    odometer_unit = forms.ChoiceField(choices=ODOMETER_UNITS, required=False)
    odometer_change_reason = forms.CharField(max_length=200, required=False)
    equipment_id = forms.CharField(max_length=60)
    equipment_calibrated_on = forms.DateField()
    ride_height_fl_mm = forms.FloatField(required=False, min_value=0, max_value=2000)
    ride_height_fr_mm = forms.FloatField(required=False, min_value=0, max_value=2000)
    ride_height_rl_mm = forms.FloatField(required=False, min_value=0, max_value=2000)
    ride_height_rr_mm = forms.FloatField(required=False, min_value=0, max_value=2000)
    notes = forms.CharField(required=False, max_length=4000)

    def clean_measured_at(self):
        value = self.cleaned_data.get("measured_at") or timezone.now()
        if value > timezone.now() + FUTURE_SLACK:
            raise ValidationError("is in the future; check the tablet's clock")
        return value

    def clean(self):
        data = super().clean()
        odometer = data.get("odometer_km")
        if odometer is not None:
            km = km_from_miles(odometer) if data.get("odometer_unit") == "mi" else odometer
            data["odometer_km"] = int(round(km))
        return data

    def service_kwargs(self) -> dict:
        d = self.cleaned_data
        return {
            "client_token": d["client_token"],
            "kind": d["kind"],
            "measured_at": d["measured_at"],
            "odometer_km": d["odometer_km"],
            "odometer_change_reason": d.get("odometer_change_reason") or "",
            "equipment_id": d["equipment_id"],
            "equipment_calibrated_on": d["equipment_calibrated_on"],
            "ride_heights_mm": {c: d.get(f"ride_height_{c.lower()}_mm") for c, _ in CORNERS},
            "notes": d.get("notes") or "",
        }


class CorrectionHeaderForm(SessionHeaderForm):
    correction_reason = forms.CharField(max_length=300)


class ReadingForm(forms.Form):
    """One corner's reading as typed; cleaned values are degrees (ISO 8855 signs)."""

    toe_deg = forms.CharField(required=False)
    toe_unit = forms.ChoiceField(choices=TOE_UNITS, required=False)
    camber_deg = forms.CharField(required=False)
    caster_deg = forms.CharField(required=False)
    sai_deg = forms.CharField(required=False)

    def __init__(self, *args, corner: str, diameter_mm: float, **kwargs):
        super().__init__(*args, **kwargs)
        self.corner = corner
        self.diameter_mm = diameter_mm

    @property
    def is_blank(self) -> bool:
        return not any(_text(self.data.get(k)) for k in ("toe_deg", "camber_deg", "caster_deg",
                                                           "sai_deg"))

    @staticmethod
    def _angle(text: str) -> float | None:
        if not text:
            return None
        try:
            return parse_angle(text)
        except ValueError:
            raise ValidationError(
                f"cannot read {text!r}: type degrees (-0.25) or degrees and minutes (-0°15')"
            ) from None

    def clean_toe_deg(self):
        text = _text(self.cleaned_data.get("toe_deg"))
        if not text:
            return None
        if self.data.get("toe_unit") == "mm":
            try:
                x_mm = float(text.replace("−", "-").replace(",", "."))
            except ValueError:
                raise ValidationError(f"cannot read {text!r} as mm of linear toe") from None
            try:
                return toe_from_linear(x_mm, self.diameter_mm)
            except ValueError as exc:
                raise ValidationError(f"{x_mm} mm at D = {self.diameter_mm:g} mm: {exc}") from None
        return self._angle(text)

    def clean_camber_deg(self):
        return self._angle(_text(self.cleaned_data.get("camber_deg")))

    def clean_caster_deg(self):
        return self._angle(_text(self.cleaned_data.get("caster_deg")))

    def clean_sai_deg(self):
        return self._angle(_text(self.cleaned_data.get("sai_deg")))

    def reading(self) -> dict:
        d = self.cleaned_data
        return {"corner": self.corner, "toe_deg": d.get("toe_deg"), "camber_deg": d.get("camber_deg"),
                "caster_deg": d.get("caster_deg"), "sai_deg": d.get("sai_deg")}


class ComponentCheckForm(forms.Form):
    """One catalogue part at one corner: play (and how), deflection (and under what force)."""

    part = forms.ChoiceField(choices=PART_CHOICES)
    corner = forms.ChoiceField(choices=CORNERS)
    play_mm = forms.FloatField(required=False, min_value=0, max_value=50)
    play_direction = forms.ChoiceField(choices=[("", "—"), *PLAY_DIRECTIONS], required=False)
    play_loading = forms.ChoiceField(choices=[("", "—"), *PLAY_LOADING], required=False)
    deflection_mm = forms.FloatField(required=False, min_value=0, max_value=100)
    deflection_force_n = forms.FloatField(required=False, min_value=0)
    findings = forms.MultipleChoiceField(choices=FINDINGS, required=False)
    verdict = forms.ChoiceField(choices=VERDICTS)
    defect_category = forms.ChoiceField(choices=DEFECT_CATEGORIES, required=False)
    notes = forms.CharField(required=False, max_length=2000)

    def service_kwargs(self) -> dict:
        d = self.cleaned_data
        return {
            "part": d["part"], "corner": d["corner"], "play_mm": d.get("play_mm"),
            "play_direction": d.get("play_direction") or "",
            "play_loading": d.get("play_loading") or "",
            "deflection_mm": d.get("deflection_mm"),
            "deflection_force_n": d.get("deflection_force_n"),
            "findings": d.get("findings") or [], "verdict": d["verdict"],
            "defect_category": d.get("defect_category") or "", "notes": d.get("notes") or "",
        }


def validate_photos(files) -> list:
    """Photos of one check: at most six, each an image Pillow can verify, at most 5 MB."""
    files = list(files)
    if len(files) > PHOTOS_PER_CHECK:
        raise ValidationError(f"at most {PHOTOS_PER_CHECK} photos per check, got {len(files)}")
    for upload in files:
        if upload.size > PHOTO_MAX_BYTES:
            raise ValidationError(
                f"{upload.name} is {upload.size / 1e6:.1f} MB; the limit is 5 MB per photo")
        try:
            upload.seek(0)
            with warnings.catch_warnings():
                # A header claiming more pixels than Pillow's limit is a decompression bomb.
                warnings.simplefilter("error", Image.DecompressionBombWarning)
                with Image.open(upload) as image:
                    image.verify()
        except (Image.DecompressionBombError, Image.DecompressionBombWarning):
            raise ValidationError(f"{upload.name} claims too many pixels to be a photo") from None
        except (UnidentifiedImageError, OSError, SyntaxError, ValueError):
            raise ValidationError(f"{upload.name} is not a readable image") from None
        finally:
            upload.seek(0)
    return files


def error_dict(form: forms.Form, prefix: str = "", rename: dict | None = None) -> dict[str, str]:
    """A form's errors as ``{prefixed field name: first message}``."""
    rename = rename or {}
    out = {}
    for field, messages in form.errors.items():
        name = rename.get(field, field)
        key = "__all__" if field == "__all__" and not prefix else f"{prefix}{name}"
        out[key] = "; ".join(str(m) for m in messages)
    return out
