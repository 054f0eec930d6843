"""A worker killed with SIGKILL in the middle of a job: the job runs again elsewhere, one result.

The job is held mid-way deterministically without any test hook in the app: the test locks the
analysis request's row, so the worker's first write of the job (counting the attempt) waits on
that lock after the worker has taken the message (acks_late: not yet acknowledged).
"""
from __future__ import annotations

import time

import pytest

from tests.faults import procs
from tests.faults.conftest import DBNAME, current_input_key, results_for_key, submit

pytestmark = pytest.mark.services
JOB_TIMEOUT_S = 1  # the second worker's setting: visibility timeout = 4 × 1 s


def waiting_on_lock(sql, statement: str) -> int:
    return sql("SELECT count(*) FROM pg_stat_activity WHERE datname=%s AND wait_event_type='Lock'"
               " AND query LIKE %s", DBNAME, statement + "%")[0][0]


def test_a_job_whose_worker_is_killed_runs_again_on_another_worker_with_one_result(
        web, tech, broker, pg, sql, start_worker, vehicle_id):
    response, _ = submit(tech, web.base, vehicle_id)
    assert response.status_code == 200, response.text
    (request_id, sent_at), = sql("SELECT id, sent_at FROM analytics_analysisrequest WHERE reason=%s",
                                 f"AlignmentSession:{response.json()['session_id']}")
    assert sent_at is not None
    key = current_input_key(sql, vehicle_id)
    redis = broker.client()

    lock = pg.connect(DBNAME)
    try:
        lock.execute("SELECT id FROM analytics_analysisrequest WHERE id=%s FOR UPDATE", (request_id,))
        doomed = start_worker("doomed")
        procs.wait_for(lambda: waiting_on_lock(sql, 'UPDATE "analytics_analysisrequest"'), 60,
                       what="the worker's job waiting on the request row")
        assert redis.hlen("unacked") == 1, "taken and not acknowledged (acks_late)"
        doomed.kill9()
    finally:
        lock.rollback()
        lock.close()
    (task_id,) = doomed.received()
    assert doomed.succeeded() == []
    assert results_for_key(sql, vehicle_id, key) == []
    assert redis.llen("celery") == 0 and redis.hlen("unacked") == 1, "the message is in limbo"

    # Once the visibility timeout has passed, the next worker to poll puts it back and runs it.
    ((_, delivered_at),) = redis.zrange("unacked_index", 0, -1, withscores=True)
    procs.wait_for(lambda: time.time() > delivered_at + 4 * JOB_TIMEOUT_S + 0.5, 10,
                   what="visibility timeout passed")
    second = start_worker("second", FLEETSVC_JOB_TIMEOUT_S=str(JOB_TIMEOUT_S))
    procs.wait_for(lambda: second.succeeded(), 60, interval=0.3,
                   what="the job run again by the second worker")
    assert second.received() == [task_id]
    assert [tid for tid, _ in second.succeeded()] == [task_id]
    (done_at, attempts), = sql("SELECT done_at, attempts FROM analytics_analysisrequest WHERE id=%s",
                               request_id)
    assert done_at is not None and attempts >= 1
    assert len(results_for_key(sql, vehicle_id, key)) == 1
    assert int(second.succeeded()[0][1]) == results_for_key(sql, vehicle_id, key)[0]
    assert redis.hlen("unacked") == 0 and redis.llen("celery") == 0
    assert "ERROR" not in second.text(), procs.tail(second.log)
