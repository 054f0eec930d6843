"""Fixtures of the fault tests: our own PostgreSQL, Redis, gunicorn and Celery workers.

The app pieces run as subprocesses pointed at a throwaway cluster and a Redis of our own (see
``procs``); the tests read the database directly with psycopg. Nothing here uses the pytest
database of the rest of the suite, and every fixture stops its processes and removes its folders
even when a test fails.
"""
from __future__ import annotations

import datetime as dt
import itertools
import json
import subprocess
import sys
import time
import uuid

import pytest

from tests.faults import procs

DBNAME = "fleetsvc_faults"
VEHICLES = 6


@pytest.fixture(scope="session")
def pg():
    procs.LOGS.mkdir(parents=True, exist_ok=True)
    try:
        cluster = procs.PgCluster()
    except FileNotFoundError as exc:
        pytest.skip(f"not installed: {exc}")
    try:
        cluster.createdb(DBNAME)
        done = subprocess.run(
            [sys.executable, "-m", "tests.faults.appctl", "seed", str(VEHICLES)], cwd=procs.ROOT,
            env=procs.app_env(cluster.url(DBNAME), None), capture_output=True, text=True,
            timeout=300)
        if done.returncode != 0:
            raise RuntimeError(f"seeding failed:\n{done.stderr[-3000:]}")
        cluster.seed = json.loads(done.stdout.strip().splitlines()[-1])
        yield cluster
    finally:
        cluster.destroy()


@pytest.fixture(scope="session")
def redis_server():
    procs.LOGS.mkdir(parents=True, exist_ok=True)
    try:
        server = procs.RedisServer()
    except FileNotFoundError as exc:
        pytest.skip(f"not installed: {exc}")
    try:
        yield server
    finally:
        server.destroy()


@pytest.fixture
def broker(redis_server):
    """Redis running, answering and empty at the start of each test."""
    redis_server.thaw()
    redis_server.start()
    redis_server.client().flushall()
    yield redis_server
    redis_server.thaw()


@pytest.fixture(scope="session")
def env(pg, redis_server):
    """The app's environment: our cluster's database and our Redis."""
    return procs.app_env(pg.url(DBNAME), redis_server.url)


@pytest.fixture(scope="session")
def web(env):
    server = procs.WebServer(env)
    try:
        yield server
    finally:
        server.stop()


@pytest.fixture(scope="session")
def vehicles(pg):
    """Hands each test a seeded vehicle of its own."""
    return iter(pg.seed["vehicles"])


@pytest.fixture
def vehicle_id(vehicles):
    try:
        return next(vehicles)
    except StopIteration:
        raise RuntimeError(f"more tests than seeded vehicles ({VEHICLES})") from None


@pytest.fixture
def start_worker(env):
    """``start_worker(name, **env)`` → a ready worker; all are stopped at the end of the test."""
    started: list[procs.Worker] = []

    def start(name: str, ready: bool = True, **extra: str) -> procs.Worker:
        w = procs.Worker({**env, **extra}, name)
        started.append(w)
        if ready:
            w.wait_ready()
        return w

    yield start
    for w in started:
        w.stop()


@pytest.fixture
def sql(pg):
    """``sql(query, *params)`` → rows, on a fresh autocommit connection to our database."""
    def run(query: str, *params):
        with pg.connect(DBNAME, autocommit=True) as conn:
            cur = conn.execute(query, params)
            return cur.fetchall() if cur.description else []
    return run


_odometer = itertools.count(50_000, 1_000)


def submit(session, base: str, vehicle_id: int, timeout: float = 10):
    """POST one as-found session through the bay endpoint; returns (response, seconds)."""
    readings = {c: {"toe_deg": "0.08", "toe_unit": "angle", "camber_deg": "-0.9",
                    **({"caster_deg": "4.0"} if c.startswith("F") else {})}
                for c in ("FL", "FR", "RL", "RR")}
    body = {"client_token": str(uuid.uuid4()), "kind": "as_found",
            "measured_at": dt.datetime.now(dt.UTC).isoformat(), "odometer_km": str(next(_odometer)),
            "odometer_unit": "km", "equipment_id": "RIG-F", "equipment_calibrated_on": "2024-01-10",
            "readings": readings, "checks": []}
    started = time.monotonic()
    r = session.post(f"{base}/bay/vehicles/{vehicle_id}/sessions/submit", json=body,
                     headers={"X-CSRFToken": session.cookies.get("csrftoken", ""),
                              "Referer": base + "/bay/"}, timeout=timeout)
    return r, time.monotonic() - started


def current_input_key(sql, vehicle_id: int) -> str:
    """The vehicle's input key as ``analytics.inputs.input_key`` names it, read in SQL."""
    (s, c, e, p), = sql(
        "SELECT (SELECT coalesce(max(id), 0) FROM inspections_alignmentsession WHERE vehicle_id=%s),"
        " (SELECT coalesce(max(id), 0) FROM inspections_componentcheck WHERE vehicle_id=%s),"
        " (SELECT coalesce(max(id), 0) FROM inspections_serviceevent WHERE vehicle_id=%s),"
        " (SELECT coalesce(floor(extract(epoch FROM max(r.computed_at))), 0)::bigint"
        "    FROM analytics_pooledrate r JOIN inspections_vehicle v ON v.platform_id = r.platform_id"
        "    WHERE v.id=%s)", vehicle_id, vehicle_id, vehicle_id, vehicle_id)
    return f"s{s}.c{c}.e{e}.p{p}"


def results_for_key(sql, vehicle_id: int, key: str) -> list[int]:
    return [r[0] for r in sql("SELECT id FROM analytics_analysisresult WHERE vehicle_id=%s "
                              "AND input_key=%s", vehicle_id, key)]


@pytest.fixture
def tech(web, pg):
    """A technician's browser session, signed in through the sign-in form."""
    session = procs.signed_in_session(web.base, pg.seed["technician"])
    yield session
    session.close()
