"""Many rows read as a few column arrays: PostgreSQL aggregates each column of a query into one
array and sends the single result row in binary; numpy takes the numbers as they arrived.

Why not ``COPY … TO STDOUT``: COPY sends one message per row, and the client handles each in
Python (a 791-vehicle chunk is ≈ 120 000 messages, ≈ 0.08 CPU-s in psycopg before any parsing),
while the server formats every number and timestamp as text. One row of binary arrays costs the
client ≈ 0.006 s and the server less (measured on the 10 000-vehicle fleet's readings of one
chunk: client 0.084 → 0.006 CPU-s, server 0.13 → 0.11 CPU-s).

Kinds of column (``columns`` of :func:`read_columns`):

- ``"int"``: ``bigint`` array → ``int64``; the column must not be NULL;
- ``"float"``: ``double precision`` array, NULL as NaN → ``float64``;
- ``"time"``: ``timestamptz`` array → ``int64`` nanoseconds since 1970-01-01 UTC; not NULL;
- ``"code"``: short codes (choices such as corners and parts) joined by the ASCII unit
  separator and split on arrival → ``str``, NULL as ``""``, ``object``; a value holding the
  separator is refused;
- ``"text"``/``"json"``: ``json_agg`` of the values → Python objects (NULL as None), ``object``
  (for free text: ≈ 3× the client time of ``"code"``).

Order: the query's ``ORDER BY`` is kept by aggregating the rows of the sorted subquery with no
join or grouping above it, as PostgreSQL's documentation describes ("supplying the input values
from a sorted subquery will usually work", Aggregate Functions, 9.21); ``order`` names columns
whose non-decreasing order is checked on arrival, and restored (stable sort) if it were not.
"""
from __future__ import annotations

import contextlib

import numpy as np
import orjson
import pandas as pd
import psycopg
from django.db import connection, transaction
from psycopg.adapt import Loader
from psycopg.pq import Format

#: 2000-01-01 (PostgreSQL's binary timestamp epoch) in microseconds since 1970-01-01.
PG_EPOCH_US = 946_684_800_000_000
_INT8_ARRAY, _FLOAT8_ARRAY, _TIMESTAMPTZ_ARRAY, _JSON = 1016, 1022, 1185, 114


def _elements(data, fmt: str, elem_oid: int) -> np.ndarray:
    """The elements of a one-dimensional binary array with no NULL, each 8 bytes (big-endian
    ``fmt``), as PostgreSQL's ``array_send`` writes them: ndim, has-null flag, element type,
    then (size, lower bound) per dimension, then (length, bytes) per element."""
    b = memoryview(data)
    head = np.frombuffer(b, dtype=">i4", count=3)
    ndim, has_null, oid = (int(x) for x in head)
    if ndim == 0:
        return np.empty(0, dtype=fmt[1:])
    if ndim != 1 or has_null or oid != elem_oid:
        raise ValueError(f"expected a one-dimensional array of type {elem_oid} without NULL, "
                         f"got {ndim} dimension(s), type {oid}, NULL present: {bool(has_null)}")
    n = int(np.frombuffer(b, dtype=">i4", count=1, offset=12)[0])
    got = np.frombuffer(b, dtype=[("n", ">i4"), ("v", fmt)], count=n, offset=20)
    if n and not np.all(got["n"] == 8):
        raise ValueError("array elements are not 8 bytes each")
    return got["v"].astype(fmt[1:])


class _Int8Array(Loader):
    format = Format.BINARY

    def load(self, data) -> np.ndarray:
        return _elements(data, ">i8", 20)


class _Float8Array(Loader):
    format = Format.BINARY

    def load(self, data) -> np.ndarray:
        return _elements(data, ">f8", 701)


class _TimestamptzArray(Loader):
    format = Format.BINARY

    def load(self, data) -> np.ndarray:
        us = _elements(data, ">i8", 1184)
        if us.size and np.max(np.abs(us)) > 2**62 // 1000:  # ±infinity or beyond datetime64[ns]
            raise ValueError("a timestamp outside the years 1708–2292")
        return (us + PG_EPOCH_US) * 1000


class _Json(Loader):
    format = Format.BINARY  # json's binary form is its text

    def load(self, data):
        return orjson.loads(bytes(data))


SEPARATOR = "\x1f"  # ASCII unit separator
_AGGREGATE = {
    "code": "string_agg(coalesce(q.{c}::text, ''), E'\\x1f')",
    "int": "array_agg(q.{c}::bigint)",
    "float": "array_agg(coalesce(q.{c}::double precision, 'NaN'))",
    "time": "array_agg(q.{c}::timestamptz)",
    "text": "json_agg(q.{c})",
    "json": "json_agg(q.{c})",
}
_EMPTY = {"int": np.int64, "float": np.float64, "time": np.int64}


def _cursor() -> psycopg.Cursor:
    """A psycopg cursor on Django's connection whose binary arrays load as numpy arrays."""
    cur = psycopg.Cursor(connection.connection)
    for oid, loader in ((_INT8_ARRAY, _Int8Array), (_FLOAT8_ARRAY, _Float8Array),
                        (_TIMESTAMPTZ_ARRAY, _TimestamptzArray), (_JSON, _Json)):
        cur.adapters.register_loader(oid, loader)
    return cur


def columns_sql(sql: str, columns: dict[str, str]) -> str:
    """The one-row query of :func:`read_columns` around ``sql``."""
    aggs = ", ".join(_AGGREGATE[kind].format(c=name) for name, kind in columns.items())
    return f"SELECT {aggs} FROM ({sql}) q"


def read_columns(sql: str, params: list, columns: dict[str, str], *,
                 settings: tuple[tuple[str, str], ...] = (), order: tuple[str, ...] = ()
                 ) -> pd.DataFrame:
    """The rows of ``sql`` as a DataFrame with ``columns`` (name → kind, see the module), in one
    round trip. ``settings``: planner settings for this read's own transaction only
    (``set_config(…, true)``, as ``SET LOCAL``; inside a caller's transaction they last until that
    one ends). ``order``: columns whose non-decreasing order is checked (see the module)."""
    return read_columns_many([(sql, params, columns, order)], settings=settings)[0]


def read_columns_many(queries: list[tuple[str, list, dict[str, str], tuple[str, ...]]], *,
                      settings: tuple[tuple[str, str], ...] = ()) -> list[pd.DataFrame]:
    """:func:`read_columns` of several ``(sql, params, columns, order)`` at once: with
    ``settings``, one transaction and one ``set_config`` for all of them (each read its own
    ``BEGIN``/``set_config``/``COMMIT`` would be three more round trips); without, each query
    alone (a single statement is its own transaction)."""
    connection.ensure_connection()
    rows = []
    scope = transaction.atomic(savepoint=False) if settings else contextlib.nullcontext()
    with scope, _cursor() as cur:
        if settings:
            cur.execute("SELECT " + ", ".join("set_config(%s, %s, true)" for _ in settings),
                        [x for pair in settings for x in pair])
        for sql, params, columns, _order in queries:
            cur.execute(columns_sql(sql, columns), params, binary=True)
            rows.append(cur.fetchone())
    return [_frame(row, columns, order)
            for row, (_sql, _params, columns, order) in zip(rows, queries, strict=True)]


def fetch_arrays(sql: str, params: list) -> list[tuple]:
    """All rows of ``sql`` (Django's connection, so inside the caller's transaction), fetched in
    binary: ``bigint[]``, ``double precision[]`` and ``timestamptz[]`` columns arrive as numpy
    arrays (as the kinds ``"int"``, ``"float"`` and ``"time"`` above: no NULL element), other
    columns as psycopg loads them (text as ``str``, numbers as Python numbers)."""
    connection.ensure_connection()
    with _cursor() as cur:
        cur.execute(sql, params, binary=True)
        return cur.fetchall()


def _frame(row: tuple, columns: dict[str, str], order: tuple[str, ...]) -> pd.DataFrame:
    """The DataFrame of one aggregated result row (see :func:`read_columns`)."""
    data = {}
    n = None
    for (name, kind), value in zip(columns.items(), row, strict=True):
        if value is None:  # no rows: every aggregate is NULL
            value = np.empty(0, dtype=_EMPTY.get(kind, object))
        elif kind == "code":
            value = value.split(SEPARATOR)
        if n is None:
            n = len(value)
        elif len(value) != n:
            raise ValueError(f"column {name!r}: {len(value)} values for {n} rows (a code "
                             "holding the unit separator?)")
        if kind in ("code", "text", "json"):
            arr = np.empty(len(value), dtype=object)
            arr[:] = value
            value = pd.Series(arr, dtype=object, copy=False)  # not inferred as a string dtype
        data[name] = value
    frame = pd.DataFrame(data, copy=False)
    if order and len(frame) > 1 and not _non_decreasing(frame, order):
        frame = frame.sort_values(list(order), kind="stable", ignore_index=True)
    return frame


def _non_decreasing(frame: pd.DataFrame, order: tuple[str, ...]) -> bool:
    """Whether the rows are in non-decreasing lexicographic order of the ``order`` columns."""
    ok_so_far = np.ones(len(frame) - 1, dtype=bool)  # rows whose earlier keys tie so far
    for name in order:
        v = frame[name].to_numpy()
        d = v[1:] - v[:-1]
        if np.any(ok_so_far & (d < 0)):
            return False
        ok_so_far &= d == 0
        if not ok_so_far.any():
            return True
    return True
