"""Rows read as binary column arrays (analytics.column_read) against PostgreSQL's own answer.

The reference is the same query fetched the ordinary way (one row per record through Django's
cursor, values decoded from PostgreSQL's text output): every kind of column must give the same values. The
binary layout decoded is the one PostgreSQL's documentation gives for ``array_send`` (dimensions,
NULL flag, element type, then length-prefixed elements; "Binary Format" of COPY and the
``array_recv``/``array_send`` functions), and a ``timestamptz`` is sent as microseconds since
2000-01-01 UTC (PostgreSQL documentation, Date/Time Types: integer timestamps).
"""
from __future__ import annotations

import datetime as dt
import json
import math

import numpy as np
import pytest
from django.db import connection

from analytics.column_read import read_columns, read_columns_many

pytestmark = pytest.mark.django_db

ROWS = """
SELECT * FROM (VALUES
  (1::bigint, 2.5::float8, timestamptz '2026-03-01 10:15:30.123456+01', 'FL', 'as_found',
   'he said "toe, then camber"' || chr(10) || 'next line', '["play", "crack"]'::jsonb),
  (-9007199254740993, NULL, timestamptz '1999-12-31 23:59:59.999999+00', NULL, '',
   NULL, '[]'::jsonb),
  (4000000000, -0.0, timestamptz '2031-07-15 00:00:00-07', 'RR', 'as_adjusted', 'ünï – ✓',
   '{"a": [1, 2.5, null]}'::jsonb)
) v(i, f, t, c, k, txt, j)"""
COLUMNS = {"i": "int", "f": "float", "t": "time", "c": "code", "k": "code", "txt": "text",
           "j": "json"}


def _ns(value: dt.datetime) -> int:
    return int((value - dt.datetime(1970, 1, 1, tzinfo=dt.UTC)) / dt.timedelta(microseconds=1)) * 1000


def test_every_kind_of_column_reads_as_postgresql_answers_row_by_row():
    with connection.cursor() as cur:
        cur.execute(ROWS)
        expected = cur.fetchall()
    got = read_columns(ROWS, [], COLUMNS)
    assert len(got) == len(expected) == 3
    assert got["i"].dtype == np.int64 and got["f"].dtype == np.float64
    assert got["t"].dtype == np.int64
    assert all(got[c].dtype == object for c in ("c", "k", "txt", "j"))
    for row, (i, f, t, c, k, txt, j) in zip(got.itertuples(index=False), expected, strict=True):
        assert row.i == i
        assert (math.isnan(row.f) and f is None) or (row.f == f and math.copysign(1, row.f)
                                                      == math.copysign(1, f))
        assert row.t == _ns(t)
        assert row.c == (c or "") and row.k == k  # a NULL code reads as ""
        assert row.txt == txt  # free text keeps NULL as None
        assert row.j == json.loads(j)  # Django's cursor leaves JSON as text


def test_no_rows_give_empty_columns_of_their_kinds():
    got = read_columns(ROWS + " WHERE false", [], COLUMNS)
    assert len(got) == 0 and list(got.columns) == list(COLUMNS)
    assert got["i"].dtype == np.int64 and got["f"].dtype == np.float64 and got["t"].dtype == np.int64


def test_parameters_bind_as_in_the_ordinary_query_including_an_empty_list():
    sql = "SELECT x FROM generate_series(1, 10) x WHERE x = ANY(%s) ORDER BY x"
    assert read_columns(sql, [[3, 7, 11]], {"x": "int"})["x"].tolist() == [3, 7]
    assert read_columns(sql, [[]], {"x": "int"})["x"].tolist() == []


def test_rows_out_of_the_declared_order_are_put_back_in_it_stably():
    sql = "SELECT * FROM (VALUES (2, 1, 'a'), (1, 5, 'b'), (1, 5, 'c'), (1, 2, 'd')) v(g, t, s)"
    got = read_columns(sql, [], {"g": "int", "t": "int", "s": "code"}, order=("g", "t"))
    assert got["s"].tolist() == ["d", "b", "c", "a"]
    # in order already: left as it came (ties keep their order)
    got = read_columns(sql + " ORDER BY g, t, s DESC", [], {"g": "int", "t": "int", "s": "code"},
                       order=("g", "t"))
    assert got["s"].tolist() == ["d", "c", "b", "a"]


def test_a_null_where_none_may_be_and_a_code_holding_the_separator_are_refused():
    with pytest.raises(ValueError, match="without NULL"):
        read_columns("SELECT * FROM (VALUES (1), (NULL)) v(x)", [], {"x": "int"})
    with pytest.raises(ValueError, match="column 'c'"):
        read_columns("SELECT 1 AS x, 'F' || chr(31) || 'L' AS c", [], {"x": "int", "c": "code"})
    with pytest.raises(ValueError, match="timestamp outside"):
        read_columns("SELECT timestamptz 'infinity' AS t", [], {"t": "time"})


@pytest.mark.django_db(transaction=True)  # the reads' own transaction, not a test's savepoint
def test_several_reads_share_one_transaction_and_its_settings_and_leave_none_behind():
    sql = "SELECT current_setting('random_page_cost') AS rpc"
    now = "SELECT pg_current_xact_id()::text::bigint AS xid"
    with connection.cursor() as cur:
        cur.execute("SHOW random_page_cost")
        before = cur.fetchone()[0]
    a, b, c = read_columns_many([(sql, [], {"rpc": "text"}, ()),
                                 (now, [], {"xid": "int"}, ()), (now, [], {"xid": "int"}, ())],
                                settings=(("random_page_cost", "1.7"),))
    assert a["rpc"].tolist() == ["1.7"]  # set once, seen by every query of the read
    assert b["xid"].tolist() == c["xid"].tolist()  # one transaction for all of them
    with connection.cursor() as cur:
        cur.execute("SHOW random_page_cost")
        assert cur.fetchone()[0] == before != "1.7"
    # each query's frame is what read_columns gives for it alone
    got = read_columns_many([(ROWS, [], COLUMNS, ()), (ROWS + " WHERE false", [], COLUMNS, ())])
    alone = read_columns(ROWS, [], COLUMNS)
    assert got[0].astype(str).values.tolist() == alone.astype(str).values.tolist()
    assert len(got[1]) == 0 and list(got[1].columns) == list(COLUMNS)


def test_fetch_arrays_gives_numpy_arrays_equal_to_the_ordinary_fetch():
    from analytics.column_read import fetch_arrays

    sql = ("SELECT g, 'k' || g AS k, array_agg(x::float8 / 7 ORDER BY x) AS f, "
           "array_agg(x::bigint * 3 ORDER BY x) AS i FROM generate_series(1, 20) x, "
           "LATERAL (SELECT x %% 3 AS g) q WHERE x <> %s GROUP BY g ORDER BY g")
    with connection.cursor() as cur:
        cur.execute(sql, [5])
        expected = cur.fetchall()
    got = fetch_arrays(sql, [5])
    assert len(got) == len(expected) == 3
    for (g, k, f, i), (eg, ek, ef, ei) in zip(got, expected, strict=True):
        assert (g, k) == (eg, ek)
        assert isinstance(f, np.ndarray) and f.dtype == np.float64 and f.tolist() == ef
        assert isinstance(i, np.ndarray) and i.dtype == np.int64 and i.tolist() == ei
