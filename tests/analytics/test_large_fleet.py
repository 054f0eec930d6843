"""The large invented fleet is written with COPY under the database constraints, and the bulk
load of wheel readings validates a whole file, naming each bad row, and stores all or nothing."""
import io
import time

import pytest
from django.db import IntegrityError, connection, transaction

from analytics import bulk
from analytics.demo import large_fleet
from inspections.models import (
    AlignmentSession,
    ComponentCheck,
    Platform,
    ServiceEvent,
    Vehicle,
    WheelReading,
)

pytestmark = [
    pytest.mark.django_db,
    pytest.mark.skipif(connection.vendor != "postgresql", reason="COPY needs PostgreSQL"),
]


def test_the_generator_writes_the_counted_rows_labelled_demo():
    counts = large_fleet.build(vehicles=12, seed=3)
    assert counts["vehicles"] == Vehicle.objects.count() == 12
    assert counts["sessions"] == AlignmentSession.objects.count()
    assert counts["readings"] == WheelReading.objects.count() == 4 * counts["sessions"]
    assert counts["checks"] == ComponentCheck.objects.count()
    assert counts["events"] == ServiceEvent.objects.count()
    per_vehicle = AlignmentSession.objects.filter(kind="as_found").count() / 12
    assert 18 <= per_vehicle <= 23  # five years of visits every 80–100 days
    assert Platform.objects.filter(name__endswith="(demo)", is_demo=True).count() == 12
    assert not Vehicle.objects.filter(is_demo=False).exists()
    v = Vehicle.objects.first()
    assert v.plate_key == v.plate.replace(" ", "").upper()  # computed by the database
    assert not WheelReading.objects.filter(corner__in=["RL", "RR"], caster_deg__isnull=False).exists()
    assert AlignmentSession.objects.filter(notes="demo data", odometer_change_reason="").count() == \
        counts["sessions"]


@pytest.mark.django_db(transaction=True)  # VACUUM runs outside any transaction
def test_the_command_vacuums_the_tables_it_wrote_in_bulk():
    """Counted by PostgreSQL's own statistics view (``pg_stat_user_tables.vacuum_count``, PostgreSQL
    manual, "The Cumulative Statistics System")."""
    from django.core.management import call_command

    def vacuumed():
        with connection.cursor() as cur:
            cur.execute("SELECT pg_stat_clear_snapshot()")
            cur.execute("SELECT vacuum_count FROM pg_stat_user_tables "
                        "WHERE relname = 'inspections_wheelreading'")
            return cur.fetchone()[0]

    before = vacuumed()
    out = io.StringIO()
    call_command("build_large_fleet", vehicles=3, seed=2, stdout=out)
    assert "vacuumed" in out.getvalue()
    deadline = time.monotonic() + 5  # statistics reach the view asynchronously
    while vacuumed() == before and time.monotonic() < deadline:
        time.sleep(0.1)
    assert vacuumed() > before


def test_a_row_copied_outside_the_physical_range_is_refused_by_the_database():
    large_fleet.build(vehicles=2, seed=4)
    import pandas as pd

    session = AlignmentSession.objects.first()
    frame = pd.DataFrame({"session_id": [session.pk], "corner": ["XX"], "toe_deg": [25.0],
                          "camber_deg": [0.0]})
    with pytest.raises(IntegrityError), transaction.atomic():
        WheelReading.objects.filter(session=session).delete()
        large_fleet.copy_rows("inspections_wheelreading", list(frame.columns), frame)


def _csv(rows):
    return "session,corner,toe_deg,camber_deg,caster_deg\n" + "".join(
        ",".join(str(x) for x in r) + "\n" for r in rows)


def _sessions_without_readings(n):
    large_fleet.build(vehicles=1, seed=6)
    sessions = list(AlignmentSession.objects.order_by("pk")[:n])
    WheelReading.objects.filter(session__in=sessions).delete()
    return sessions


def test_the_bulk_load_stores_every_row_of_a_good_file():
    sessions = _sessions_without_readings(3)
    rows = [(s.client_token, c, 0.05, -0.4, "3.5" if c.startswith("F") else "")
            for s in sessions for c in ("FL", "FR", "RL", "RR")]
    before = WheelReading.objects.count()
    assert bulk.readings_load(_csv(rows)) == 12
    assert WheelReading.objects.count() == before + 12
    assert WheelReading.objects.filter(session=sessions[0], corner="RL", caster_deg__isnull=True).exists()


def test_the_bulk_load_refuses_a_bad_row_naming_line_and_column_and_stores_nothing():
    sessions = _sessions_without_readings(2)
    rows = [(s.client_token, c, 0.05, -0.4, "") for s in sessions for c in ("FL", "FR", "RL", "RR")]
    rows[5] = (sessions[1].client_token, "FR", 12.5, -0.4, "")  # toe beyond ±10°: line 7
    rows[6] = (sessions[1].client_token, "RL", 0.05, -0.4, "3.1")  # caster on the rear: line 8
    before = WheelReading.objects.count()
    with pytest.raises(bulk.BulkRefused) as refused:
        bulk.readings_load(io.BytesIO(_csv(rows).encode()))
    problems = {(p.line, p.column) for p in refused.value.problems}
    assert problems == {(7, "toe_deg"), (8, "caster_deg")}
    assert "physical range" in str(refused.value) and "front axle only" in str(refused.value)
    assert WheelReading.objects.count() == before


def test_the_bulk_load_refuses_unknown_sessions_duplicates_and_a_wrong_header():
    sessions = _sessions_without_readings(1)
    s = sessions[0].client_token
    text = _csv([(s, "FL", 0.1, 0.0, ""), (s, "FL", 0.1, 0.0, ""),
                 ("00000000-0000-4000-8000-000000000000", "RR", 0.1, 0.0, ""), (s, "XX", "a", 0, "")])
    with pytest.raises(bulk.BulkRefused) as refused:
        bulk.readings_load(text)
    got = {(p.line, p.column, p.reason) for p in refused.value.problems}
    assert (3, "corner", "a second reading of this session and corner in the file") in got
    assert (4, "session", "no alignment session with this token") in got
    assert (5, "corner", "must be FL, FR, RL or RR") in got and (5, "toe_deg", "must be a number") in got
    with pytest.raises(bulk.BulkRefused, match="header"):
        bulk.readings_load("vin,corner\n")


def _statements(fn):
    """Run ``fn`` and return the SQL statements it sent through Django's cursors."""
    from django.test.utils import CaptureQueriesContext

    with CaptureQueriesContext(connection) as ctx:
        result = fn()
    return result, " ".join(q["sql"] for q in ctx.captured_queries)


def test_a_well_formed_file_is_stored_by_one_insert_without_the_text_staging():
    sessions = _sessions_without_readings(2)
    rows = [(str(s.client_token).upper() if i else s.client_token, c, "4.2e-2", -0.4,
             "-3.5" if c.startswith("F") else "") for i, s in enumerate(sessions)
            for c in ("FL", "FR", "RL", "RR")]
    stored, sql = _statements(lambda: bulk.readings_load(_csv(rows)))
    assert stored == 8
    assert "bulk_typed" in sql and "bulk_stage" not in sql and sql.count("INSERT INTO") == 1
    got = WheelReading.objects.get(session=sessions[1], corner="FR")
    assert (got.toe_deg, got.camber_deg, got.caster_deg) == (0.042, -0.4, -3.5)


def test_quoted_fields_and_tokens_without_hyphens_take_the_checked_path_and_store_the_same():
    sessions = _sessions_without_readings(2)
    rows = [(str(sessions[0].client_token).replace("-", ""), "FL", 0.05, -0.4, "3.5"),
            (sessions[0].client_token, '"RL"', '"0.1"', -0.2, ""),
            (sessions[1].client_token, "RR", "1e-400", "-0.25", "")]
    stored, sql = _statements(lambda: bulk.readings_load(_csv(rows)))
    assert stored == 3 and "bulk_stage" in sql
    assert WheelReading.objects.get(session=sessions[0], corner="FL").caster_deg == 3.5
    assert WheelReading.objects.get(session=sessions[0], corner="RL").toe_deg == 0.1
    assert WheelReading.objects.get(session=sessions[1], corner="RR").toe_deg == 0.0


@pytest.mark.parametrize(("column", "text", "reason"), [
    ("toe_deg", "NaN", "must be a number"),
    ("camber_deg", "-Infinity", "must be a number"),
    ("toe_deg", " 0.1", "must be a number"),  # a space PostgreSQL's float8 input skips
    ("camber_deg", "0.1 ", "must be a number"),
    ("caster_deg", "0x1", "must be a number or empty"),  # hexadecimal, read by strtod
    ("toe_deg", "1e400", "outside the physical range ±10°"),  # beyond float8
    ("camber_deg", "1e5000", "must be a number"),  # an exponent beyond what is read
    ("toe_deg", "1e", "must be a number"),
    ("session", "{%s}", "not a session token (UUID)"),  # braces PostgreSQL's uuid accepts
    ("session", "%s-", "not a session token (UUID)"),
    ("corner", "fl", "must be FL, FR, RL or RR"),
])
def test_text_postgresql_would_read_but_the_layout_does_not_is_refused(column, text, reason):
    sessions = _sessions_without_readings(1)
    token = str(sessions[0].client_token)
    fields = dict(zip(bulk.COLUMNS, (token, "FL", "0.1", "-0.2", ""), strict=True))
    fields[column] = text % token if "%s" in text else text
    rows = [(token, c, 0.1, -0.2, "") for c in ("FR", "RL", "RR")] + [tuple(fields.values())]
    before = WheelReading.objects.count()
    with pytest.raises(bulk.BulkRefused) as refused:
        bulk.readings_load(_csv(rows))
    assert [(p.line, p.column, p.reason) for p in refused.value.problems] == [(5, column, reason)]
    assert WheelReading.objects.count() == before


@pytest.mark.parametrize("quoted", [False, True], ids=["direct", "checked"])
def test_a_file_loaded_twice_or_with_a_repeated_row_is_refused_naming_the_lines(quoted):
    sessions = _sessions_without_readings(2)
    corner = '"{}"' if quoted else "{}"
    rows = [(s.client_token, corner.format(c), 0.05, -0.4, "") for s in sessions
            for c in ("FL", "FR", "RL", "RR")]
    assert bulk.readings_load(_csv(rows)) == 8
    stored = WheelReading.objects.count()
    with pytest.raises(bulk.BulkRefused) as refused:
        bulk.readings_load(_csv(rows))
    assert [(p.line, p.column, p.reason) for p in refused.value.problems] == [
        (line, "corner", "this session already has a reading of this corner")
        for line in range(2, 10)]
    WheelReading.objects.filter(session=sessions[1]).delete()
    again = rows[4:] + [rows[5]]  # the second session's four corners, FR twice (line 6)
    with pytest.raises(bulk.BulkRefused) as refused:
        bulk.readings_load(_csv(again))
    assert [(p.line, p.column, p.reason) for p in refused.value.problems] == [
        (6, "corner", "a second reading of this session and corner in the file")]
    assert WheelReading.objects.count() == stored - 4


def test_a_row_with_a_wrong_number_of_fields_is_refused_with_its_line():
    sessions = _sessions_without_readings(1)
    s = sessions[0].client_token
    text = _csv([(s, "FL", 0.1, 0.0, ""), (s, "FR", 0.1, 0.0, "", "extra")])
    with pytest.raises(bulk.BulkRefused) as refused:
        bulk.readings_load(text)
    (problem,) = refused.value.problems
    assert (problem.line, problem.column) == (3, "row") and "extra data" in problem.reason
    with pytest.raises(bulk.BulkRefused) as refused:
        bulk.readings_load(_csv([(s, "FL", 0.1)]))
    (problem,) = refused.value.problems
    assert (problem.line, problem.column) == (2, "camber_deg") and "missing" in problem.reason
    assert not WheelReading.objects.filter(session=sessions[0]).exists()


def test_a_refusal_leaves_the_callers_earlier_writes_in_its_transaction():
    sessions = _sessions_without_readings(1)
    s = sessions[0]
    with transaction.atomic():
        WheelReading.objects.create(session=s, corner="RR", toe_deg=0.1, camber_deg=0.0)
        with pytest.raises(bulk.BulkRefused):
            bulk.readings_load(_csv([(s.client_token, "FL", 0.1, 0.0, ""),
                                     (s.client_token, "RL", 0.1, 0.0, 4.0)]))
        assert bulk.readings_load(_csv([(s.client_token, "FL", 0.1, 0.0, "")])) == 1
    assert sorted(WheelReading.objects.filter(session=s).values_list("corner", flat=True)) == [
        "FL", "RR"]


def test_a_line_that_would_end_the_copy_early_is_refused_not_cut_short():
    sessions = _sessions_without_readings(1)
    s = sessions[0].client_token
    text = _csv([(s, "FL", 0.1, 0.0, "")]) + "\\.\n" + _csv([(s, "FR", 0.1, 0.0, "")]).split(
        "\n", 1)[1]
    with pytest.raises(bulk.BulkRefused) as refused:
        bulk.readings_load(text)
    assert [(p.line, p.column) for p in refused.value.problems] == [(3, "row")]
    assert not WheelReading.objects.filter(session=sessions[0]).exists()
