"""PostgreSQL restarted under a live server: errors only while it is down, recovery in place.

gunicorn's sync workers keep one persistent connection each (CONN_MAX_AGE); after a restart those
connections are dead, and CONN_HEALTH_CHECKS makes Django notice and reconnect at the next
request instead of failing it. The app is never restarted: its worker processes stay the same.
"""
from __future__ import annotations

import threading
import time

import pytest
import requests

pytestmark = pytest.mark.services
PAGE = "/bay/"  # the technician's bay: session lookup, profile and vehicles, all in PostgreSQL


def fetch(session, url: str) -> int | str:
    try:
        return session.get(url, timeout=10, allow_redirects=False).status_code
    except requests.RequestException as exc:
        return type(exc).__name__


def test_a_restart_with_no_request_in_flight_costs_no_request(web, tech, pg):
    pids = web.worker_pids()
    assert len(pids) == 2
    before = [fetch(tech, web.base + PAGE) for _ in range(10)]  # both workers hold a connection
    assert before == [200] * 10
    pg.restart()
    after = [fetch(tech, web.base + PAGE) for _ in range(10)]
    assert after == [200] * 10, "stale connections must be replaced, not fail a request"
    assert web.worker_pids() == pids


def test_requests_fail_only_while_postgresql_is_down_and_recover_without_an_app_restart(
        web, tech, pg):
    pids = web.worker_pids()
    log: list[tuple[float, float, int | str]] = []
    stop = threading.Event()

    def load():
        while not stop.is_set():
            started = time.monotonic()
            status = fetch(tech, web.base + PAGE)
            log.append((started, time.monotonic(), status))
            time.sleep(0.05)

    loader = threading.Thread(target=load, daemon=True)
    loader.start()
    try:
        time.sleep(1.5)
        going_down = time.monotonic()
        pg.stop()
        down = time.monotonic()  # surely down from here …
        time.sleep(2.0)
        coming_up = time.monotonic()  # … to here
        pg.start()
        up = time.monotonic()
        time.sleep(2.0)
    finally:
        stop.set()
        loader.join(timeout=15)
        if not pg.is_running():
            pg.start()
    assert not loader.is_alive()
    before = [s for t0, t1, s in log if t1 < going_down]
    during = [s for t0, t1, s in log if down <= t0 and t1 <= coming_up]
    after = [s for t0, t1, s in log if t0 > up]
    assert before and set(before) == {200}, before
    assert during and 200 not in during, f"the outage was not seen: {during}"
    assert set(during) == {500}, "while down the app answers an error at once (no hang)"
    assert max(t1 - t0 for t0, t1, _ in log) < 5
    assert len(after) >= 5 and set(after) == {200}, after
    assert web.worker_pids() == pids, "recovered without restarting the app"
