"""A real Celery worker on Redis picks up the analysis request of a committed session."""
import datetime as dt

import pytest

from analytics.inputs import input_key
from analytics.models import AnalysisRequest, AnalysisResult
from inspections import services as records
from tests import factories as f
from tests.analytics.helpers import give_corners
from tests.conftest import wait_for

pytestmark = [pytest.mark.services, pytest.mark.django_db(transaction=True)]


def test_a_committed_session_is_analysed_by_the_worker_once(live_worker):
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
