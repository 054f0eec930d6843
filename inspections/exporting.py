"""A vehicle's records as CSV rows: every session's wheel readings and every component check.

Columns follow the import layout's names where they mean the same (README, "CSV import and
export") and add what only a stored record has: its id, whether it is current or superseded, the
record it corrects and why, who recorded it and when. Superseded records are included: the export
is the full history. Times are ISO 8601 in the workshop's time zone with their UTC offset; angles
in degrees (ISO 8855 signs). Every cell goes through ``fleetsvc.csvsafe``.
"""
from __future__ import annotations

import zoneinfo
from collections.abc import Iterator

from .models import AlignmentSession, ComponentCheck, Vehicle

HEADER = ("record", "visit", "vehicle", "plate", "at", "odometer_km", "odometer_change_reason",
          "kind", "rig_id", "rig_calibrated_on", "corner", "toe_deg", "camber_deg", "caster_deg",
          "sai_deg", "ride_height_mm", "part", "play_mm", "play_direction", "play_loading",
          "deflection_mm", "deflection_force_n", "findings", "verdict", "defect_category", "notes",
          "record_id", "status", "supersedes", "correction_reason", "recorded_by", "stored_at")


def history_rows(vehicle: Vehicle) -> Iterator[list]:
    zone = zoneinfo.ZoneInfo(vehicle.workshop.time_zone)

    def when(value):
        return value.astimezone(zone).isoformat(timespec="seconds") if value else ""

    sessions = (AlignmentSession.objects.filter(vehicle=vehicle).select_related("technician")
                .prefetch_related("readings").order_by("measured_at", "id"))
    superseded = set(AlignmentSession.objects.filter(vehicle=vehicle, supersedes__isnull=False)
                     .values_list("supersedes_id", flat=True))
    for s in sessions:
        for r in s.readings.all():
            yield ["reading", f"session-{s.pk}", vehicle.vin, vehicle.plate, when(s.measured_at),
                   s.odometer_km, s.odometer_change_reason, s.kind, s.equipment_id,
                   s.equipment_calibrated_on.isoformat(), r.corner, r.toe_deg, r.camber_deg,
                   r.caster_deg, r.sai_deg, getattr(s, f"ride_height_{r.corner.lower()}_mm"),
                   "", None, "", "", None, None, "", "", "", s.notes, s.pk,
                   "superseded" if s.pk in superseded else "current", s.supersedes_id,
                   s.correction_reason, s.technician.get_username(), when(s.created_at)]
    checks = (ComponentCheck.objects.filter(vehicle=vehicle).select_related("technician")
              .order_by("checked_at", "id"))
    superseded = set(ComponentCheck.objects.filter(vehicle=vehicle, supersedes__isnull=False)
                     .values_list("supersedes_id", flat=True))
    for c in checks:
        yield ["check", f"session-{c.session_id}" if c.session_id else "", vehicle.vin,
               vehicle.plate, when(c.checked_at), c.odometer_km, c.odometer_change_reason, "", "",
               "", c.corner, None, None, None, None, None, c.part, c.play_mm, c.play_direction,
               c.play_loading, c.deflection_mm, c.deflection_force_n, ";".join(c.findings),
               c.verdict, c.defect_category, c.notes, c.pk,
               "superseded" if c.pk in superseded else "current", c.supersedes_id,
               c.correction_reason, c.technician.get_username(), when(c.created_at)]
