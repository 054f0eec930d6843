"""CSV import of alignment sessions and component checks (the layout is fleetsvc's own; README).

One row per wheel reading or per component check; the ``record`` column says which
(``reading`` / ``check``). Reading rows of one alignment session share a ``visit`` key chosen by
whoever writes the file, and repeat the session's columns (vehicle, time, odometer, kind, rig)
on every row. A check row may name a visit to belong to that session.

Guarantees:

- **All or nothing.** The whole file is read and checked first; then every record goes through
  ``inspections.services`` in one transaction. One refused row — in either step — stores nothing.
- **Every problem named.** :class:`ImportRefused` carries a list of :class:`Problem` (row, column,
  reason); rows are numbered as a spreadsheet shows them (the header is row 1). Bytes that are not
  UTF-8 are reported per row and column; a byte-order mark is read and dropped.
- **Re-import adds nothing.** Each record's ``client_token`` is a UUID 5 of the vehicle's workshop,
  the vehicle and the row's key (visit and time for a session; time, corner and part for a check),
  so the services return the record already stored. A row whose key was imported before with
  other values is refused: a stored record changes only through a correction, with a reason.
- **Only what the importer may touch.** Technicians and workshop managers import for the vehicles
  their workshop maintains, administrators for any; any other vehicle is "not found", the same
  answer as a VIN that does not exist.
- **Bounded.** At most :data:`MAX_ROWS` data rows (:data:`PAGE_MAX_ROWS` through the upload
  page) and :data:`MAX_FILE_BYTES` bytes.

Units: angles in degrees (decimal, or degrees and minutes such as ``-0°15'``; ISO 8855 signs,
toe + = toe-in, camber + = top outboard), lengths in mm, forces in N, odometer in km. A time
without a UTC offset is read in the workshop's time zone.
"""
from __future__ import annotations

import codecs
import csv
import datetime as dt
import hashlib
import io
import math
import uuid
import zoneinfo
from collections.abc import Iterable
from dataclasses import dataclass, field

from django.core.exceptions import ValidationError
from django.db import transaction
from django.utils import timezone

from analytics.core.units import parse_angle

from . import audit, services
from .models import (
    PARTS_BY_CODE,
    AlignmentSession,
    ComponentCheck,
    Vehicle,
    normalise_identifier,
)
from .models.catalogue import CORNER_AXLE, FINDING_CODES, PLAY_DIRECTIONS, PLAY_LOADING, VERDICTS
from .models.org import Role
from .scoping import role_of

MAX_ROWS = 20_000
# The upload page takes fewer: one request must finish well inside gunicorn's 30 s timeout
# (measured ≈ 11 ms per reading row on the 2-core host under load); larger files go through
# ``manage.py import-records``.
PAGE_MAX_ROWS = 1_000
MAX_FILE_BYTES = 10 * 1024 * 1024
MAX_PROBLEMS = 200  # reported; counting goes on
FUTURE_SLACK = dt.timedelta(minutes=10)
IMPORT_TOKEN_NAMESPACE = uuid.UUID("2b8f4a61-93c4-4e0b-a7d5-5c1e9f03b6d2")
FINDINGS_SEPARATOR = ";"

SESSION_COLUMNS = ("vehicle", "at", "odometer_km", "odometer_change_reason", "kind", "rig_id",
                   "rig_calibrated_on", "notes")
READING_COLUMNS = ("corner", "toe_deg", "camber_deg", "caster_deg", "sai_deg", "ride_height_mm")
CHECK_ONLY_COLUMNS = ("part", "play_mm", "play_direction", "play_loading", "deflection_mm",
                      "deflection_force_n", "findings", "verdict", "defect_category")
READING_ONLY_COLUMNS = ("kind", "rig_id", "rig_calibrated_on", "toe_deg", "camber_deg",
                        "caster_deg", "sai_deg", "ride_height_mm")
COLUMNS = ("record", "visit", *SESSION_COLUMNS, *READING_COLUMNS, *CHECK_ONLY_COLUMNS)
REQUIRED_COLUMNS = ("record", "vehicle", "at", "odometer_km", "corner")
RECORD_TYPES = ("reading", "check")

# Service field names → the file's column names (for messages from inspections.services).
SERVICE_COLUMN = {"measured_at": "at", "checked_at": "at", "equipment_id": "rig_id",
                  "equipment_calibrated_on": "rig_calibrated_on"}


@dataclass(frozen=True)
class Problem:
    """One reason the file is refused: where (row of the file, header = 1; column) and why."""

    row: int | None
    column: str | None
    message: str

    def __str__(self) -> str:
        where = []
        if self.row is not None:
            where.append(f"row {self.row}")
        if self.column:
            where.append(f"column {self.column}")
        return f"{', '.join(where)}: {self.message}" if where else self.message


class ImportRefused(Exception):
    """The file was refused and nothing was stored; ``problems`` says where and why."""

    def __init__(self, problems: list[Problem], *, total: int | None = None):
        self.problems = problems[:MAX_PROBLEMS]
        self.total = total if total is not None else len(problems)
        more = f" (showing {len(self.problems)})" if self.total > len(self.problems) else ""
        super().__init__(f"{self.total} problem(s){more}; nothing was imported")


@dataclass
class ImportResult:
    rows: int
    sessions_created: int = 0
    readings_created: int = 0
    checks_created: int = 0
    sessions_already_stored: int = 0
    checks_already_stored: int = 0
    vehicles: list[int] = field(default_factory=list)
    sha256: str = ""
    audit_entry_id: int | None = None
    dry_run: bool = False

    def as_dict(self) -> dict:
        return {k: getattr(self, k) for k in self.__dataclass_fields__}


def can_import(user) -> bool:
    """Technicians, workshop managers and administrators import records."""
    role = role_of(user)
    if role in {Role.TECHNICIAN, Role.ADMINISTRATOR}:
        return True
    return role == Role.MANAGER and user.profile.workshop_id is not None


def importable_vehicles(user):
    """The vehicles ``user`` may import records for: visible, and maintained by their workshop."""
    role = role_of(user)
    visible = Vehicle.objects.visible_to(user).select_related("workshop")
    if role == Role.ADMINISTRATOR:
        return visible
    if not can_import(user):
        return visible.none()
    return visible.filter(workshop_id=user.profile.workshop_id)


# ------------------------------------------------------------------------------ reading the bytes

def _decode(data: bytes) -> str:
    """The file's text; a UTF-8 byte-order mark is dropped. Refuses non-text and non-UTF-8."""
    if data.startswith(b"PK\x03\x04"):
        raise ImportRefused([Problem(None, None, "this is a spreadsheet workbook (e.g. .xlsx), not "
                                     "CSV; save it as 'CSV UTF-8' and import that")])
    if data.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        raise ImportRefused([Problem(None, None, "the file is UTF-16 text; save it as 'CSV UTF-8'")])
    if data.startswith(codecs.BOM_UTF8):
        data = data[len(codecs.BOM_UTF8):]
    if b"\x00" in data:
        row = data[:data.index(b"\x00")].count(b"\n") + 1
        raise ImportRefused([Problem(row, None, "holds a NUL byte: this is not a CSV text file")])
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError:
        pass
    problems = []
    lines = data.split(b"\n")
    header = [c.strip().lower() for c in lines[0].decode("utf-8", "replace").split(",")]
    for number, line in enumerate(lines, start=1):
        try:
            line.decode("utf-8")
        except UnicodeDecodeError as exc:
            cells = line.split(b",")
            index = line[:exc.start].count(b",")
            column = header[index] if number > 1 and index < len(header) else None
            cell = cells[index] if index < len(cells) else b""
            problems.append(Problem(number, column, (
                f"byte 0x{line[exc.start]:02X} is not UTF-8 text (cell {cell!r}); save the file "
                "as 'CSV UTF-8' (Latin-1 / Windows-1252 files are not read, to avoid guessing)")))
    raise ImportRefused(problems)


def _rows(text: str, max_rows: int) -> tuple[list[str], list[tuple[int, dict[str, str]]]]:
    """Header and ``(row number, {column: text})`` of every non-blank data row."""
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    problems: list[Problem] = []
    try:
        raw_header = next(reader)
    except StopIteration:
        raise ImportRefused([Problem(None, None, "the file is empty; the first row must name the "
                                     "columns")]) from None
    except csv.Error as exc:
        raise ImportRefused([Problem(1, None, f"cannot read the header row: {exc}")]) from None
    header = [name.strip().lower() for name in raw_header]
    seen = set()
    for name in header:
        if name and name not in COLUMNS:
            problems.append(Problem(1, name, "unknown column; the columns are " + ", ".join(COLUMNS)))
        if name in seen:
            problems.append(Problem(1, name, "this column appears twice"))
        seen.add(name)
    for name in REQUIRED_COLUMNS:
        if name not in seen:
            problems.append(Problem(1, name, "required column is missing"))
    if problems:
        raise ImportRefused(problems)
    rows = []
    previous_end = reader.line_num
    while True:
        start = previous_end + 1
        try:
            cells = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            raise ImportRefused([Problem(start, None, f"cannot read this row as CSV: {exc}")]) from None
        previous_end = reader.line_num
        if not any(c.strip() for c in cells):
            continue
        if len(rows) >= max_rows:
            hint = ("" if max_rows >= MAX_ROWS else
                    f" here (up to {MAX_ROWS} through manage.py import-records)")
            raise ImportRefused([Problem(start, None, (
                f"the file has more than {max_rows} data rows, the most one import takes{hint}; "
                "split it into several files (by visit) and import each"))])
        if len(cells) > len(header) and any(c.strip() for c in cells[len(header):]):
            problems.append(Problem(start, None, (
                f"{len(cells)} cells but the header names {len(header)} columns")))
            continue
        values = {name: (cells[i].strip() if i < len(cells) else "")
                  for i, name in enumerate(header) if name}
        rows.append((start, values))
    if problems:
        raise ImportRefused(problems)
    if not rows:
        raise ImportRefused([Problem(None, None, "the file has a header but no data rows")])
    return header, rows


# ------------------------------------------------------------------------------ reading the values

class _RowReader:
    """Reads typed values from one row, collecting a Problem per bad cell."""

    def __init__(self, number: int, values: dict[str, str], problems: list[Problem]):
        self.row, self.values, self.problems = number, values, problems

    def bad(self, column: str | None, message: str) -> None:
        self.problems.append(Problem(self.row, column, message))

    def text(self, column: str, *, required: bool = False, max_length: int | None = None) -> str:
        value = self.values.get(column, "")
        if required and not value:
            self.bad(column, "is required")
        if max_length is not None and len(value) > max_length:
            self.bad(column, f"is {len(value)} characters long; at most {max_length}")
        return value

    def number(self, column: str, *, required: bool = False, low: float | None = None,
               high: float | None = None, unit: str = "") -> float | None:
        text = self.text(column, required=required)
        if not text:
            return None
        try:
            value = float(text.replace("−", "-"))
        except ValueError:
            self.bad(column, f"cannot read {text!r} as a number (use a dot for decimals)")
            return None
        if not math.isfinite(value):
            self.bad(column, f"{text!r} is not a finite number")
            return None
        if (low is not None and value < low) or (high is not None and value > high):
            self.bad(column, f"{value:g} {unit} is outside {low:g} … {high:g} {unit}".replace("  ", " "))
            return None
        return value

    def angle(self, column: str, *, required: bool = False) -> float | None:
        text = self.text(column, required=required)
        if not text:
            return None
        try:
            return parse_angle(text)
        except ValueError:
            self.bad(column, f"cannot read {text!r} as an angle: degrees (-0.25) or degrees and "
                             "minutes (-0°15')")
            return None

    def whole(self, column: str, *, required: bool = False) -> int | None:
        text = self.text(column, required=required).replace(" ", "")
        if not text:
            return None
        if not text.isdigit():
            self.bad(column, f"cannot read {text!r} as a whole number of km")
            return None
        return int(text)

    def choice(self, column: str, choices: Iterable[str], *, required: bool = False) -> str:
        text = self.text(column, required=required)
        choices = tuple(choices)
        if text and text not in choices:
            self.bad(column, f"{text!r} is not one of: {', '.join(c for c in choices if c)}")
            return ""
        return text

    def date(self, column: str, *, required: bool = False) -> dt.date | None:
        text = self.text(column, required=required)
        if not text:
            return None
        try:
            return dt.date.fromisoformat(text)
        except ValueError:
            self.bad(column, f"cannot read {text!r} as a date; write YYYY-MM-DD")
            return None

    def moment(self, column: str, zone: str, *, required: bool = False) -> dt.datetime | None:
        text = self.text(column, required=required)
        if not text:
            return None
        try:
            value = dt.datetime.fromisoformat(text)
        except ValueError:
            self.bad(column, f"cannot read {text!r} as a date and time; write YYYY-MM-DD HH:MM "
                             "(the workshop's time) or add a UTC offset (+01:00, Z)")
            return None
        if len(text) <= 10:
            self.bad(column, f"{text!r} has no time of day; write YYYY-MM-DD HH:MM")
            return None
        if value.tzinfo is None:
            value = value.replace(tzinfo=zoneinfo.ZoneInfo(zone))
        if value > timezone.now() + FUTURE_SLACK:
            self.bad(column, f"{text} is in the future")
            return None
        return value.astimezone(dt.UTC)


@dataclass
class _Visit:
    key: str
    vehicle: Vehicle
    first_row: int
    header: dict  # the session columns as text, to compare rows of the visit
    kwargs: dict
    readings: list[dict] = field(default_factory=list)
    reading_rows: dict[str, int] = field(default_factory=dict)
    heights: dict[str, float | None] = field(default_factory=dict)

    @property
    def token(self) -> uuid.UUID:
        return uuid.uuid5(IMPORT_TOKEN_NAMESPACE, "session|{}|{}|{}|{}".format(
            self.vehicle.workshop_id, self.vehicle.vin, self.key, self.kwargs["measured_at"].isoformat()))


@dataclass
class _Check:
    row: int
    vehicle: Vehicle
    visit: str
    kwargs: dict

    def token(self, checked_at: dt.datetime) -> uuid.UUID:
        return uuid.uuid5(IMPORT_TOKEN_NAMESPACE, "check|{}|{}|{}|{}|{}".format(
            self.vehicle.workshop_id, self.vehicle.vin, checked_at.isoformat(),
            self.kwargs["corner"], self.kwargs["part"]))


class _Vehicles:
    """Finds a row's vehicle among those the importer may touch, by VIN, plate or fleet number."""

    def __init__(self, user):
        self.queryset = importable_vehicles(user)
        self.cache: dict[str, Vehicle | str] = {}

    def find(self, text: str) -> Vehicle | str:
        key = normalise_identifier(text)
        if key not in self.cache:
            found = list(self.queryset.filter(vin=key)[:1]) if len(key) == 17 else []
            if not found:
                found = list(self.queryset.filter(plate_key=key)[:2]) or list(
                    self.queryset.filter(fleet_number_key=key)[:2])
            if not found:
                self.cache[key] = (f"no vehicle {text!r} (VIN, plate or fleet number) among the "
                                   "vehicles you may import for")
            elif len(found) > 1:
                self.cache[key] = f"{text!r} matches several vehicles; use the VIN"
            else:
                self.cache[key] = found[0]
        return self.cache[key]


def _read(rows, user) -> tuple[list[_Visit], list[_Check]]:
    problems: list[Problem] = []
    vehicles = _Vehicles(user)
    visits: dict[str, _Visit] = {}
    checks: list[_Check] = []
    reading_visit_keys: set[str] = set()
    for number, values in rows:
        before = len(problems)
        r = _RowReader(number, values, problems)
        record = r.choice("record", RECORD_TYPES, required=True)
        vehicle_text = r.text("vehicle", required=True)
        vehicle = vehicles.find(vehicle_text) if vehicle_text else None
        if isinstance(vehicle, str):
            r.bad("vehicle", vehicle)
            vehicle = None
        zone = vehicle.workshop.time_zone if vehicle else "UTC"
        visit_key = r.text("visit", max_length=60)
        corner = r.choice("corner", CORNER_AXLE, required=True)
        notes = r.text("notes", max_length=2000)
        reason = r.text("odometer_change_reason", max_length=200)
        if record == "reading":
            for column in CHECK_ONLY_COLUMNS:
                if values.get(column):
                    r.bad(column, "belongs to check rows; leave it blank on a reading row")
            if not visit_key:
                r.bad("visit", "is required on reading rows: it groups the rows of one session")
            reading_visit_keys.add(visit_key)
            header = {c: values.get(c, "") for c in SESSION_COLUMNS}
            measured_at = r.moment("at", zone, required=True)
            odometer = r.whole("odometer_km", required=True)
            kind = r.choice("kind", dict(AlignmentSession.KINDS), required=True)
            rig = r.text("rig_id", required=True, max_length=60)
            calibrated = r.date("rig_calibrated_on", required=True)
            reading = {"corner": corner, "toe_deg": r.angle("toe_deg", required=True),
                       "camber_deg": r.angle("camber_deg", required=True),
                       "caster_deg": r.angle("caster_deg"), "sai_deg": r.angle("sai_deg")}
            height = r.number("ride_height_mm", low=0, high=2000, unit="mm")
            if vehicle is None or not visit_key or len(problems) > before:
                continue
            visit = visits.get(visit_key)
            if visit is None:
                visit = visits[visit_key] = _Visit(
                    key=visit_key, vehicle=vehicle, first_row=number, header=header, kwargs={
                        "measured_at": measured_at, "odometer_km": odometer, "kind": kind,
                        "equipment_id": rig, "equipment_calibrated_on": calibrated,
                        "odometer_change_reason": reason, "notes": notes})
            else:
                differ = [c for c in SESSION_COLUMNS if header[c] != visit.header[c]]
                for column in differ:
                    r.bad(column, f"differs from row {visit.first_row} of visit {visit_key!r} "
                                  f"({visit.header[column]!r}); a visit's session columns must "
                                  "be the same on each of its rows")
                if differ:
                    continue
            if corner in visit.reading_rows:
                r.bad("corner", f"visit {visit_key!r} already has a {corner} reading in row "
                                f"{visit.reading_rows[corner]}")
                continue
            visit.reading_rows[corner] = number
            visit.readings.append(reading)
            visit.heights[corner] = height
        elif record == "check":
            for column in READING_ONLY_COLUMNS:
                if values.get(column):
                    r.bad(column, "belongs to reading rows; leave it blank on a check row")
            checked_at = r.moment("at", zone, required=not visit_key)
            odometer = r.whole("odometer_km", required=not visit_key)
            part = r.choice("part", PARTS_BY_CODE, required=True)
            findings = [f.strip() for f in r.text("findings").split(FINDINGS_SEPARATOR) if f.strip()]
            unknown = [f for f in findings if f not in FINDING_CODES]
            if unknown:
                r.bad("findings", f"unknown finding(s) {', '.join(unknown)}; use "
                                  f"{', '.join(sorted(FINDING_CODES))}, separated by "
                                  f"'{FINDINGS_SEPARATOR}'")
            kwargs = {
                "checked_at": checked_at, "odometer_km": odometer, "corner": corner, "part": part,
                "verdict": r.choice("verdict", dict(VERDICTS), required=True),
                "findings": findings,
                "play_mm": r.number("play_mm", low=0, high=50, unit="mm"),
                "play_direction": r.choice("play_direction", dict(PLAY_DIRECTIONS)),
                "play_loading": r.choice("play_loading", dict(PLAY_LOADING)),
                "deflection_mm": r.number("deflection_mm", low=0, high=100, unit="mm"),
                "deflection_force_n": r.number("deflection_force_n", low=0, high=1e6, unit="N"),
                "defect_category": r.choice("defect_category", ("minor", "major", "dangerous")),
                "odometer_change_reason": reason, "notes": notes,
            }
            if vehicle is not None and len(problems) == before:
                checks.append(_Check(row=number, vehicle=vehicle, visit=visit_key, kwargs=kwargs))
    for check in checks:
        visit = visits.get(check.visit) if check.visit else None
        if check.visit and visit is None and check.visit not in reading_visit_keys:
            problems.append(Problem(check.row, "visit", f"no reading rows of visit {check.visit!r} "
                                    "in this file"))
        elif visit is not None and visit.vehicle.pk != check.vehicle.pk:
            problems.append(Problem(check.row, "vehicle", f"visit {check.visit!r} is for vehicle "
                                    f"{visit.vehicle.vin} (row {visit.first_row})"))
    if problems:
        raise ImportRefused(problems)
    return list(visits.values()), checks


# ------------------------------------------------------------------------------ storing

def _service_problems(exc: ValidationError, row_of) -> list[Problem]:
    """Map a service's ``{field: reason}`` back to the file's rows and columns."""
    out = []
    for key, messages in exc.message_dict.items():
        row, column = row_of(key)
        out.append(Problem(row, column, "; ".join(messages)))
    return out


def _same_session(stored: AlignmentSession, visit: _Visit) -> bool:
    k = visit.kwargs
    stored_readings = {r.corner: (r.toe_deg, r.camber_deg, r.caster_deg, r.sai_deg)
                       for r in stored.readings.all()}
    file_readings = {r["corner"]: (r["toe_deg"], r["camber_deg"], r["caster_deg"], r["sai_deg"])
                     for r in visit.readings}
    return (stored.odometer_km == k["odometer_km"] and stored.kind == k["kind"]
            and stored.equipment_id == k["equipment_id"].strip()
            and stored.equipment_calibrated_on == k["equipment_calibrated_on"]
            and stored_readings == file_readings)


def _same_check(stored: ComponentCheck, kwargs: dict) -> bool:
    keys = ("odometer_km", "corner", "part", "verdict", "play_mm", "deflection_mm", "defect_category")
    return (all(getattr(stored, k) == kwargs[k] for k in keys)
            and sorted(stored.findings) == sorted(kwargs["findings"] or ["none"]))


def import_records(*, data: bytes, filename: str, user, dry_run: bool = False,
                   max_rows: int | None = None) -> ImportResult:
    """Import a CSV file (bytes) as ``user``; all or nothing. Raises :class:`ImportRefused`.

    ``max_rows`` lowers the row cap (never above :data:`MAX_ROWS`).

    With ``dry_run`` every row is checked through the services and the transaction is rolled
    back: the answer says what an import would add, and nothing is stored.
    """
    if not can_import(user):
        raise ImportRefused([Problem(None, None, "your role does not import records")])
    if len(data) > MAX_FILE_BYTES:
        raise ImportRefused([Problem(None, None, (
            f"the file is {len(data) / 1e6:.1f} MB; at most {MAX_FILE_BYTES / 1e6:.0f} MB per "
            "import"))])
    digest = hashlib.sha256(data).hexdigest()
    _, rows = _rows(_decode(data), min(max_rows or MAX_ROWS, MAX_ROWS))
    visits, checks = _read(rows, user)
    result = ImportResult(rows=len(rows), sha256=digest, dry_run=dry_run)
    problems: list[Problem] = []
    sessions_by_key: dict[str, AlignmentSession] = {}
    # Oldest first, so each record's odometer is checked against the ones before it.
    work = [(v.kwargs["measured_at"], v.first_row, v) for v in visits]
    work += [(c.kwargs["checked_at"], c.row, c) for c in checks if not c.visit]
    work.sort(key=lambda item: (item[0], item[1]))
    attached: dict[str, list[_Check]] = {}
    for c in checks:
        if c.visit:
            attached.setdefault(c.visit, []).append(c)
    tokens_seen: dict[uuid.UUID, int] = {}
    try:
        with transaction.atomic(), audit.channel("import", file=filename, sha256=digest):
            for _, _, item in work:
                if isinstance(item, _Visit):
                    _store_visit(item, user, result, problems, sessions_by_key)
                    for check in attached.get(item.key, []):
                        _store_check(check, user, result, problems, sessions_by_key, tokens_seen)
                else:
                    _store_check(item, user, result, problems, sessions_by_key, tokens_seen)
            if problems:
                raise ImportRefused(sorted(problems, key=lambda p: (p.row or 0, p.column or "")))
            result.vehicles = sorted({v.vehicle.pk for v in visits} | {c.vehicle.pk for c in checks})
            entry = audit.record_import(actor=user, filename=filename, summary=result.as_dict())
            result.audit_entry_id = entry.pk
            if dry_run:
                raise _DryRun
    except _DryRun:
        result.audit_entry_id = None
    return result


class _DryRun(Exception):
    """Rolls a dry run's transaction back."""


def _store_visit(visit: _Visit, user, result: ImportResult, problems: list, sessions_by_key) -> None:
    token = visit.token
    stored = AlignmentSession.objects.filter(client_token=token).prefetch_related("readings").first()
    if stored is not None:
        if _same_session(stored, visit):
            result.sessions_already_stored += 1
            sessions_by_key[visit.key] = stored
        else:
            problems.append(Problem(visit.first_row, "visit", (
                f"visit {visit.key!r} of {visit.vehicle.vin} at "
                f"{visit.kwargs['measured_at']:%Y-%m-%d %H:%M} UTC was imported before with other "
                f"values (session {stored.pk}); change a stored "
                "session by recording a correction with its reason")))
        return

    def row_of(key: str) -> tuple[int, str | None]:
        if key.startswith("readings[") and "]" in key:
            corner = key[len("readings["):key.index("]")]
            column = key.split(".", 1)[1] if "." in key else "corner"
            return visit.reading_rows.get(corner, visit.first_row), column
        if key == "readings":
            return visit.first_row, "toe_deg"
        return visit.first_row, SERVICE_COLUMN.get(key, key if key != "__all__" else None)

    try:
        session = services.session_submit(
            vehicle=visit.vehicle, technician=user, readings=visit.readings, client_token=token,
            ride_heights_mm=visit.heights, **visit.kwargs)
    except ValidationError as exc:
        problems.extend(_service_problems(exc, row_of))
        return
    sessions_by_key[visit.key] = session
    result.sessions_created += 1
    result.readings_created += len(visit.readings)


def _store_check(check: _Check, user, result: ImportResult, problems: list, sessions_by_key,
                 tokens_seen: dict) -> None:
    kwargs = dict(check.kwargs)
    session = None
    if check.visit:
        session = sessions_by_key.get(check.visit)
        if session is None:
            return  # the visit itself was refused; its problem is reported already
        kwargs["checked_at"] = kwargs["checked_at"] or session.measured_at
        if kwargs["odometer_km"] is None:
            kwargs["odometer_km"] = session.odometer_km
            kwargs["odometer_change_reason"] = (kwargs["odometer_change_reason"]
                                                or session.odometer_change_reason)
    token = check.token(kwargs["checked_at"])
    if token in tokens_seen:
        problems.append(Problem(check.row, "part", (
            f"the same part at the same corner and time is already in row {tokens_seen[token]}")))
        return
    tokens_seen[token] = check.row
    stored = ComponentCheck.objects.filter(client_token=token).first()
    if stored is not None:
        if _same_check(stored, kwargs):
            result.checks_already_stored += 1
        else:
            problems.append(Problem(check.row, "part", (
                f"this check was imported before with other values (check {stored.pk}); change a "
                "stored check by recording a correction with its reason")))
        return
    try:
        services.component_check_submit(vehicle=check.vehicle, technician=user, session=session,
                                        client_token=token, **kwargs)
    except ValidationError as exc:
        problems.extend(_service_problems(
            exc, lambda key: (check.row, SERVICE_COLUMN.get(key, key if key != "__all__" else None))))
        return
    result.checks_created += 1
