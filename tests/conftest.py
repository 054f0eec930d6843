"""Shared pytest configuration: the database header line and a real Celery worker fixture."""
from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import pytest
from django.conf import settings

ROOT = Path(__file__).resolve().parent.parent


def pytest_report_header(config):
    db = settings.DATABASES["default"]
    return f"fleetsvc database: {db['ENGINE'].rsplit('.', 1)[-1]} {db['NAME']}"


def wait_for(predicate, timeout: float = 60.0, step: float = 0.2) -> bool:
    """Poll ``predicate`` until it is true or ``timeout`` seconds pass."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(step)
    return False


@pytest.fixture
def live_worker(transactional_db):
    """A real Celery worker (solo pool) on the test's Redis and PostgreSQL test database."""
    from django.db import connection

    from fleetsvc.celery import app

    if not settings.REDIS_URL:
        pytest.skip("REDIS_URL is not set: jobs run in-process (the embedded default)")
    app.control.purge()
    db = connection.settings_dict
    env = dict(os.environ)
    env["DATABASE_URL"] = f"postgres:///{db['NAME']}?host={db['HOST'] or '/var/run/postgresql'}"
    env["REDIS_URL"] = settings.REDIS_URL
    env["SECRET_KEY"] = "test-only-key"
    env["MEDIA_ROOT"] = str(settings.MEDIA_ROOT)
    (ROOT / "var").mkdir(exist_ok=True)
    log = open(ROOT / "var" / "test-worker.log", "w")  # noqa: SIM115 - closed below
    proc = subprocess.Popen(
        [sys.executable, "-m", "celery", "-A", "fleetsvc", "worker", "--pool=solo",
         "--loglevel=INFO", "--without-gossip", "--without-mingle", "-n", "test@%h"],
        cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT)
    try:
        if not wait_for(lambda: bool(app.control.ping(timeout=0.5)) or proc.poll() is not None,
                        timeout=40):
            raise RuntimeError("the worker did not answer a ping within 40 s")
        if proc.poll() is not None:
            raise RuntimeError("the worker exited; see var/test-worker.log")
        yield proc
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
        log.close()
