"""Writes to inspection records. Keyword-only, typed, atomic, fully validated.

Refusals raise ``django.core.exceptions.ValidationError`` with a dict naming each field and the
reason; nothing is written when any check fails. Submits are idempotent by ``client_token``: a
repeated submit from a tablet returns the record already stored.
"""
from __future__ import annotations

import datetime as dt
import math
import uuid
from collections.abc import Iterable, Mapping

from django.core.exceptions import ValidationError
from django.db import IntegrityError, transaction
from django.db.models import Max

from . import audit
from .models import (
    PARTS_BY_CODE,
    AlignmentSession,
    ComponentCheck,
    ComponentPhoto,
    ServiceEvent,
    Vehicle,
    WheelReading,
)
from .models.catalogue import CORNER_AXLE, FINDING_CODES, VERDICTS
from .models.records import CAMBER_LIMIT_DEG, CASTER_LIMIT_DEG, SAI_LIMIT_DEG, TOE_LIMIT_DEG
from .signals import record_submitted

CHECK_TOKEN_NAMESPACE = uuid.UUID("6f1c2d0e-5b7a-4c89-9a53-0d2f1e6b7c41")

READING_RANGES = {
    "toe_deg": TOE_LIMIT_DEG,
    "camber_deg": CAMBER_LIMIT_DEG,
    "caster_deg": CASTER_LIMIT_DEG,
    "sai_deg": SAI_LIMIT_DEG,
}


def last_odometer_km(vehicle: Vehicle) -> int | None:
    """The highest odometer of the vehicle's current sessions, checks and service events."""
    values = [
        AlignmentSession.objects.filter(vehicle=vehicle).current()
        .aggregate(m=Max("odometer_km"))["m"],
        ComponentCheck.objects.filter(vehicle=vehicle).current()
        .aggregate(m=Max("odometer_km"))["m"],
        ServiceEvent.objects.filter(vehicle=vehicle).aggregate(m=Max("odometer_km"))["m"],
    ]
    values = [v for v in values if v is not None]
    return max(values) if values else None


def _check_odometer(errors: dict, vehicle: Vehicle, odometer_km: int, change_reason: str,
                    *, ignore_upto: int | None = None) -> None:
    if odometer_km is None or odometer_km < 0:
        errors["odometer_km"] = "must be a whole number of km, 0 or more"
        return
    last = last_odometer_km(vehicle)
    if ignore_upto is not None and last == ignore_upto:
        return
    if last is not None and odometer_km < last and not change_reason.strip():
        errors["odometer_km"] = (
            f"{odometer_km} km is lower than the vehicle's last recorded {last} km; "
            "mark it as an odometer change and give the reason")


def _finite(value) -> bool:
    return isinstance(value, int | float) and math.isfinite(value)


def _validate_readings(readings: Iterable[Mapping], errors: dict) -> list[dict]:
    clean: list[dict] = []
    seen: set[str] = set()
    for i, raw in enumerate(readings):
        corner = raw.get("corner")
        where = f"readings[{corner or i}]"
        if corner not in CORNER_AXLE:
            errors[f"{where}.corner"] = f"must be one of FL, FR, RL, RR, got {corner!r}"
            continue
        if corner in seen:
            errors[f"{where}.corner"] = "a session holds one reading per corner"
            continue
        seen.add(corner)
        row = {"corner": corner}
        for field, limit in READING_RANGES.items():
            value = raw.get(field)
            required = field in {"toe_deg", "camber_deg"}
            if value is None or value == "":
                if required:
                    errors[f"{where}.{field}"] = "is required"
                row[field] = None
                continue
            if not _finite(value):
                errors[f"{where}.{field}"] = f"must be a finite number, got {value!r}"
                continue
            if abs(value) > limit:
                errors[f"{where}.{field}"] = (
                    f"{value}° is outside the physical range −{limit}° … +{limit}°")
                continue
            row[field] = float(value)
        if row.get("caster_deg") is not None and CORNER_AXLE[corner] != "front":
            errors[f"{where}.caster_deg"] = (
                "caster is measured on the steered (front) axle only; leave it blank for "
                f"{corner}")
        clean.append(row)
    if not clean and not errors:
        errors["readings"] = "at least one corner's reading is needed"
    return clean


@transaction.atomic
def session_submit(
    *,
    vehicle: Vehicle,
    technician,
    measured_at: dt.datetime,
    odometer_km: int,
    kind: str,
    equipment_id: str,
    equipment_calibrated_on: dt.date,
    readings: Iterable[Mapping],
    odometer_change_reason: str = "",
    ride_heights_mm: Mapping[str, float | None] | None = None,
    notes: str = "",
    client_token: uuid.UUID | None = None,
    supersedes: AlignmentSession | None = None,
    correction_reason: str = "",
) -> AlignmentSession:
    """Store an alignment session with its wheel readings (degrees, ISO 8855 signs)."""
    if client_token is not None:
        existing = AlignmentSession.objects.filter(client_token=client_token).first()
        if existing is not None:
            return existing
    errors: dict[str, str] = {}
    if kind not in dict(AlignmentSession.KINDS):
        errors["kind"] = "must be 'as_found' or 'as_adjusted'"
    if not (equipment_id or "").strip():
        errors["equipment_id"] = "is required (the alignment rig's id)"
    if equipment_calibrated_on is None:
        errors["equipment_calibrated_on"] = "is required"
    elif measured_at and equipment_calibrated_on > measured_at.date():
        errors["equipment_calibrated_on"] = "cannot be after the session date"
    if measured_at is None:
        errors["measured_at"] = "is required"
    elif measured_at.tzinfo is None:
        errors["measured_at"] = "needs a time zone"
    _check_odometer(errors, vehicle, odometer_km, odometer_change_reason,
                    ignore_upto=supersedes.odometer_km if supersedes else None)
    clean = _validate_readings(readings, errors)
    if supersedes is not None:
        if supersedes.vehicle_id != vehicle.pk:
            errors["supersedes"] = "a correction must be for the same vehicle"
        elif supersedes.is_superseded:
            errors["supersedes"] = "this session has already been corrected; correct the latest"
        if not correction_reason.strip():
            errors["correction_reason"] = "a correction needs a reason"
    if errors:
        raise ValidationError(errors)
    heights = ride_heights_mm or {}
    try:
        with transaction.atomic():
            session = AlignmentSession.objects.create(
                vehicle=vehicle, workshop=vehicle.workshop, technician=technician,
                measured_at=measured_at, odometer_km=odometer_km,
                odometer_change_reason=odometer_change_reason.strip(), kind=kind,
                equipment_id=equipment_id.strip(), equipment_calibrated_on=equipment_calibrated_on,
                ride_height_fl_mm=heights.get("FL"), ride_height_fr_mm=heights.get("FR"),
                ride_height_rl_mm=heights.get("RL"), ride_height_rr_mm=heights.get("RR"),
                notes=notes, supersedes=supersedes, correction_reason=correction_reason.strip(),
                client_token=client_token or uuid.uuid4(),
            )
            WheelReading.objects.bulk_create(WheelReading(session=session, **r) for r in clean)
    except IntegrityError:
        # A concurrent submit with the same token won the race: return its record.
        existing = AlignmentSession.objects.filter(client_token=client_token).first()
        if existing is None:
            raise
        return existing
    audit.record_created(session, actor=technician)
    record_submitted.send(sender=AlignmentSession, record=session, vehicle=vehicle)
    return session


def session_correct(*, original: AlignmentSession, author, reason: str, **changes) -> AlignmentSession:
    """Record a correction of ``original``: a new session with the changed values."""
    values = {
        "measured_at": original.measured_at,
        "odometer_km": original.odometer_km,
        "kind": original.kind,
        "equipment_id": original.equipment_id,
        "equipment_calibrated_on": original.equipment_calibrated_on,
        "odometer_change_reason": original.odometer_change_reason,
        "notes": original.notes,
        "ride_heights_mm": {c: getattr(original, f"ride_height_{c.lower()}_mm")
                            for c in ("FL", "FR", "RL", "RR")},
        "readings": [
            {k: getattr(r, k) for k in ("corner", "toe_deg", "camber_deg", "caster_deg", "sai_deg")}
            for r in original.readings.all()
        ],
    }
    values.update(changes)
    return session_submit(vehicle=original.vehicle, technician=author, supersedes=original,
                          correction_reason=reason, **values)


@transaction.atomic
def component_check_submit(
    *,
    vehicle: Vehicle,
    technician,
    checked_at: dt.datetime,
    odometer_km: int,
    corner: str,
    part: str,
    verdict: str,
    findings: Iterable[str] = (),
    play_mm: float | None = None,
    play_direction: str = "",
    play_loading: str = "",
    deflection_mm: float | None = None,
    deflection_force_n: float | None = None,
    defect_category: str = "",
    session: AlignmentSession | None = None,
    odometer_change_reason: str = "",
    notes: str = "",
    client_token: uuid.UUID | None = None,
    supersedes: ComponentCheck | None = None,
    correction_reason: str = "",
) -> ComponentCheck:
    """Store a component check of one catalogue part (play mm, deflection mm under force N)."""
    if client_token is not None:
        existing = ComponentCheck.objects.filter(client_token=client_token).first()
        if existing is not None:
            return existing
    errors: dict[str, str] = {}
    spec = PARTS_BY_CODE.get(part)
    if spec is None:
        errors["part"] = f"unknown part {part!r}; choose one from the catalogue"
    elif corner not in CORNER_AXLE:
        errors["corner"] = f"must be one of FL, FR, RL, RR, got {corner!r}"
    elif CORNER_AXLE[corner] != spec.axle:
        errors["corner"] = f"{spec.label} is a {spec.axle}-axle part; {corner} is not"
    if verdict not in dict(VERDICTS):
        errors["verdict"] = "choose a verdict from the list"
    if defect_category not in {"", "minor", "major", "dangerous"}:
        errors["defect_category"] = "must be minor, major or dangerous (2014/45/EU), or blank"
    findings = list(findings)
    bad = [f for f in findings if f not in FINDING_CODES]
    if bad:
        errors["findings"] = f"unknown finding(s): {', '.join(map(str, bad))}"
    if "none" in findings and len(findings) > 1:
        errors["findings"] = "'no finding' cannot be combined with other findings"
    if play_mm is not None:
        if not _finite(play_mm) or not 0 <= play_mm <= 50:
            errors["play_mm"] = f"{play_mm!r} mm is outside 0 … 50 mm"
        if play_direction not in {"axial", "radial"}:
            errors["play_direction"] = "say how the play was measured: axial or radial"
        if play_loading not in {"loaded", "unloaded"}:
            errors["play_loading"] = "say whether the joint was loaded or unloaded"
    if deflection_mm is not None:
        if not _finite(deflection_mm) or not 0 <= deflection_mm <= 100:
            errors["deflection_mm"] = f"{deflection_mm!r} mm is outside 0 … 100 mm"
        if deflection_force_n is None or not _finite(deflection_force_n) or deflection_force_n <= 0:
            errors["deflection_force_n"] = "a deflection needs the force it was measured under (N > 0)"
    if checked_at is None or checked_at.tzinfo is None:
        errors["checked_at"] = "is required, with a time zone"
    _check_odometer(errors, vehicle, odometer_km, odometer_change_reason,
                    ignore_upto=supersedes.odometer_km if supersedes else None)
    if session is not None and session.vehicle_id != vehicle.pk:
        errors["session"] = "belongs to another vehicle"
    if supersedes is not None:
        if supersedes.vehicle_id != vehicle.pk:
            errors["supersedes"] = "a correction must be for the same vehicle"
        elif supersedes.is_superseded:
            errors["supersedes"] = "this check has already been corrected; correct the latest"
        if not correction_reason.strip():
            errors["correction_reason"] = "a correction needs a reason"
    if errors:
        raise ValidationError(errors)
    check = ComponentCheck.objects.create(
        vehicle=vehicle, workshop=vehicle.workshop, technician=technician, session=session,
        checked_at=checked_at, odometer_km=odometer_km,
        odometer_change_reason=odometer_change_reason.strip(), corner=corner, part=part,
        play_mm=play_mm, play_direction=play_direction if play_mm is not None else "",
        play_loading=play_loading if play_mm is not None else "",
        deflection_mm=deflection_mm,
        deflection_force_n=deflection_force_n if deflection_mm is not None else None,
        findings=findings or ["none"], verdict=verdict, defect_category=defect_category,
        notes=notes, supersedes=supersedes, correction_reason=correction_reason.strip(),
        client_token=client_token or uuid.uuid4(),
    )
    audit.record_created(check, actor=technician)
    record_submitted.send(sender=ComponentCheck, record=check, vehicle=vehicle)
    return check


@transaction.atomic
def service_event_record(
    *,
    vehicle: Vehicle,
    recorded_by,
    performed_at: dt.datetime,
    odometer_km: int,
    kind: str,
    corner: str = "",
    part: str = "",
    reason: str = "",
    notes: str = "",
    odometer_change_reason: str = "",
    client_token: uuid.UUID | None = None,
) -> ServiceEvent:
    """Store a service event: an alignment adjusted, or a part replaced (failed/preventive)."""
    if client_token is not None:
        existing = ServiceEvent.objects.filter(client_token=client_token).first()
        if existing is not None:
            return existing
    errors: dict[str, str] = {}
    if kind not in dict(ServiceEvent.KINDS):
        errors["kind"] = "must be 'alignment_adjusted' or 'part_replaced'"
    if kind == "part_replaced":
        spec = PARTS_BY_CODE.get(part)
        if spec is None:
            errors["part"] = "name the replaced part from the catalogue"
        elif CORNER_AXLE.get(corner) != spec.axle:
            errors["corner"] = f"{spec.label} sits on the {spec.axle} axle"
        if reason not in {"failed", "preventive"}:
            errors["reason"] = "say whether the part failed or was replaced preventively"
    _check_odometer(errors, vehicle, odometer_km, odometer_change_reason)
    if errors:
        raise ValidationError(errors)
    event = ServiceEvent.objects.create(
        vehicle=vehicle, workshop=vehicle.workshop, recorded_by=recorded_by,
        performed_at=performed_at, odometer_km=odometer_km, kind=kind, corner=corner, part=part,
        reason=reason, notes=notes, client_token=client_token or uuid.uuid4())
    audit.record_created(event, actor=recorded_by)
    record_submitted.send(sender=ServiceEvent, record=event, vehicle=vehicle)
    return event


def session_with_checks_submit(*, vehicle: Vehicle, technician, session_kwargs: dict,
                               readings: list, checks: list) -> AlignmentSession:
    """Store a session with its component checks and their photos, all or nothing.

    A repeated ``client_token`` returns the stored session and stores nothing more; each check's
    token is the one the tablet sent, else derived from the session's, so a resend of the checks
    is de-duplicated by ``component_check_submit`` as well.
    """
    token = session_kwargs["client_token"]
    existing = AlignmentSession.objects.filter(client_token=token).first()
    if existing is not None:
        return existing
    try:
        with transaction.atomic():
            session = session_submit(vehicle=vehicle, technician=technician,
                                               readings=readings, **session_kwargs)
            for i, (check_kwargs, photos, check_token) in enumerate(checks):
                check_token = check_token or uuid.uuid5(CHECK_TOKEN_NAMESPACE, f"{token}:{i}")
                if ComponentCheck.objects.filter(client_token=check_token).exists():
                    continue
                try:
                    check = component_check_submit(
                        vehicle=vehicle, technician=technician, session=session,
                        checked_at=session.measured_at, odometer_km=session.odometer_km,
                        odometer_change_reason=session.odometer_change_reason,
                        client_token=check_token, **check_kwargs)
                except ValidationError as exc:
                    raise ValidationError({f"checks[{i}].{k}": v
                                           for k, v in exc.message_dict.items()}) from None
                for upload in photos:
                    ComponentPhoto.objects.create(check_record=check, image=upload)
    except IntegrityError:
        # The same submit raced itself (two tabs, a resend): the first one's record stands.
        existing = AlignmentSession.objects.filter(client_token=token).first()
        if existing is None:
            raise
        return existing
    return session
