"""Writing a chunk's results with PostgreSQL's bulk paths: result rows staged with ``COPY`` and
inserted once per input key (``ON CONFLICT DO NOTHING RETURNING``), then their advice and
drift-rate rows copied, compliance outcomes stored once each."""
from __future__ import annotations

import datetime as dt
import re

import orjson
from django.db import connection, transaction

from analytics.core.advice import MODEL_VERSION, SEVERITIES
from inspections.models import Vehicle

from .models import (
    AdviceItem,
    AnalysisResult,
    compact_payload,
    drift_rate_values,
    payload_flips,
)


def json_bytes(obj) -> bytes:
    """UTF-8 JSON of a payload part: ``orjson`` (several times faster than ``json.dumps``; the
    same shortest float representations; numpy scalars as numbers)."""
    return orjson.dumps(obj, option=orjson.OPT_SERIALIZE_NUMPY)


def _json(obj) -> str:
    """:func:`json_bytes` as text."""
    return json_bytes(obj).decode()


def payload_json(payload: dict, advice: list[bytes]) -> bytes:
    """The payload's JSON (UTF-8) with its advice list made of the items' JSON already written."""
    return json_bytes({**payload, "advice": [orjson.Fragment(b) for b in advice]})


def copy_escape(value: bytes) -> bytes:
    """A value for COPY's text format (PostgreSQL documentation, COPY, "Text Format"): backslash,
    newline, carriage return and tab written as backslash sequences."""
    return value.replace(b"\\", b"\\\\").replace(b"\n", b"\\n").replace(b"\r", b"\\r") \
        .replace(b"\t", b"\\t")


def stage_line(vehicle_id: int, input_key: str, payload_json: bytes, flips: bool) -> bytes:
    """One row of the results' staging table in COPY's text format, the payload as written by
    :func:`payload_json`: JSON text has no raw newline, carriage return or tab (RFC 8259 escapes
    them inside strings, and orjson writes no whitespace between tokens), so only its
    backslashes are doubled — the same bytes psycopg's ``write_row`` would send, without
    decoding and re-encoding 16 KB per vehicle."""
    return b"%d\t%s\t%s\t%s\n" % (vehicle_id, copy_escape(input_key.encode()),
                                  payload_json.replace(b"\\", b"\\\\"), b"t" if flips else b"f")


def copy_rows(cur, table: str, columns: tuple[str, ...], rows) -> None:
    """``COPY table (columns) FROM STDIN`` of an iterable of tuples (psycopg adapts the values)."""
    with cur.copy(f"COPY {table} ({', '.join(columns)}) FROM STDIN") as cp:
        for row in rows:
            cp.write_row(row)


_lz4: bool | None = None  # whether the server has lz4, asked once per process


def copy_staged(cur, stage: str, columns_sql: str, columns: tuple[str, ...], rows=(),
                lines=None) -> None:
    """A temporary table ``stage`` filled with ``COPY`` from ``rows`` (tuples psycopg adapts) or
    ``lines`` (rows in COPY's text format, bytes each). Its JSON columns (``json``/``jsonb``)
    compress with lz4 where the server has it (see migrations 0007, 0009): staged values move
    into the stored tables as they were compressed.

    The table is made once per database session (``CREATE TEMP TABLE IF NOT EXISTS … ON COMMIT
    DELETE ROWS``) and emptied before use (rows staged earlier in an enclosing transaction),
    in one round trip: creating and dropping it for every write cost ≈ 3–4 ms of a
    single-vehicle job and left dead rows in the system catalogues each time (on a server
    without autovacuum they pile up). Workers keep their connection between jobs, so the
    table is reused; a rolled-back creation is simply made again."""
    global _lz4
    if _lz4 is None:
        cur.execute("SELECT 1 FROM pg_settings WHERE name = 'default_toast_compression' "
                    "AND 'lz4' = ANY(enumvals)")
        _lz4 = cur.fetchone() is not None
    if _lz4:
        columns_sql = re.sub(r" (jsonb|json)\b", r" \1 COMPRESSION lz4", columns_sql)
    # no parameters: both statements go in one message (the simple query protocol)
    cur.execute(f"CREATE TEMP TABLE IF NOT EXISTS {stage} ({columns_sql}) ON COMMIT DELETE ROWS; "
                f"DELETE FROM {stage}")
    if lines is None:
        copy_rows(cur, stage, columns, rows)
        return
    with cur.copy(f"COPY {stage} ({', '.join(columns)}) FROM STDIN") as cp:
        for line in lines:
            cp.write(line)


RESULT_INSERT_SQL = """INSERT INTO "analytics_analysisresult"
       (vehicle_id, input_key, model_version, computed_at, payload, flips_to_toe_out)
SELECT vehicle_id, input_key, %s, now(), payload, flips FROM fleet_result_stage ORDER BY vehicle_id
ON CONFLICT (vehicle_id, input_key, model_version) DO NOTHING
RETURNING id, vehicle_id"""


def _store_outcomes(cur, outcomes: dict[str, dict]) -> None:
    """:func:`analytics.models.outcomes_store` with ``COPY``: staged, then inserted where new."""
    if not outcomes:
        return
    copy_staged(cur, "fleet_outcome_stage", "key text, entry jsonb", ("key", "entry"),
                ((k, _json(e)) for k, e in sorted(outcomes.items())))
    cur.execute('INSERT INTO "analytics_complianceoutcome" (key, entry, created_at) '
                "SELECT key, entry, now() FROM fleet_outcome_stage ORDER BY key "
                "ON CONFLICT (key) DO NOTHING")


def write_results(platform_id: int, keys: dict[int, str], results: dict[int, tuple[dict, list]],
                  owner_of: dict[int, int | None]) -> int:
    """Store results (once per input key) and their advice; returns results inserted.
    ``owner_of``: each vehicle's owner id (None: no owner, no owner report).

    PostgreSQL's bulk path: the results are copied into a temporary table and inserted from it
    with ``ON CONFLICT DO NOTHING RETURNING`` — the rows returned are the ones this run stored
    (a concurrent or earlier run that stored the same inputs wrote its advice with them in its
    own transaction). Advice and drift-rate rows of those results are written with ``COPY``.
    """
    if not results:
        return 0
    from .services import _advice_key, owner_report_on_commit

    vids = sorted(results)
    previous: dict[int, set] = {}
    owners = [v for v in vids if owner_of.get(v) is not None]
    for v, k in AdviceItem.objects.filter(vehicle_id__in=owners).values_list("vehicle_id", "key"):
        previous.setdefault(v, set()).add(k)
    stored: dict[int, dict] = {}
    outcomes: dict[str, dict] = {}
    memo: dict[int, str] = {}  # the cached compliance entries are shared between payloads
    # each advice item's JSON is written twice (in the payload and as its row's body): made once
    bodies: dict[int, list[bytes]] = {}
    for v in vids:
        stored[v], used = compact_payload(results[v][0], memo)
        outcomes.update(used)
        bodies[v] = [json_bytes(a) for a in results[v][0]["advice"]]
    with transaction.atomic(), connection.cursor() as dj:
        cur = dj.cursor  # the psycopg cursor
        _store_outcomes(cur, outcomes)
        copy_staged(cur, "fleet_result_stage",
                    "vehicle_id bigint, input_key text, payload json, flips boolean",
                    ("vehicle_id", "input_key", "payload", "flips"),
                    lines=(stage_line(v, keys[v], payload_json(stored[v], bodies[v]),
                                      payload_flips(results[v][0])) for v in vids))
        cur.execute(RESULT_INSERT_SQL, [MODEL_VERSION])
        mine = {int(v): int(rid) for rid, v in cur.fetchall()}
        if not mine:
            return 0
        mine_ids = sorted(mine)
        cur.execute("DELETE FROM analytics_adviceitem WHERE vehicle_id = ANY(%s) "
                    "AND NOT (result_id = ANY(%s))", [mine_ids, list(mine.values())])
        copy_rows(cur, "analytics_adviceitem", (
            "result_id", "vehicle_id", "key", "kind", "severity", "urgency_rank", "what",
            "due_date", "due_km", "corner", "defect_category", "body"), (
            (mine[v], v, _advice_key(a), a["kind"], a["severity"],
             SEVERITIES.index(a["severity"]), a["what"][:300],
             dt.date.fromisoformat(a["due_date"]) if a["due_date"] else None,
             int(a["due_km"]) if a["due_km"] is not None else None,
             a["corner"] or "", a["defect_category"] or "", body.decode())
            for v in mine_ids for a, body in zip(results[v][0]["advice"], bodies[v], strict=True)))
        cur.execute("DELETE FROM analytics_driftrate WHERE vehicle_id = ANY(%s)", [mine_ids])
        copy_rows(cur, "analytics_driftrate", (
            "vehicle_id", "result_id", "platform_id", "corner", "angle", "slope_deg_per_10k"), (
            (v, mine[v], platform_id, corner, angle, slope)
            for v in mine_ids for corner, angle, slope in drift_rate_values(results[v][0])))
        for v in owners:
            if v in mine:
                r = AnalysisResult(pk=mine[v], vehicle=Vehicle(pk=v, owner_id=owner_of[v]),
                                   input_key=keys[v],
                                   model_version=MODEL_VERSION, payload=stored[v])
                owner_report_on_commit(result=r, previous_keys=previous.get(v, set()))
    return len(mine)
