"""A real Celery worker on Redis picks up the analysis request of a committed session."""
import datetime as dt
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest
from django.conf import settings
from django.db import connection

from analytics.models import AnalysisRequest, AnalysisResult
from fleetsvc.celery import app
from inspections import services as records
from tests import factories as f
from tests.analytics.helpers import give_corners

ROOT = Path(__file__).resolve().parents[2]
pytestmark = [pytest.mark.services, pytest.mark.django_db(transaction=True)]


@pytest.fixture
def worker():
    if not settings.REDIS_URL:
        pytest.skip("REDIS_URL is not set: jobs run in-process (the embedded default)")
    app.control.purge()
    db = connection.settings_dict
    env = dict(os.environ)
    env["DATABASE_URL"] = f"postgres:///{db['NAME']}?host={db['HOST'] or '/var/run/postgresql'}"
    env["REDIS_URL"] = settings.REDIS_URL
    env["SECRET_KEY"] = "test-only-key"
    (ROOT / "var").mkdir(exist_ok=True)
    log = open(ROOT / "var" / "test-worker.log", "w")  # noqa: SIM115 - closed below
    proc = subprocess.Popen(
        [sys.executable, "-m", "celery", "-A", "fleetsvc", "worker", "--pool=solo",
         "--loglevel=INFO", "--without-gossip", "--without-mingle", "-n", "test@%h"],
        cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT)
    try:
        deadline = time.monotonic() + 40
        while time.monotonic() < deadline:
            if app.control.ping(timeout=0.5):
                break
            if proc.poll() is not None:
                raise RuntimeError("the worker exited; see var/test-worker.log")
        else:
            raise RuntimeError("the worker did not answer a ping within 40 s")
        yield proc
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
        log.close()


def wait_for(predicate, timeout=60.0):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(0.2)
    return False


def test_a_committed_session_is_analysed_by_the_worker_once(worker):
    workshop = f.make_workshop()
    platform = f.make_platform()
    give_corners(platform)
    tech = f.make_user("tech-w", "technician", workshop=workshop)
    car = f.make_vehicle(platform=platform, workshop=workshop)
    for i in range(3):
        records.session_submit(
            vehicle=car, technician=tech, measured_at=f.at(300 - 100 * i),
            odometer_km=1000 + 5000 * i, kind="as_found", equipment_id="RIG",
            equipment_calibrated_on=dt.date(2024, 1, 1), readings=f.readings(toe=0.1 - 0.02 * i))
    assert wait_for(lambda: AnalysisRequest.objects.filter(vehicle=car, done_at__isnull=True)
                    .count() == 0 and AnalysisResult.objects.filter(vehicle=car).exists())
    from analytics.inputs import input_key

    assert wait_for(lambda: AnalysisResult.objects.filter(vehicle=car,
                                                          input_key=input_key(car)).exists())
    assert AnalysisResult.objects.filter(vehicle=car, input_key=input_key(car)).count() == 1
    stored = AnalysisResult.objects.filter(vehicle=car).count()
    # The same job sent twice more answers with the same stored result.
    from analytics.tasks import analyse_vehicle

    req = AnalysisRequest.objects.filter(vehicle=car).latest("pk")
    attempts_before = req.attempts
    a = analyse_vehicle.apply_async(args=[req.pk])
    b = analyse_vehicle.apply_async(args=[req.pk])
    assert wait_for(lambda: AnalysisRequest.objects.get(pk=req.pk).attempts >= 2 + attempts_before)
    assert a.id != b.id
    assert AnalysisResult.objects.filter(vehicle=car).count() == stored
