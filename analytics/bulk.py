"""Bulk load of wheel readings from CSV: COPY into a staging table, validate in SQL, INSERT … SELECT.

For large back-office loads (another workshop system's export, a migration). The tablet path and
the record-by-record CSV import (``inspections/importing.py``) stay the way to enter single
records; this path validates a whole file in a few set-based queries and stores all or nothing.

CSV layout (header required, UTF-8, comma separated; angles in degrees with ISO 8855 signs — toe
positive = toe-in, camber positive = top of the wheel outboard)::

    session,corner,toe_deg,camber_deg,caster_deg
    5f0c…-uuid,FL,0.05,-0.42,3.61

- ``session``: the ``client_token`` (UUID: 32 hex digits, hyphens optional between the usual
  groups) of an existing alignment session;
- ``corner``: FL, FR, RL or RR; one reading per session and corner (in the file and stored);
- ``toe_deg`` in [−10, 10], ``camber_deg`` in [−15, 15]; ``caster_deg`` empty, or in [−20, 20]
  on a front corner only (the same ranges as the database constraints). Numbers are plain
  decimals with an optional exponent (``-0.42``, ``4.2e-1``; at most 300 characters, exponent
  within ±999); magnitudes below 1e-300 are read as 0.

A file with any bad row stores nothing and the refusal names each bad row (its line in the file,
the header being line 1), the column and the reason; so does a row with too many or too few
fields, and a line ``\\.`` alone (COPY's end-of-data mark, which would cut the file short).

How (two paths, the same outcome):

- **direct**: a file made only of the characters a well-formed file needs (hex digits, signs,
  points, commas, line ends and the corner letters — so no quoting, spaces, ``NaN`` or
  ``Infinity``, where PostgreSQL's number reading is wider than the layout above) is copied
  straight into a typed staging table (``float8`` angles, the text token) and stored with one
  ``INSERT … SELECT`` that resolves the session by its canonical token text, repeats every row
  check in its ``WHERE`` and leaves "one reading per session and corner" to the unique
  constraint. If any row is dropped by the ``WHERE``, or the copy or the insert fails, the
  attempt is rolled back to its savepoint and the file goes the checked path.
- **checked**: the file is copied as text, converted once into a typed table (session resolved,
  each column's number or the fact that it is not one) and every row checked in one pass. A file
  with a bad row is refused naming all its problems, the duplicate and already-stored readings
  too; otherwise it is inserted, and only if the unique constraint refuses the insert are the
  duplicate and already-stored readings looked up to name them.

Staging tables are temporary (``ON COMMIT DROP``, dropped at once on success, gone with the
savepoint on failure), so loads in other sessions never see or collide with them. 100 000
readings took 1.3–1.5× a raw ``COPY`` into the readings table on the direct path and 2.2–3.0× on
the checked path (``bench/bench_fleet.py``'s ``bench_import``, shared 2-core machine).
"""
from __future__ import annotations

import io
import re
from dataclasses import dataclass

from django.db import DataError, IntegrityError, connection, transaction

from inspections.models.records import CAMBER_LIMIT_DEG, CASTER_LIMIT_DEG, TOE_LIMIT_DEG

__all__ = ["COLUMNS", "BulkRefused", "RowProblem", "readings_load"]

COLUMNS = ("session", "corner", "toe_deg", "camber_deg", "caster_deg")
CORNERS = ("FL", "FR", "RL", "RR")
MAX_REPORTED = 50
_NUM = r"^[+-]?([0-9]+\.?[0-9]*|\.[0-9]+)([eE][+-]?[0-9]+)?$"
_UUID = r"^[0-9a-fA-F]{8}-?([0-9a-fA-F]{4}-?){3}[0-9a-fA-F]{12}$"
# Bytes a well-formed data row can consist of. PostgreSQL's float8 input reads exactly the numbers
# _NUM describes when none of the other characters it would accept (space, x, n, i, …) occur.
_DIRECT_BYTES = b"0123456789abcdefABCDEF+-.,\r\n" + "".join(sorted(set("".join(CORNERS)))).encode()
_COPY_WHERE = re.compile(r"line (\d+)(?:, column (\w+))?")
_COPY_COLUMN = re.compile(r'column "(\w+)"')
_END_MARK = re.compile(rb"^\\\.\r?$", re.MULTILINE)  # a line "\." ends COPY's data early

_ROW = "session text, corner text, toe_deg {t}, camber_deg {t}, caster_deg {t}"
_COLS = ", ".join(COLUMNS)


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


class _NotDirect(Exception):
    """The direct path dropped a row: roll it back and take the checked path."""


# --- direct path -------------------------------------------------------------------------------

_IN_RANGE = f"""
    s.corner IN {CORNERS!r}
    AND abs(s.toe_deg) <= {TOE_LIMIT_DEG} AND abs(s.camber_deg) <= {CAMBER_LIMIT_DEG}
    AND (s.caster_deg IS NULL
         OR (abs(s.caster_deg) <= {CASTER_LIMIT_DEG} AND s.corner IN ('FL', 'FR')))"""

# The token text is compared with the session's canonical text (lower case, hyphenated): every
# such text matches _UUID, and a valid token written otherwise (no hyphens) just takes the checked
# path. abs(NULL) is NULL, so a missing toe or camber drops the row as well.
_DIRECT_INSERT = f"""
INSERT INTO inspections_wheelreading (session_id, corner, toe_deg, camber_deg, caster_deg)
SELECT a.id, s.corner, s.toe_deg, s.camber_deg, s.caster_deg
FROM bulk_typed s JOIN inspections_alignmentsession a ON a.client_token::text = lower(s.session)
WHERE {_IN_RANGE}
ORDER BY s.ctid  -- the file's order
"""


def _direct(cur, data: bytes) -> int:
    """Copy typed and insert in one statement; raises _NotDirect/DataError/IntegrityError."""
    cur.execute(f"CREATE TEMP TABLE bulk_typed ({_ROW.format(t='float8')}) ON COMMIT DROP")
    rows = _copy(cur, "bulk_typed", data)
    cur.execute(_DIRECT_INSERT)
    if cur.rowcount != rows:
        raise _NotDirect
    cur.execute("DROP TABLE bulk_typed")
    return rows


# --- checked path ------------------------------------------------------------------------------

# The numbers read: _NUM with an exponent of at most three digits (leading zeros aside) and at most
# 300 characters, so that no accepted text can fail the cast below.
_NUM_READ = r"^[+-]?([0-9]+\.?[0-9]*|\.[0-9]+)([eE][+-]?0*[0-9]{1,3})?$"


def _float(col: str) -> str:
    """SQL for the float8 value of text column ``col``: NULL unless it is a number as read here.

    Without an exponent (≤ 300 characters: below 1e300 in magnitude) the text is cast directly;
    with one it goes through numeric, beyond float8 becoming ±Infinity (then refused as out of
    range) and magnitudes below 1e-300 becoming 0."""
    n = f"{col}::numeric"
    return f"""CASE WHEN {col} ~ '{_NUM_READ}' AND length({col}) <= 300 THEN
        CASE WHEN strpos(lower({col}), 'e') = 0 THEN {col}::float8
             WHEN abs({n}) > 1e300 THEN sign({n})::float8 * 'Infinity'::float8
             WHEN abs({n}) < 1e-300 THEN 0::float8 ELSE {n}::float8 END END"""


# One pass over the text staging table: each number read once, the token parsed once and the
# session resolved by a hash join on the unique client_token. OFFSET 0 keeps the inner query whole
# so that every expression is computed once per row.
_TYPED = f"""
CREATE TEMP TABLE bulk_rows ON COMMIT DROP AS
SELECT s.line, s.session, s.corner, s.toe_deg, s.camber_deg, s.caster_deg, s.caster_txt, s.token,
       a.id AS session_id
FROM (SELECT line, session, corner, {_float('toe_deg')} AS toe_deg,
             {_float('camber_deg')} AS camber_deg, {_float('caster_deg')} AS caster_deg,
             caster_deg AS caster_txt,
             CASE WHEN session ~ '{_UUID}' THEN session::uuid END AS token
      FROM bulk_stage OFFSET 0) s
LEFT JOIN inspections_alignmentsession a ON a.client_token = s.token
"""

# Each row's own checks: (condition on bulk_rows r, column, reason). A NULL condition is "no".
_ROW_CHECKS = (
    ("r.token IS NULL", "session", "not a session token (UUID)"),
    ("r.token IS NOT NULL AND r.session_id IS NULL", "session",
     "no alignment session with this token"),
    (f"r.corner IS NULL OR r.corner NOT IN {CORNERS!r}", "corner", "must be FL, FR, RL or RR"),
    ("r.toe_deg IS NULL", "toe_deg", "must be a number"),
    (f"abs(r.toe_deg) > {TOE_LIMIT_DEG}", "toe_deg",
     f"outside the physical range ±{TOE_LIMIT_DEG:g}°"),
    ("r.camber_deg IS NULL", "camber_deg", "must be a number"),
    (f"abs(r.camber_deg) > {CAMBER_LIMIT_DEG}", "camber_deg",
     f"outside the physical range ±{CAMBER_LIMIT_DEG:g}°"),
    ("r.caster_txt IS NOT NULL AND r.caster_deg IS NULL", "caster_deg",
     "must be a number or empty"),
    (f"abs(r.caster_deg) > {CASTER_LIMIT_DEG}", "caster_deg",
     f"outside the physical range ±{CASTER_LIMIT_DEG:g}°"),
    ("r.caster_txt IS NOT NULL AND r.corner IN ('RL', 'RR')", "caster_deg",
     "caster is measured on the front axle only"),
)

# One scan picks the rows with any problem; only those are spelled out, one line per problem.
_ROW_PROBLEMS = f"""
  SELECT r.line, p.col, p.reason
  FROM (SELECT * FROM bulk_rows r WHERE {" OR ".join(f"({c})" for c, _, _ in _ROW_CHECKS)}
        OFFSET 0) r
  CROSS JOIN LATERAL (VALUES {", ".join(f"({c}, '{col}', '{why}')" for c, col, why in _ROW_CHECKS)}
  ) p(bad, col, reason)
  WHERE p.bad"""

# One reading per session and corner: in the file, and against what is stored.
_PAIR_PROBLEMS = """
  SELECT line, 'corner', 'a second reading of this session and corner in the file' FROM (
    SELECT line, row_number() OVER (
      PARTITION BY coalesce(token::text, lower(session)), corner ORDER BY line) AS k
    FROM bulk_rows) d WHERE k > 1
  UNION ALL
  SELECT b.line, 'corner', 'this session already has a reading of this corner' FROM bulk_rows b
   JOIN inspections_wheelreading r ON r.session_id = b.session_id AND r.corner = b.corner"""


def _problems(*parts: str) -> str:
    return (f"SELECT line, col, reason FROM ({' UNION ALL '.join(parts)}) p(line, col, reason) "
            f"ORDER BY line, col LIMIT {MAX_REPORTED}")


_CHECKED_INSERT = """
INSERT INTO inspections_wheelreading (session_id, corner, toe_deg, camber_deg, caster_deg)
SELECT session_id, corner, toe_deg, camber_deg, caster_deg FROM bulk_rows ORDER BY line
"""


def _refuse(cur, sql: str) -> None:
    cur.execute(sql)
    problems = [RowProblem(int(line) + 1, col, reason) for line, col, reason in cur.fetchall()]
    if problems:
        raise BulkRefused(problems)


def _checked(cur, data: bytes) -> int:
    """Copy as text, type once, refuse every bad row (BulkRefused) or insert all.

    The pair checks (a second reading of a session and corner) need a sort and a join; a file
    whose rows are all right on their own is inserted straight away and they run only if the
    unique constraint refuses the insert."""
    cur.execute(f"CREATE TEMP TABLE bulk_stage (line bigint GENERATED ALWAYS AS IDENTITY, "
                f"{_ROW.format(t='text')}) ON COMMIT DROP")
    _copy(cur, "bulk_stage", data)
    cur.execute(_TYPED)
    cur.execute(f"SELECT EXISTS ({_ROW_PROBLEMS})")
    if cur.fetchone()[0]:
        _refuse(cur, _problems(_ROW_PROBLEMS, _PAIR_PROBLEMS))
    try:
        with transaction.atomic():
            cur.execute(_CHECKED_INSERT)
            n = cur.rowcount
    except IntegrityError:
        _refuse(cur, _problems(_PAIR_PROBLEMS))
        raise
    cur.execute("DROP TABLE bulk_stage, bulk_rows")
    return n


# --- both --------------------------------------------------------------------------------------

def _copy(cur, table: str, data: bytes) -> int:
    """COPY the CSV (header skipped) into ``table``; returns the rows copied."""
    sql = f"COPY {table} ({_COLS}) FROM STDIN (FORMAT csv, HEADER true)"
    with connection.wrap_database_errors, cur.cursor.copy(sql) as cp:
        view = memoryview(data)
        step = 1 << 22
        for i in range(0, len(view), step):
            cp.write(view[i:i + step])
    return cur.cursor.rowcount


def _copy_problem(err: DataError) -> RowProblem:
    """The row and column a failed text COPY names (too many or too few fields, bad quoting,
    bytes that are not UTF-8), with PostgreSQL's reason."""
    diag = getattr(err.__cause__, "diag", None)
    where = _COPY_WHERE.search(getattr(diag, "context", None) or "")
    reason = getattr(diag, "message_primary", None) or str(err).splitlines()[0]
    if where is None:
        return RowProblem(1, "file", reason)
    named = _COPY_COLUMN.search(reason)
    return RowProblem(int(where.group(1)), where.group(2) or (named and named.group(1)) or "row",
                      reason)


def readings_load(csv_text: str | bytes | io.IOBase) -> int:
    """Load wheel readings from CSV (layout in the module docstring); returns rows stored.

    Angles are in degrees. All or nothing: on any refusal nothing is stored.

    Raises:
        BulkRefused: any bad row (nothing stored), or a header that is not :data:`COLUMNS`.
    """
    if connection.vendor != "postgresql":
        raise RuntimeError("the bulk load needs PostgreSQL (COPY)")
    data = csv_text.read() if hasattr(csv_text, "read") else csv_text
    if isinstance(data, str):
        data = data.encode()
    end = data.find(b"\n")
    first = data if end < 0 else data[:end]
    try:
        header = tuple(h.strip().lower() for h in first.decode("utf-8-sig").strip().split(","))
    except UnicodeDecodeError:
        header = ()
    if header != COLUMNS:
        raise BulkRefused([RowProblem(1, "header", "must be " + ",".join(COLUMNS))])
    mark = _END_MARK.search(data) if b"\\." in data else None
    if mark is not None:  # COPY would silently stop reading there
        raise BulkRefused([RowProblem(data.count(b"\n", 0, mark.start()) + 1, "row",
                                      "a line \\. alone is not a reading (it would end the data)")])
    with transaction.atomic(), connection.cursor() as cur:
        # the data rows use only _DIRECT_BYTES (header bytes aside: none of them is a newline)
        if data.translate(None, _DIRECT_BYTES) == first.translate(None, _DIRECT_BYTES):
            try:
                with transaction.atomic():
                    return _direct(cur, data)
            except (_NotDirect, DataError, IntegrityError):
                pass  # rolled back to the savepoint; the checked path names the bad rows
        try:
            with transaction.atomic():
                return _checked(cur, data)
        except DataError as err:
            if "COPY bulk_stage" not in (getattr(getattr(err.__cause__, "diag", None),
                                                 "context", None) or ""):
                raise
            raise BulkRefused([_copy_problem(err)]) from None
