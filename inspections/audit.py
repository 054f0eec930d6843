"""Writing and reading the audit trail (``inspections.models.AuditEntry``).

Writes: the services call :func:`record_created` inside their transaction for every session,
component check and service event they store (a correction is recorded as ``corrected`` with its
reason and the values it changed); the importer calls :func:`record_import` once per committed
file. A caller that is not a person at a page — the CSV importer, the REST API — says where the
change came from with :func:`channel`, and every entry written inside it carries that::

    with audit.channel("api", client="tablet 7"):
        services.session_submit(...)

Reads: :func:`vehicle_history` gives a vehicle's record chains (original first, each correction
after it, with who / when / why) and its entries, for the managers' history page.
"""
from __future__ import annotations

import contextlib
import contextvars
import datetime as dt
import zoneinfo
from collections.abc import Iterator

from django.db.models import Model, QuerySet

from .models import AlignmentSession, AuditEntry, ComponentCheck, ServiceEvent, Vehicle

_channel: contextvars.ContextVar[dict | None] = contextvars.ContextVar("audit_channel", default=None)

OBJECT_TYPES = {
    AlignmentSession: "alignment_session",
    ComponentCheck: "component_check",
    ServiceEvent: "service_event",
}
SESSION_FIELDS = ("measured_at", "odometer_km", "odometer_change_reason", "kind", "equipment_id",
                  "equipment_calibrated_on", "ride_height_fl_mm", "ride_height_fr_mm",
                  "ride_height_rl_mm", "ride_height_rr_mm", "notes")
READING_FIELDS = ("toe_deg", "camber_deg", "caster_deg", "sai_deg")
CHECK_FIELDS = ("checked_at", "odometer_km", "odometer_change_reason", "corner", "part", "play_mm",
                "play_direction", "play_loading", "deflection_mm", "deflection_force_n",
                "findings", "verdict", "defect_category", "notes", "session_id")
EVENT_FIELDS = ("performed_at", "odometer_km", "kind", "corner", "part", "reason", "notes")


@contextlib.contextmanager
def channel(source: str, **extra) -> Iterator[None]:
    """Mark every entry written inside the block as coming from ``source`` (``import``, ``api``)."""
    token = _channel.set({"source": source, **extra})
    try:
        yield
    finally:
        _channel.reset(token)


def _plain(value):
    if isinstance(value, dt.datetime | dt.date):
        return value.isoformat()
    return value


def snapshot(record: Model) -> dict:
    """The record's values as JSON-ready data (readings keyed by corner for a session)."""
    if isinstance(record, AlignmentSession):
        out = {f: _plain(getattr(record, f)) for f in SESSION_FIELDS}
        out["readings"] = {r.corner: {f: getattr(r, f) for f in READING_FIELDS}
                           for r in record.readings.all()}
        return out
    if isinstance(record, ComponentCheck):
        return {f: _plain(getattr(record, f)) for f in CHECK_FIELDS}
    if isinstance(record, ServiceEvent):
        return {f: _plain(getattr(record, f)) for f in EVENT_FIELDS}
    raise TypeError(f"no audit snapshot for {type(record).__name__}")


def changes(before: dict, after: dict) -> dict:
    """``{field: [old, new]}`` of what differs (readings as ``readings.FL.toe_deg``)."""
    out = {}
    for key in sorted(set(before) | set(after)):
        old, new = before.get(key), after.get(key)
        if key == "readings":
            for corner in sorted(set(old or {}) | set(new or {})):
                a, b = (old or {}).get(corner) or {}, (new or {}).get(corner) or {}
                for f in READING_FIELDS:
                    if a.get(f) != b.get(f):
                        out[f"readings.{corner}.{f}"] = [a.get(f), b.get(f)]
        elif old != new:
            out[key] = [old, new]
    return out


def record_created(record: Model, *, actor) -> AuditEntry:
    """The entry of a record just stored; call it inside the service's transaction."""
    values = snapshot(record)
    details = {"values": values, "client_token": str(record.client_token)}
    if _channel.get():
        details["channel"] = _channel.get()
    original = getattr(record, "supersedes", None)
    if original is not None:
        details["supersedes"] = original.pk
        details["changed"] = changes(snapshot(original), values)
    return AuditEntry.objects.create(
        actor=actor, action=AuditEntry.Action.CORRECTED if original else AuditEntry.Action.CREATED,
        object_type=OBJECT_TYPES[type(record)], object_id=record.pk, vehicle_id=record.vehicle_id,
        reason=getattr(record, "correction_reason", "") or "", details=details)


def demo_entries_delete() -> int:
    """Remove the entries of demo vehicles — only for the demo reset, before its vehicles go.

    The one deletion the trail allows (the PostgreSQL trigger lets exactly these rows go).
    """
    demo = AuditEntry.objects.filter(vehicle__is_demo=True)
    deleted, _ = QuerySet.delete(demo)
    return deleted


def record_import(*, actor, filename: str, summary: dict) -> AuditEntry:
    """One entry per committed import file: its name, digest and what it added."""
    return AuditEntry.objects.create(
        actor=actor, action=AuditEntry.Action.IMPORTED, object_type="import", object_id=None,
        vehicle=None, reason=f"CSV import of {filename}"[:300], details=summary)


def _fmt(value, zone) -> str:
    if isinstance(value, dt.datetime):
        return value.astimezone(zone).strftime("%Y-%m-%d %H:%M %Z")
    if value is None or value == "" or value == []:
        return "—"
    if isinstance(value, float):
        return f"{value:+.3f}" if abs(value) < 100 else f"{value:g}"
    if isinstance(value, list):
        return ", ".join(map(str, value))
    return str(value)


def _session_fields(session: AlignmentSession) -> list[tuple[str, object]]:
    readings = {r.corner: r for r in session.readings.all()}
    rows = [("measured at", session.measured_at), ("odometer km", session.odometer_km),
            ("odometer change reason", session.odometer_change_reason), ("kind", session.kind),
            ("rig", session.equipment_id), ("rig calibrated on", session.equipment_calibrated_on)]
    for corner in ("FL", "FR", "RL", "RR"):
        r = readings.get(corner)
        for f in READING_FIELDS:
            if f == "caster_deg" and corner.startswith("R"):
                continue
            rows.append((f"{corner} {f.removesuffix('_deg')} °", getattr(r, f) if r else None))
    rows.append(("notes", session.notes))
    return rows


def _check_fields(check: ComponentCheck) -> list[tuple[str, object]]:
    return [("checked at", check.checked_at), ("odometer km", check.odometer_km),
            ("corner", check.corner), ("part", check.get_part_display()),
            ("play mm", check.play_mm), ("play measured", " ".join(
                x for x in (check.play_direction, check.play_loading) if x)),
            ("deflection mm", check.deflection_mm), ("under force N", check.deflection_force_n),
            ("findings", check.findings), ("verdict", check.get_verdict_display()),
            ("defect category", check.defect_category), ("notes", check.notes)]


def _side_by_side(chain: list, fields, by_object: dict, object_type: str, zone) -> dict:
    """One chain as columns (original, then each correction) and rows (the record's values)."""
    versions = [{"record": r, "entry": by_object.get((object_type, r.pk)),
                 "is_current": i == len(chain) - 1} for i, r in enumerate(chain)]
    columns = [fields(r) for r in chain]
    rows = []
    for i, (label, _) in enumerate(columns[0]):
        cells, previous = [], None
        for j, column in enumerate(columns):
            text = _fmt(column[i][1], zone)
            cells.append({"text": text, "changed": j > 0 and text != previous})
            previous = text
        rows.append({"label": label, "cells": cells, "changed": any(c["changed"] for c in cells)})
    return {"versions": versions, "rows": rows, "corrected": len(chain) > 1}


def _chains(records) -> list[list]:
    records = list(records)
    newer = {r.supersedes_id: r for r in records if r.supersedes_id}
    out = []
    for first in (r for r in records if r.supersedes_id is None):
        chain, node = [], first
        while node is not None:
            chain.append(node)
            node = newer.get(node.pk)
        out.append(chain)
    return out


def vehicle_history(vehicle: Vehicle) -> dict:
    """A vehicle's record chains side by side and its audit entries, for the managers' page.

    ``sessions`` / ``checks``: one item per chain (a record and its corrections), each with
    ``versions`` (the records, original first, with their audit entry: who, when, why) and
    ``rows`` (label and one cell per version, ``changed`` where it differs from the version
    before). ``entries``: every audit entry of the vehicle, newest first.
    """
    entries = list(AuditEntry.objects.filter(vehicle=vehicle).select_related("actor")
                   .order_by("-at", "-id"))
    by_object = {(e.object_type, e.object_id): e for e in entries}
    zone = zoneinfo.ZoneInfo(vehicle.workshop.time_zone)
    sessions = (AlignmentSession.objects.filter(vehicle=vehicle).select_related("technician")
                .prefetch_related("readings").order_by("measured_at", "id"))
    checks = (ComponentCheck.objects.filter(vehicle=vehicle).select_related("technician")
              .order_by("checked_at", "id"))
    return {
        "sessions": [_side_by_side(c, _session_fields, by_object, "alignment_session", zone)
                     for c in _chains(sessions)],
        "checks": [_side_by_side(c, _check_fields, by_object, "component_check", zone)
                   for c in _chains(checks)],
        "entries": entries,
    }
