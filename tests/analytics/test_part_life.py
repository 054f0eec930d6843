"""Fleet part lives from service events: censoring as documented, the fit as the core's."""
import numpy as np
import pytest

from analytics import part_life
from analytics.core.life import fit_weibull
from inspections import services as records
from tests import factories as f
from tests.base import PersonaTestCase


class PartLifeTests(PersonaTestCase):
    def replace(self, vehicle, km, reason, corner="FL"):
        records.service_event_record(vehicle=vehicle, recorded_by=self.tech_a, performed_at=f.at(1),
                                     odometer_km=km, kind="part_replaced", corner=corner,
                                     part="front_lower_ball_joint", reason=reason)

    def test_replacements_become_lives_and_the_part_in_service_is_censored(self):
        self.replace(self.car_a, 40_000, "failed")
        self.replace(self.car_a, 70_000, "preventive")
        dist, failed = part_life.life_data(self.platform, "front_lower_ball_joint")
        # car_a FL: 40k failed, 30k censored (preventive), 0 in service since (no later odometer);
        # car_a FR: 70k censored; the other two vehicles: no odometer yet, nothing at risk.
        assert sorted(zip(dist.tolist(), failed.tolist(), strict=True)) == [
            (30_000.0, False), (40_000.0, True), (70_000.0, False)]

    def test_too_few_failures_say_not_enough_data(self):
        self.replace(self.car_a, 40_000, "failed")
        (life,) = part_life.part_lives(self.platform)
        assert life.shape is None and "not enough data" in life.note

    def test_the_fit_is_the_cores_censored_weibull(self):
        rng = np.random.default_rng(7)
        cars = [f.make_vehicle(platform=self.platform, workshop=self.workshop_a) for _ in range(8)]
        for car in cars:
            km = int(rng.weibull(2.0) * 60_000) + 1_000
            self.replace(car, km, "failed" if rng.random() < 0.8 else "preventive")
        (life,) = part_life.part_lives(self.platform)
        dist, failed = part_life.life_data(self.platform, "front_lower_ball_joint")
        ref = fit_weibull(dist, failed)
        assert life.shape == pytest.approx(ref.shape) and life.scale_km == pytest.approx(ref.scale)
        assert life.failures == int(failed.sum())
