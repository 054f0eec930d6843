"""Bulk load of wheel readings from CSV: COPY into a staging table, validate in SQL, INSERT … SELECT.

For large back-office loads (another workshop system's export, a migration). The tablet path and
the record-by-record CSV import (``inspections/importing.py``) stay the way to enter single
records; this path validates a whole file in a few set-based queries and stores all or nothing.

CSV layout (header required, UTF-8, comma separated; angles in degrees with ISO 8855 signs — toe
positive = toe-in, camber positive = top of the wheel outboard)::

    session,corner,toe_deg,camber_deg,caster_deg
    5f0c…-uuid,FL,0.05,-0.42,3.61

- ``session``: the ``client_token`` (UUID) of an existing alignment session;
- ``corner``: FL, FR, RL or RR; one reading per session and corner (in the file and stored);
- ``toe_deg`` in [−10, 10], ``camber_deg`` in [−15, 15]; ``caster_deg`` empty, or in [−20, 20]
  on a front corner only (the same ranges as the database constraints).

A file with any bad row stores nothing and the refusal names each bad row (its line in the file,
the header being line 1), the column and the reason.
"""
from __future__ import annotations

import io
from dataclasses import dataclass

from django.db import connection, transaction

from inspections.models.records import CAMBER_LIMIT_DEG, CASTER_LIMIT_DEG, TOE_LIMIT_DEG

__all__ = ["COLUMNS", "BulkRefused", "RowProblem", "readings_load"]

COLUMNS = ("session", "corner", "toe_deg", "camber_deg", "caster_deg")
MAX_REPORTED = 50
_NUM = r"^[+-]?([0-9]+\.?[0-9]*|\.[0-9]+)([eE][+-]?[0-9]+)?$"
_UUID = r"^[0-9a-fA-F]{8}-?([0-9a-fA-F]{4}-?){3}[0-9a-fA-F]{12}$"


@dataclass(frozen=True)
class RowProblem:
    line: int  # line in the file (header = 1)
    column: str
    reason: str

    def __str__(self) -> str:
        return f"line {self.line}, {self.column}: {self.reason}"


class BulkRefused(ValueError):
    """The file was refused; ``problems`` lists the first bad rows (nothing was stored)."""

    def __init__(self, problems: list[RowProblem]):
        self.problems = problems
        super().__init__("; ".join(str(p) for p in problems[:5])
                         + (f" (and {len(problems) - 5} more)" if len(problems) > 5 else ""))


_CHECKS = f"""
SELECT line, col, reason FROM (
  SELECT line, 'session' AS col, 'not a session token (UUID)' AS reason FROM bulk_stage
   WHERE session IS NULL OR session !~ '{_UUID}'
  UNION ALL
  SELECT s.line, 'session', 'no alignment session with this token' FROM bulk_stage s
   WHERE s.session ~ '{_UUID}' AND NOT EXISTS (
     SELECT 1 FROM inspections_alignmentsession a WHERE a.client_token = s.session::uuid)
  UNION ALL
  SELECT line, 'corner', 'must be FL, FR, RL or RR' FROM bulk_stage
   WHERE corner IS NULL OR corner NOT IN ('FL', 'FR', 'RL', 'RR')
  UNION ALL
  SELECT line, 'toe_deg', 'must be a number' FROM bulk_stage WHERE toe IS NULL OR toe !~ '{_NUM}'
  UNION ALL
  SELECT line, 'toe_deg', 'outside the physical range ±{TOE_LIMIT_DEG:g}°' FROM bulk_stage
   WHERE toe ~ '{_NUM}' AND abs(toe::float8) > {TOE_LIMIT_DEG}
  UNION ALL
  SELECT line, 'camber_deg', 'must be a number' FROM bulk_stage
   WHERE camber IS NULL OR camber !~ '{_NUM}'
  UNION ALL
  SELECT line, 'camber_deg', 'outside the physical range ±{CAMBER_LIMIT_DEG:g}°' FROM bulk_stage
   WHERE camber ~ '{_NUM}' AND abs(camber::float8) > {CAMBER_LIMIT_DEG}
  UNION ALL
  SELECT line, 'caster_deg', 'must be a number or empty' FROM bulk_stage
   WHERE caster IS NOT NULL AND caster !~ '{_NUM}'
  UNION ALL
  SELECT line, 'caster_deg', 'outside the physical range ±{CASTER_LIMIT_DEG:g}°' FROM bulk_stage
   WHERE caster ~ '{_NUM}' AND abs(caster::float8) > {CASTER_LIMIT_DEG}
  UNION ALL
  SELECT line, 'caster_deg', 'caster is measured on the front axle only' FROM bulk_stage
   WHERE caster IS NOT NULL AND corner IN ('RL', 'RR')
  UNION ALL
  SELECT line, 'corner', 'a second reading of this session and corner in the file' FROM (
    SELECT line, row_number() OVER (PARTITION BY lower(session), corner ORDER BY line) AS k
    FROM bulk_stage) d WHERE k > 1
  UNION ALL
  SELECT s.line, 'corner', 'this session already has a reading of this corner' FROM bulk_stage s
   JOIN inspections_alignmentsession a
     ON s.session ~ '{_UUID}' AND a.client_token = s.session::uuid
   JOIN inspections_wheelreading r ON r.session_id = a.id AND r.corner = s.corner
) p ORDER BY line, col LIMIT {MAX_REPORTED}
"""

_INSERT = """
INSERT INTO inspections_wheelreading (session_id, corner, toe_deg, camber_deg, caster_deg)
SELECT a.id, s.corner, s.toe::float8, s.camber::float8, s.caster::float8
FROM bulk_stage s JOIN inspections_alignmentsession a ON a.client_token = s.session::uuid
ORDER BY s.line
"""


def readings_load(csv_text: str | bytes | io.IOBase) -> int:
    """Load wheel readings from CSV (layout in the module docstring); returns rows stored.

    Raises:
        BulkRefused: any bad row (nothing stored), or a header that is not :data:`COLUMNS`.
    """
    if connection.vendor != "postgresql":
        raise RuntimeError("the bulk load needs PostgreSQL (COPY)")
    data = csv_text.read() if hasattr(csv_text, "read") else csv_text
    if isinstance(data, str):
        data = data.encode()
    first, _, _ = data.partition(b"\n")
    header = tuple(h.strip().lower() for h in first.decode("utf-8-sig").strip().split(","))
    if header != COLUMNS:
        raise BulkRefused([RowProblem(1, "header", "must be " + ",".join(COLUMNS))])
    with transaction.atomic(), connection.cursor() as cur:
        cur.execute("CREATE TEMP TABLE bulk_stage (line bigint GENERATED ALWAYS AS IDENTITY, "
                    "session text, corner text, toe text, camber text, caster text) "
                    "ON COMMIT DROP")
        copy_sql = ("COPY bulk_stage (session, corner, toe, camber, caster) FROM STDIN "
                    "(FORMAT csv, HEADER true)")
        with connection.wrap_database_errors, cur.cursor.copy(copy_sql) as cp:
            view = memoryview(data)
            step = 1 << 22
            for i in range(0, len(view), step):
                cp.write(view[i:i + step])
        cur.execute(_CHECKS)
        problems = [RowProblem(int(line) + 1, col, reason) for line, col, reason in cur.fetchall()]
        if problems:
            cur.execute("DROP TABLE bulk_stage")
            raise BulkRefused(problems)
        cur.execute(_INSERT)
        n = cur.rowcount
        cur.execute("DROP TABLE bulk_stage")
    return n
