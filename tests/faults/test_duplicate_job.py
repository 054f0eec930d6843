"""The same analysis job twice at once on two workers: one result, no error.

Both runs are made to overlap deterministically: the test holds a SHARE lock on the results table,
so both workers compute the analysis and then wait to insert the same (vehicle, inputs, model)
row; released together, one insert wins and the other meets the unique constraint and returns
the winner.
"""
from __future__ import annotations

import pytest
from celery import Celery

from tests.faults import procs
from tests.faults.conftest import DBNAME, current_input_key, results_for_key, submit
from tests.faults.test_worker_killed import waiting_on_lock

pytestmark = pytest.mark.services


def test_the_same_job_on_two_workers_at_once_stores_one_result_without_error(
        web, tech, broker, pg, sql, start_worker, vehicle_id):
    response, _ = submit(tech, web.base, vehicle_id)
    assert response.status_code == 200, response.text
    (request_id,), = sql("SELECT id FROM analytics_analysisrequest WHERE reason=%s",
                         f"AlignmentSession:{response.json()['session_id']}")
    broker.client().flushall()  # drop the after-commit message: this test sends its own two
    key = current_input_key(sql, vehicle_id)

    a, b = start_worker("twin-a"), start_worker("twin-b")
    client = Celery("fault-test-client", broker=broker.url, set_as_current=False)
    lock = pg.connect(DBNAME)
    try:
        lock.execute("LOCK TABLE analytics_analysisresult IN SHARE MODE")
        for _ in range(2):
            client.send_task("analytics.tasks.analyse_vehicle", args=[request_id])
        procs.wait_for(lambda: waiting_on_lock(sql, 'INSERT INTO "analytics_analysisresult"') == 2,
                       90, interval=0.2, what="both workers waiting to insert the result")
        assert results_for_key(sql, vehicle_id, key) == []
    finally:
        lock.rollback()
        lock.close()
        client.close()
    procs.wait_for(lambda: a.succeeded() and b.succeeded(), 60, interval=0.2,
                   what="both runs finished")
    results = results_for_key(sql, vehicle_id, key)
    assert len(results) == 1
    returned = {int(value) for _, value in a.succeeded() + b.succeeded()}
    assert returned == set(results), "both runs answer with the one stored result"
    for w in (a, b):
        assert len(w.received()) == 1
        for bad in ("ERROR", "Traceback", "retry", "IntegrityError"):
            assert bad not in w.text(), procs.tail(w.log)
    (done_at,), = sql("SELECT done_at FROM analytics_analysisrequest WHERE id=%s", request_id)
    assert done_at is not None
