"""The large invented fleet is written with COPY under the database constraints, and the bulk
load of wheel readings validates a whole file, naming each bad row, and stores all or nothing."""
import io

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
