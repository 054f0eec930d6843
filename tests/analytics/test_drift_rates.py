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
        row, = selectors.with_flip_values(selectors.toe_out_flips(self.manager_a))
        comp = result.payload["compliance"]["RL"]
        assert row.rl_flip is True and row.rl_now < 0 < row.rl_new
        assert (row.rl_new, row.rl_now) == (comp["toe_change_new_deg"],
                                            comp["toe_change_measured_deg"])
        assert row.rr_flip in (True, False) and isinstance(row.rr_new, float)

    def test_the_database_bins_are_numpys_equal_width_bins(self):
        # independent reference: numpy, floor((rate - lo) / width) clipped to the 12 bins
        import numpy as np

        from tests import factories as f

        services.vehicle_analyse(vehicle_id=self.car_a.pk)
        services.vehicle_analyse(vehicle_id=self.car_b.pk)
        rng = np.random.default_rng(4)
        extra = []  # more rates so that bins and edges are exercised (the top edge included)
        for i, slope in enumerate(np.concatenate([rng.normal(0.02, 0.01, 40), [0.06, 0.06]])):
            v = f.make_vehicle(platform=self.platform, workshop=self.workshop_a, plate=f"BIN {i}")
            extra.append(DriftRate(vehicle=v, result=DriftRate.objects.first().result,
                                   platform=self.platform, corner="RL", angle="toe",
                                   slope_deg_per_10k=float(slope)))
        DriftRate.objects.bulk_create(extra)
        rows = {(r["corner"], r["angle"]): r for r in selectors.drift_distribution(self.admin)}
        for (corner, angle), row in rows.items():
            rates = np.array(DriftRate.objects.filter(corner=corner, angle=angle).values_list(
                "slope_deg_per_10k", flat=True))
            lo, hi = (rates.min(), rates.max()) if rates.max() > rates.min() else \
                (rates.min() - 0.005, rates.max() + 0.005)
            width = (hi - lo) / selectors.HIST_BINS
            idx = np.clip(np.floor((rates - lo) / width).astype(int), 0, selectors.HIST_BINS - 1)
            expected = np.bincount(idx, minlength=selectors.HIST_BINS)
            assert row["vehicles"] == rates.size and (row["lo"], row["hi"]) == (lo, hi)
            np.testing.assert_array_equal(row["counts"], expected)

    def test_the_fleet_page_and_its_csv_list_the_flipped_corner_with_its_values(self):
        import csv
        import io

        from django.urls import reverse

        from inspections import services as records
        from tests import factories as f

        records.component_check_submit(
            vehicle=self.car_a, technician=self.tech_a, checked_at=f.at(2), odometer_km=60_000,
            corner="RL", part="rear_toe_link_inner_bush", verdict="unfit", findings=["debonding"],
            defect_category="major")
        comp = services.vehicle_analyse(vehicle_id=self.car_a.pk).payload["compliance"]["RL"]
        self.client.force_login(self.manager_a)
        page = self.client.get(reverse("analytics:fleet")).content.decode()
        assert f"{comp['toe_change_measured_deg']:.3f}° toe-out" in page
        assert self.car_a.plate in page
        response = self.client.get(reverse("analytics:fleet") + "?format=csv&show=flips")
        rows = list(csv.DictReader(io.StringIO(response.content.decode("utf-8-sig"))))
        assert [(r["plate"], r["RL_flips"]) for r in rows] == [(self.car_a.plate, "true")]
        assert float(rows[0]["RL_now_deg"]) == comp["toe_change_measured_deg"]
