"""The vectorised fleet recompute gives the per-vehicle analysis, writes once and covers every
vehicle exactly once. Invented demo data only (the small demo and a small large-fleet build)."""
import datetime as dt
import json
import math

import pytest
from django.db import connection

from analytics import analysis, result_write, services
from analytics import fleet_recompute as fr
from analytics import platform_cache as pc
from analytics.column_read import read_columns
from analytics.demo import large_fleet, scenario
from analytics.inputs import vehicle_data
from analytics.models import AdviceItem, AnalysisResult
from inspections.models import Vehicle

pytestmark = [
    pytest.mark.django_db,
    pytest.mark.skipif(connection.vendor != "postgresql", reason="the vectorised path reads with COPY"),
]

# Tolerances: the vectorised arithmetic is the core's own, element by element; sums may be taken
# in another order, so slopes agree to a relative 1e-9 (deg/10 000 km) and forecast distances to
# 1e-6 km; dates, kinds and severities must be equal.
SLOPE_RTOL = 1e-9
SLOPE_ATOL = 1e-12
KM_ATOL = 1e-6


def _fleet():
    scenario.build(password="pw-fleet-test", vans=4, hire_cars=4, private_cars=2)
    large_fleet.build(vehicles=24, seed=5)
    services.fleet_recompute()  # pooled rates in place, as the nightly run leaves them


def _close(a, b, rtol, atol):
    if a is None or b is None:
        return a is b
    return math.isclose(a, b, rel_tol=rtol, abs_tol=atol)


def test_the_vectorised_analysis_gives_the_per_vehicle_advice_and_drift_slopes():
    _fleet()
    compared = notes = 0
    for platform_id, ids in fr.chunks(size=1000):
        fast = fr.analyse_chunk(platform_id, ids)
        for vid in ids:
            vehicle = Vehicle.objects.select_related("platform", "workshop").get(pk=vid)
            ref, _ = analysis.analyse(vehicle_data(vehicle))
            got = fast[vid][0]
            key = [(a["kind"], a["corner"], a["what"], a["due_date"], a["severity"])
                   for a in ref["advice"]]
            assert [(a["kind"], a["corner"], a["what"], a["due_date"], a["severity"])
                    for a in got["advice"]] == key, vehicle
            for a, b in zip(ref["advice"], got["advice"], strict=True):
                assert _close(a["due_km"], b["due_km"], 0.0, KM_ATOL)
            assert set(ref["drift"]) == set(got["drift"])
            for name, entry in ref["drift"].items():
                other = got["drift"][name]
                for field in ("slope_deg_per_10k", "shrunk_slope_deg_per_10k", "slope_deg_per_year"):
                    assert _close(entry.get(field), other.get(field), SLOPE_RTOL, SLOPE_ATOL), \
                        (vehicle, name, field)
                assert entry.get("steps") == other.get("steps")
                if "forecast" in entry:
                    for f in ("early_date", "likely_date", "late_date", "status", "side"):
                        assert entry["forecast"][f] == other["forecast"][f], (vehicle, name, f)
            assert got["compliance"] == ref["compliance"]
            assert set(got["wear"]) == set(ref["wear"])
            for name, entry in ref["wear"].items():
                other = got["wear"][name]
                assert other.get("note") == entry.get("note"), (vehicle, name)
                notes += "note" in entry
                if "forecast" in entry:
                    for f in ("early_date", "likely_date", "late_date", "status", "side"):
                        assert entry["forecast"][f] == other["forecast"][f], (vehicle, name, f)
            compared += 1
    assert compared == Vehicle.objects.count() == 34
    assert notes  # some series explain why they have no forecast (a part replaced since)


def test_a_rerun_writes_each_result_and_its_advice_once():
    _fleet()
    results, advice = AnalysisResult.objects.count(), AdviceItem.objects.count()
    assert results == Vehicle.objects.count() and advice > 0
    assert services.fleet_recompute() == Vehicle.objects.count()
    assert (AnalysisResult.objects.count(), AdviceItem.objects.count()) == (results, advice)
    platform_id, ids = fr.chunks()[0]
    assert fr.recompute_chunk(platform_id, ids).written == 0


def test_a_chunk_pauses_the_cyclic_collector_only_while_it_runs_and_frees_its_cycles():
    import gc
    import weakref

    large_fleet.build(vehicles=6, seed=4)
    platform_id, ids = fr.chunks()[0]
    seen = []

    class Node:  # a reference cycle left behind by the chunk
        pass

    real = fr._recompute_chunk

    def spy(*args, **kwargs):
        seen.append(gc.isenabled())
        a, b = Node(), Node()
        a.other, b.other = b, a
        seen.append(weakref.ref(a))
        return real(*args, **kwargs)

    fr._recompute_chunk = spy
    try:
        assert gc.isenabled()
        assert fr.recompute_chunk(platform_id, ids).written == len(ids)
        assert seen[0] is False and gc.isenabled()
        assert seen[1]() is None  # collected when the chunk ended
        gc.disable()  # a caller that runs without the collector keeps it off
        try:
            fr.recompute_chunk(platform_id, ids)
            assert not gc.isenabled()
        finally:
            gc.enable()
    finally:
        fr._recompute_chunk = real


@pytest.mark.django_db(transaction=True)  # the read's own transaction, not a test's savepoint
def test_chunk_reads_are_planned_with_their_own_settings_for_their_own_transaction_only():
    sql = ("SELECT current_setting('max_parallel_workers_per_gather') AS par, "
           "current_setting('random_page_cost') AS rpc")
    with connection.cursor() as cur:
        cur.execute(sql)
        before = cur.fetchone()
    got = read_columns(sql, [], {"par": "text", "rpc": "text"}, settings=fr.READ_SETTINGS)
    assert got.iloc[0].tolist() == [v for _, v in fr.READ_SETTINGS]
    with connection.cursor() as cur:  # nothing left behind for the connection's next queries
        cur.execute(sql)
        assert cur.fetchone() == before
    assert before != tuple(v for _, v in fr.READ_SETTINGS)


def test_the_chunks_cover_every_vehicle_exactly_once_within_one_platform():
    large_fleet.build(vehicles=30, seed=9)
    chunks = fr.chunks(size=4)
    flat = [v for _, ids in chunks for v in ids]
    assert sorted(flat) == sorted(Vehicle.objects.values_list("pk", flat=True))
    assert len(flat) == len(set(flat))
    for platform_id, ids in chunks:
        assert 0 < len(ids) <= 4
        assert set(Vehicle.objects.filter(pk__in=ids).values_list("platform_id", flat=True)) == {
            platform_id}


def test_a_new_session_changes_the_input_key_and_only_that_vehicle_is_recomputed():
    _fleet()
    platform_id, ids = fr.chunks()[0]
    vehicle = Vehicle.objects.get(pk=ids[0])
    session = vehicle.alignmentsession_set.order_by("-measured_at").first()
    from inspections.models import AlignmentSession, WheelReading

    new = AlignmentSession.objects.create(
        vehicle=vehicle, workshop=vehicle.workshop, technician=session.technician,
        measured_at=session.measured_at + dt.timedelta(days=1), odometer_km=session.odometer_km + 50,
        kind="as_found", equipment_id="RIG", equipment_calibrated_on=dt.date(2024, 1, 1))
    for r in session.readings.all():
        WheelReading.objects.create(session=new, corner=r.corner, toe_deg=r.toe_deg,
                                    camber_deg=r.camber_deg, caster_deg=r.caster_deg)
    assert fr.recompute_chunk(platform_id, ids).written == 1
    assert AnalysisResult.objects.filter(vehicle=vehicle).count() == 2


def test_a_whole_platform_chunk_pools_from_its_own_read_as_the_separate_pool_phase_does():
    from analytics.models import PooledRate
    from inspections.models import Platform

    _fleet()
    fields = ("corner", "angle", "mean", "mean_se", "tau2", "vehicles", "method")
    platform_id, ids = max(fr.chunks(), key=lambda c: len(c[1]))
    assert sorted(ids) == sorted(Vehicle.objects.filter(platform_id=platform_id)
                                 .values_list("pk", flat=True))
    PooledRate.objects.filter(platform_id=platform_id).delete()
    fr.platform_pool_fast(platform=Platform.objects.get(pk=platform_id))
    separate = sorted(PooledRate.objects.filter(platform_id=platform_id).values_list(*fields))
    assert separate  # the demo platforms have enough vehicles to pool
    PooledRate.objects.filter(platform_id=platform_id).delete()
    AnalysisResult.objects.filter(vehicle_id__in=ids).delete()
    st = fr.recompute_chunk(platform_id, ids, pool=True)
    assert sorted(PooledRate.objects.filter(platform_id=platform_id).values_list(*fields)) == separate
    assert st.written == AnalysisResult.objects.filter(vehicle_id__in=ids).count() == len(ids)
    assert fr.recompute_chunk(platform_id, ids, pool=True).written == 0  # pooled rates unchanged


def test_stored_results_share_compliance_outcomes_and_expand_to_the_whole_analysis():
    from analytics.models import OUTCOME_INLINE, ComplianceOutcome, expand_payload

    _fleet()
    for vehicle in Vehicle.objects.select_related("platform", "workshop"):
        stored = services.latest_result(vehicle).payload
        ref, _ = analysis.analyse(vehicle_data(vehicle))
        for entry in stored["compliance"].values():
            assert set(entry) <= {"outcome", *OUTCOME_INLINE}  # by reference, figures inline
        # as stored: JSON (tuples become lists; floats round-trip exactly)
        assert expand_payload(stored)["compliance"] == json.loads(json.dumps(ref["compliance"]))
    # vehicles whose parts were found alike share rows: fewer rows than corners analysed
    n_corners = 4 * Vehicle.objects.count()
    assert 0 < ComplianceOutcome.objects.count() < n_corners


def test_a_worker_s_platform_cache_is_rebuilt_when_a_spec_or_a_pooled_rate_changes():
    from analytics.models import PooledRate
    from inspections.models import AlignmentSpec

    _fleet()
    platform_id, _ids = fr.chunks()[0]
    first = pc.platform_cache(platform_id)
    assert pc.platform_cache(platform_id) is first  # nothing changed: kept
    spec = AlignmentSpec.objects.filter(platform_id=platform_id).first()
    spec.tolerance_deg += 0.01
    spec.save()
    second = pc.platform_cache(platform_id)
    assert second is not first
    assert second.specs[(spec.axle, spec.quantity)].tolerance_deg == spec.tolerance_deg
    PooledRate.objects.filter(platform_id=platform_id).update(mean=0.0)
    assert pc.platform_cache(platform_id) is not second


def test_warming_builds_each_platform_s_cache_once_and_respects_its_budget():
    from inspections.models import Platform

    _fleet()
    pc._CACHES.clear()
    assert pc.warm_caches() == Platform.objects.count()
    cache = pc.platform_cache(fr.chunks()[0][0])
    assert cache._toe_sign  # the rear criteria are built
    assert pc.platform_cache(fr.chunks()[0][0]) is cache  # and kept for the jobs
    pc._CACHES.clear()
    assert pc.warm_caches(budget_s=-1.0) == 0  # no time: nothing warmed, nothing fails


def test_a_vehicle_whose_odometer_goes_backwards_is_left_out_of_its_platform_s_pool():
    from analytics.models import PooledRate
    from inspections.models import AlignmentSession, Platform, WheelReading

    _fleet()
    platform_id, ids = max(fr.chunks(), key=lambda c: len(c[1]))
    vehicle = Vehicle.objects.get(pk=ids[0])
    last = vehicle.alignmentsession_set.order_by("-measured_at").first()
    back = AlignmentSession.objects.create(  # a later visit with a lower reading: refused
        vehicle=vehicle, workshop=vehicle.workshop, technician=last.technician,
        measured_at=last.measured_at + dt.timedelta(days=20), odometer_km=last.odometer_km - 5000,
        kind="as_found", equipment_id="RIG", equipment_calibrated_on=dt.date(2024, 1, 1))
    for r in last.readings.all():
        WheelReading.objects.create(session=back, corner=r.corner, toe_deg=r.toe_deg,
                                    camber_deg=r.camber_deg, caster_deg=r.caster_deg)
    platform = Platform.objects.get(pk=platform_id)
    fields = ("corner", "angle", "mean", "mean_se", "tau2", "vehicles", "method")
    PooledRate.objects.filter(platform=platform).delete()
    services.platform_pool(platform=platform)  # the per-vehicle reference
    reference = sorted(PooledRate.objects.filter(platform=platform).values_list(*fields))
    PooledRate.objects.filter(platform=platform).delete()
    AnalysisResult.objects.filter(vehicle_id__in=ids).delete()
    st = fr.recompute_chunk(platform_id, ids, pool=True)  # pools, then analyses the others
    pooled = sorted(PooledRate.objects.filter(platform=platform).values_list(*fields))
    assert [r[:2] + (r[5], r[6]) for r in pooled] == [r[:2] + (r[5], r[6]) for r in reference]
    for a, b in zip(pooled, reference, strict=True):
        assert all(math.isclose(x, y, rel_tol=1e-9, abs_tol=1e-15)
                   for x, y in zip(a[2:5], b[2:5], strict=True))
    assert st.written == len(ids) - 1
    assert not AnalysisResult.objects.filter(vehicle=vehicle).exists()


def test_the_analysis_reuses_the_pooling_s_drift_stacks_only_where_they_flag_the_same():
    """Pooling segments the drift series at as-adjusted sessions, the analysis also at
    alignment-adjusted service events. Recorded together (the demo) they flag the same readings
    and the analysis takes the pooling's fits as they are; an adjustment event alone between two
    as-found sessions makes them differ, and the analysis fits its own. Either way its payloads
    are those it computes without the pooling's stacks."""
    from django.contrib.auth import get_user_model

    from inspections.models import AlignmentSession, Platform, ServiceEvent

    _fleet()
    platform_id, ids = max(fr.chunks(), key=lambda c: len(c[1]))
    fitted = []
    real = fr._segment_fits

    def spy(*args, **kwargs):
        fitted.append(1)
        return real(*args, **kwargs)

    def compare(expect_reuse: bool):
        frames = fr.read_frames(ids)
        pooled = {}
        fr.platform_pool_fast(platform=Platform.objects.get(pk=platform_id),
                              readings=frames.readings, stacks_out=pooled)
        fitted.clear()
        reused = fr.analyse_chunk(platform_id, ids, frames=frames, drift_reuse=pooled["stacks"])
        assert (not fitted) is expect_reuse
        own = fr.analyse_chunk(platform_id, ids, frames=frames)
        assert list(reused) == list(own)
        for vid in own:
            assert json.dumps(reused[vid][0], default=float) == json.dumps(own[vid][0], default=float)
            assert repr(reused[vid][1]) == repr(own[vid][1])

    fr._segment_fits = spy
    try:
        compare(expect_reuse=True)
        # an alignment adjusted between two as-found sessions of a vehicle with no adjustment
        # between them: recorded without an as-adjusted session
        gap = None
        for vid in ids:
            sessions = list(AlignmentSession.objects.filter(vehicle_id=vid).order_by(
                "measured_at").values_list("kind", "measured_at", "odometer_km"))
            events = list(ServiceEvent.objects.filter(
                vehicle_id=vid, kind="alignment_adjusted").values_list("performed_at", flat=True))
            for (k0, t0, km0), (k1, t1, _) in zip(sessions, sessions[1:], strict=False):
                if k0 == k1 == "as_found" and not any(t0 < t <= t1 for t in events):
                    gap = vid, t0, t1, km0
            if gap:
                break
        assert gap, "the demo fleet has as-found sessions with no adjustment between them"
        vid, t0, t1, km0 = gap
        vehicle = Vehicle.objects.get(pk=vid)
        ServiceEvent.objects.create(vehicle=vehicle, workshop=vehicle.workshop,
                                    recorded_by=get_user_model().objects.first(),
                                    performed_at=t0 + (t1 - t0) / 2, odometer_km=km0 + 1,
                                    kind="alignment_adjusted")
        compare(expect_reuse=False)
    finally:
        fr._segment_fits = real


def test_staged_result_lines_read_back_as_the_json_and_key_they_were_made_from():
    """Result rows staged as COPY text lines (PostgreSQL documentation, COPY, "Text Format":
    backslash, newline, carriage return and tab are backslash sequences) hold what psycopg's own
    ``write_row`` stores: text with quotes, backslashes, control characters, a literal ``\\N``
    and non-ASCII letters inside the JSON, and a key holding a tab and a backslash."""
    import orjson

    payload = {"why": ['toe "FL" \\ camber', "tab\there", "line\nbreak\r", "\\N", "ünï – ✓"],
               "km": [1.5e-7, -0.0, 123456.789], "none": None, "nested": {"a\\b": [True, False]}}
    body = orjson.dumps({"what": "a\\b\tc"})
    rows = [(7, "s1.c2\t\\e3", payload, [body], True), (8, "s9.c9.e9.p0", {"x": 1}, [], False)]
    with connection.cursor() as dj:
        cur = dj.cursor
        cols = "vehicle_id bigint, input_key text, payload json, flips boolean"
        names = ("vehicle_id", "input_key", "payload", "flips")
        result_write.copy_staged(cur, "line_stage", cols, names, lines=(
            result_write.stage_line(v, k, result_write.payload_json(p, b), f) for v, k, p, b, f in rows))
        result_write.copy_staged(cur, "row_stage", cols, names, rows=(
            (v, k, result_write.payload_json(p, b).decode(), f) for v, k, p, b, f in rows))
        cur.execute("SELECT vehicle_id, input_key, payload::text, flips FROM line_stage "
                    "ORDER BY vehicle_id")
        by_lines = cur.fetchall()
        cur.execute("SELECT vehicle_id, input_key, payload::text, flips FROM row_stage "
                    "ORDER BY vehicle_id")
        assert by_lines == cur.fetchall()
    got = {v: (k, json.loads(p), f) for v, k, p, f in by_lines}
    assert got[7] == ("s1.c2\t\\e3", {**payload, "advice": [{"what": "a\\b\tc"}]}, True)
    assert got[8] == ("s9.c9.e9.p0", {"x": 1, "advice": []}, False)


def test_a_staging_table_is_made_once_per_session_and_emptied_before_each_use():
    """The second write of a session stages into the same table (same oid: not dropped and made
    again) and sees only its own rows, even inside one enclosing transaction."""
    with connection.cursor() as dj:
        cur = dj.cursor
        cols, names = "k text, j json", ("k", "j")
        result_write.copy_staged(cur, "reuse_stage", cols, names, rows=[("a", "{}"), ("b", "[1]")])
        cur.execute("SELECT 'reuse_stage'::regclass::oid, "
                    "(SELECT relpersistence FROM pg_class WHERE oid = 'reuse_stage'::regclass)")
        oid, persistence = cur.fetchone()
        cur.execute("SELECT k FROM reuse_stage ORDER BY k")
        assert cur.fetchall() == [("a",), ("b",)] and persistence == "t"
        result_write.copy_staged(cur, "reuse_stage", cols, names, rows=[("c", "2")])
        cur.execute("SELECT k, j::text FROM reuse_stage")
        assert cur.fetchall() == [("c", "2")]
        cur.execute("SELECT 'reuse_stage'::regclass::oid")
        assert cur.fetchone()[0] == oid


@pytest.mark.parametrize("by", [("vehicle_id",), ("vehicle_id", "corner", "part")])
def test_each_group_s_last_row_is_pandas_sort_then_groupby_tail(by):
    """``_last_of_groups`` against the pandas expression it replaces, on rows in any order with
    ties in time (the stable sort keeps their order, ``tail`` takes the last)."""
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(4)
    n = 3000
    frame = pd.DataFrame({
        "vehicle_id": rng.integers(1, 40, n), "t": rng.integers(0, 50, n) * 10**9,
        "corner": rng.choice(["FL", "FR", "RL", "RR", ""], n),
        "part": rng.choice(["lower_ball_joint", "toe_link_bush", "x"], n),
        "row": np.arange(n)}).sample(frac=1, random_state=2)
    want = frame.sort_values(["vehicle_id", "t"], kind="stable").groupby(list(by)).tail(1)
    got = fr._last_of_groups(frame, by=by)
    assert got["row"].tolist() == want["row"].tolist()
    assert len(got) < n and fr._last_of_groups(frame.iloc[:0], by=by).empty


def test_a_chunks_frames_are_used_as_read_when_every_row_is_its_own_and_copied_otherwise():
    import pandas as pd

    frames = fr.ChunkFrames(pd.DataFrame({"vehicle_id": [1, 1, 2], "x": [0.1, 0.2, 0.3]}),
                            pd.DataFrame({"vehicle_id": [2], "y": ["a"]}),
                            pd.DataFrame({"vehicle_id": pd.Series([], dtype="int64")}))
    assert frames.of([1, 2]) is frames
    assert frames.of([2, 1, 3]) is frames
    one = frames.of([2])
    assert one is not frames
    assert one.readings.to_dict("list") == {"vehicle_id": [2], "x": [0.3]}
    assert one.readings.index.tolist() == [0]
    assert one.checks.to_dict("list") == {"vehicle_id": [2], "y": ["a"]}
    one.readings["x"] = 9.9  # a copy: the frames read are left as they were
    assert frames.readings["x"].tolist() == [0.1, 0.2, 0.3]
