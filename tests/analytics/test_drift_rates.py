"""The narrow drift-rate table mirrors each vehicle's latest result and feeds the fleet view."""
from analytics import selectors, services
from analytics.models import DriftRate
from tests.analytics.helpers import give_corners, give_history
from tests.base import PersonaTestCase


class DriftRateTests(PersonaTestCase):
    @classmethod
    def setUpTestData(cls):
        super().setUpTestData()
        give_corners(cls.platform)
        give_history(cls.car_a, cls.tech_a)
        give_history(cls.car_b, cls.tech_b, toe_rate_per_visit=-0.03)

    def test_the_rates_are_the_latest_results_own_slopes(self):
        result = services.vehicle_analyse(vehicle_id=self.car_a.pk)
        stored = {(r.corner, r.angle): r.slope_deg_per_10k
                  for r in DriftRate.objects.filter(vehicle=self.car_a)}
        expected = {tuple(k.split(".")): e["slope_deg_per_10k"]
                    for k, e in result.payload["drift"].items() if e["slope_deg_per_10k"] is not None}
        assert stored == expected and stored
        assert set(DriftRate.objects.filter(vehicle=self.car_a).values_list("result", flat=True)) \
            == {result.pk}

    def test_a_new_result_replaces_the_rates(self):
        first = services.vehicle_analyse(vehicle_id=self.car_a.pk)
        give_history(self.car_a, self.tech_a, visits=1, start_days_ago=5, start_km=80_000)
        second = services.vehicle_analyse(vehicle_id=self.car_a.pk)
        assert second.pk != first.pk
        rows = DriftRate.objects.filter(vehicle=self.car_a)
        assert set(rows.values_list("result", flat=True)) == {second.pk}
        assert rows.count() == len({(r.corner, r.angle) for r in rows})

    def test_the_distribution_holds_only_what_the_user_may_see(self):
        services.vehicle_analyse(vehicle_id=self.car_a.pk)
        services.vehicle_analyse(vehicle_id=self.car_b.pk)
        mine = selectors.drift_distribution(self.manager_a)  # workshop A: car_a only
        everyone = selectors.drift_distribution(self.admin)
        assert mine and all(row["vehicles"] == 1 for row in mine)
        assert max(row["vehicles"] for row in everyone) == 2

    def test_the_toe_out_flag_mirrors_the_payload(self):
        from analytics.models import payload_flips
        from inspections import services as records
        from tests import factories as f

        records.component_check_submit(
            vehicle=self.car_a, technician=self.tech_a, checked_at=f.at(2), odometer_km=60_000,
            corner="RL", part="rear_toe_link_inner_bush", verdict="unfit", findings=["debonding"],
            defect_category="major")
        result = services.vehicle_analyse(vehicle_id=self.car_a.pk)
        assert result.flips_to_toe_out is True and payload_flips(result.payload) is True
        assert [r.vehicle_id for r in selectors.toe_out_flips(self.manager_a)] == [self.car_a.pk]
        assert list(selectors.toe_out_flips(self.tech_b)) == []
