"""JSON endpoints the bay form posts to (fetch with the CSRF token; multipart when photos ride along).

Request: ``application/json`` body, or ``multipart/form-data`` with the JSON in a ``payload`` field
and each check's photos in file fields named ``checks[<i>].photos``. The payload::

    {"client_token": UUID, "kind": "as_found", "measured_at": ISO 8601, "odometer_km": "12 345",
     "odometer_unit": "km" | "mi", "odometer_change_reason": "", "equipment_id": "RIG-7",
     "equipment_calibrated_on": "2026-01-10", "ride_height_fl_mm": "", …, "notes": "",
     "readings": {"FL": {"toe_deg": "0°06'", "toe_unit": "angle" | "mm", "camber_deg": "-0.5",
                         "caster_deg": "", "sai_deg": ""}, …},
     "checks": [{"client_token": UUID, "part": "…", "corner": "FL", "play_mm": "", …}]}

Answers: ``200 {"ok": true, "session_id": N, "url": …}``; ``400 {"ok": false, "errors":
{field: message}}`` with nothing stored; ``401`` when signed out (the tablet keeps the submit);
``404`` for a vehicle or session the user may not record on. The same ``client_token`` sent again
answers with the session already stored and stores nothing more.
"""
from __future__ import annotations

import json
import uuid

from django.core.exceptions import (
    BadRequest,
    RequestDataTooBig,
    TooManyFilesSent,
    ValidationError,
)
from django.http import Http404, JsonResponse
from django.urls import reverse
from django.views.decorators.http import require_POST

from inspections import services
from inspections.forms import (
    ComponentCheckForm,
    CorrectionHeaderForm,
    ReadingForm,
    SessionHeaderForm,
    error_dict,
    validate_photos,
)
from inspections.models import AlignmentSession, Vehicle
from inspections.scoping import can_record, get_visible_or_404


class Refused(Exception):
    def __init__(self, errors: dict[str, str], status: int = 400):
        super().__init__(errors)
        self.errors, self.status = errors, status


def _json_view(func):
    """Signed-out → 401 JSON (not a redirect a fetch would follow); refusals → their status."""
    def wrapper(request, *args, **kwargs):
        if not request.user.is_authenticated:
            return JsonResponse({"ok": False, "signin": reverse("login"),
                                 "errors": {"__all__": "signed out; sign in again to send"}},
                                status=401)
        try:
            return func(request, *args, **kwargs)
        except Refused as exc:
            return JsonResponse({"ok": False, "errors": exc.errors}, status=exc.status)
        except Http404:
            return JsonResponse({"ok": False, "errors": {"__all__": "not found"}}, status=404)
    wrapper.__name__ = func.__name__
    wrapper.__doc__ = func.__doc__
    return require_POST(wrapper)


def recordable_vehicle(user, pk: int) -> Vehicle:
    """The vehicle if ``user`` may record on it, else 404 (the same answer as a missing id)."""
    if not can_record(user):
        raise Http404("not found")
    return get_visible_or_404(Vehicle.objects.select_related("platform", "workshop"), user,
                              prefix="", pk=pk)


def _payload(request) -> dict:
    try:
        if request.content_type == "application/json":
            data = json.loads(request.body or b"{}")
        else:
            data = json.loads(request.POST.get("payload") or "{}")
    except (ValueError, UnicodeDecodeError):
        raise Refused({"__all__": "the submit could not be read (malformed JSON)"}) from None
    except TooManyFilesSent:
        raise Refused({"__all__": "too many photos in one submit"}) from None
    except RequestDataTooBig:
        raise Refused({"__all__": "the submit is too large"}, status=413) from None
    if not isinstance(data, dict):
        raise Refused({"__all__": "the submit must be a JSON object"})
    return data


def _files(request, name: str) -> list:
    try:
        return request.FILES.getlist(name)
    except TooManyFilesSent:
        raise Refused({"__all__": "too many photos in one submit"}) from None
    except BadRequest as exc:
        raise Refused({"__all__": str(exc)}) from None


def _service_errors(exc: ValidationError, prefix: str = "") -> dict[str, str]:
    if hasattr(exc, "error_dict"):
        return {f"{prefix}{k}" if k != "__all__" or prefix else k: "; ".join(v)
                for k, v in exc.message_dict.items()}
    return {f"{prefix}__all__" if prefix else "__all__": "; ".join(exc.messages)}


def read_session(data: dict, vehicle: Vehicle, header_cls=SessionHeaderForm):
    """Validate the header and readings; returns (header form, readings) or raises Refused."""
    errors: dict[str, str] = {}
    header = header_cls(data=data)
    if not header.is_valid():
        errors.update(error_dict(header))
    raw_readings = data.get("readings") or {}
    if not isinstance(raw_readings, dict):
        raise Refused({"readings": "must map corners (FL, FR, RL, RR) to values"})
    readings = []
    for corner in ("FL", "FR", "RL", "RR"):
        row = raw_readings.get(corner) or {}
        if not isinstance(row, dict):
            errors[f"readings[{corner}]"] = "must be an object of values"
            continue
        form = ReadingForm(data=row, corner=corner, diameter_mm=vehicle.platform.reference_diameter_mm)
        if form.is_blank:
            continue
        if form.is_valid():
            readings.append(form.reading())
        else:
            errors.update(error_dict(form, prefix=f"readings[{corner}]."))
    if not readings and not any(k.startswith("readings[") for k in errors):
        errors["readings"] = "enter at least one corner's toe and camber"
    if errors:
        raise Refused(errors)
    return header, readings


def read_checks(request, data: dict) -> list[tuple[dict, list]]:
    raw = data.get("checks") or []
    if not isinstance(raw, list):
        raise Refused({"checks": "must be a list"})
    errors: dict[str, str] = {}
    out = []
    for i, row in enumerate(raw):
        if not isinstance(row, dict):
            errors[f"checks[{i}]"] = "must be an object of values"
            continue
        form = ComponentCheckForm(data=row)
        photos = _files(request, f"checks[{i}].photos")
        try:
            photos = validate_photos(photos)
        except ValidationError as exc:
            errors[f"checks[{i}].photos"] = "; ".join(exc.messages)
        if not form.is_valid():
            errors.update(error_dict(form, prefix=f"checks[{i}]."))
            continue
        try:
            token = uuid.UUID(str(row.get("client_token")))
        except ValueError:
            token = None
        out.append((form.service_kwargs(), photos, token))
    if errors:
        raise Refused(errors)
    return out


def _ok(session: AlignmentSession) -> JsonResponse:
    return JsonResponse({"ok": True, "session_id": session.pk,
                         "url": reverse("bay_session", args=[session.pk])})


@_json_view
def session_submit(request, pk: int):
    """POST a new session (with component checks) for vehicle ``pk``."""
    vehicle = recordable_vehicle(request.user, pk)
    data = _payload(request)
    header, readings = read_session(data, vehicle)
    checks = read_checks(request, data)
    try:
        session = services.session_with_checks_submit(vehicle=vehicle, technician=request.user,
                                       session_kwargs=header.service_kwargs(), readings=readings,
                                       checks=checks)
    except ValidationError as exc:
        raise Refused(_service_errors(exc)) from None
    return _ok(session)


@_json_view
def session_correct(request, pk: int):
    """POST a correction of session ``pk``: the changed values and the reason."""
    if not can_record(request.user):
        raise Http404("not found")
    original = get_visible_or_404(AlignmentSession.objects.select_related("vehicle__platform"),
                                  request.user, prefix="vehicle__", pk=pk)
    data = _payload(request)
    header, readings = read_session(data, original.vehicle, header_cls=CorrectionHeaderForm)
    kwargs = header.service_kwargs()
    existing = AlignmentSession.objects.filter(client_token=kwargs["client_token"]).first()
    if existing is not None:
        return _ok(existing)
    try:
        session = services.session_correct(
            original=original, author=request.user,
            reason=header.cleaned_data["correction_reason"], readings=readings, **kwargs)
    except ValidationError as exc:
        raise Refused(_service_errors(exc)) from None
    return _ok(session)
