"""Analysis requests and results: written with the record, keyed by inputs, safe to run twice."""
import datetime as dt
from unittest import mock

from analytics import services
from analytics.core.advice import MODEL_VERSION
from analytics.core.caution import CAUTION
from analytics.models import AdviceItem, AnalysisRequest, AnalysisResult, expand_payload
from inspections import services as records
from inspections.models import AlignmentSession
from tests import factories as f
from tests.analytics.helpers import give_corners, give_history
from tests.base import PersonaTestCase


class AnalysisServiceTests(PersonaTestCase):
    @classmethod
    def setUpTestData(cls):
        super().setUpTestData()
        give_corners(cls.platform)
        give_history(cls.car_a, cls.tech_a)

    def test_running_the_same_analysis_twice_writes_one_result(self):
        first = services.vehicle_analyse(vehicle_id=self.car_a.pk)
        again = services.vehicle_analyse(vehicle_id=self.car_a.pk)
        assert first.pk == again.pk
        assert AnalysisResult.objects.filter(vehicle=self.car_a).count() == 1
        assert first.model_version == MODEL_VERSION

    def test_a_new_session_gives_a_new_result_and_replaces_the_advice(self):
        first = services.vehicle_analyse(vehicle_id=self.car_a.pk)
        give_history(self.car_a, self.tech_a, visits=1, start_days_ago=10, start_km=50_000)
        second = services.vehicle_analyse(vehicle_id=self.car_a.pk)
        assert second.pk != first.pk and second.input_key != first.input_key
        assert set(AdviceItem.objects.filter(vehicle=self.car_a).values_list("result", flat=True)) \
            <= {second.pk}

    def test_every_piece_of_advice_carries_the_caution_and_respects_the_interval(self):
        result = services.vehicle_analyse(vehicle_id=self.car_a.pk)
        assert result.payload["advice"], "the history should give some advice"
        for a in result.payload["advice"]:
            assert a["caution"] == CAUTION
            if a["due_date"] and a["limit_date"]:
                assert a["due_date"] <= a["limit_date"]
            if a["due_km"] is not None and a["limit_km"] is not None:
                assert a["due_km"] <= a["limit_km"] + 1e-6

    def test_missing_manufacturer_intervals_are_asked_for_not_invented(self):
        platform = f.make_platform(alignment_interval_km=None, alignment_interval_months=None,
                                   suspension_interval_km=None, suspension_interval_months=None)
        give_corners(platform)
        car = f.make_vehicle(platform=platform, workshop=self.workshop_a)
        give_history(car, self.tech_a, visits=3)
        result = services.vehicle_analyse(vehicle_id=car.pk)
        kinds = [a["kind"] for a in result.payload["advice"]]
        assert "enter_manufacturer_data" in kinds
        assert all(a["limit"] is None for a in result.payload["advice"])

    def test_the_compliance_table_compares_measured_with_new_for_each_load_case(self):
        records.component_check_submit(
            vehicle=self.car_a, technician=self.tech_a, checked_at=f.at(5),
            odometer_km=60_000, corner="RL", part="rear_toe_link_inner_bush",
            verdict="unfit", findings=["debonding"], defect_category="major")
        result = services.vehicle_analyse(vehicle_id=self.car_a.pk)
        rl = expand_payload(result.payload)["compliance"]["RL"]
        assert [r["case"] for r in rl["rows"]] == ["cornering", "braking", "lift-off",
                                                   "braking in a turn"]
        # The debonded toe-link bush (stiffness factor 0.3, an assumption) turns the demo
        # rear corner toward toe-out under cornering: the corner engine's demo design check.
        assert rl["verdict_new"] == "stable" and rl["flips_to_toe_out"] is True
        assert any(a["kind"] == "replace_part" for a in result.payload["advice"])


class AnalysisRequestTests(PersonaTestCase):
    @classmethod
    def setUpTestData(cls):
        super().setUpTestData()
        give_corners(cls.platform)

    def submit(self, **kw):
        return records.session_submit(
            vehicle=self.car_a, technician=self.tech_a, measured_at=f.at(1),
            odometer_km=kw.pop("odometer_km", 5000), kind="as_found", equipment_id="R",
            equipment_calibrated_on=dt.date(2026, 1, 1), readings=f.readings(), **kw)

    def test_a_submitted_session_writes_its_request_and_sends_it_after_commit(self):
        with mock.patch("analytics.tasks.analyse_vehicle.apply_async") as send, \
                self.captureOnCommitCallbacks(execute=False) as callbacks:
            self.submit()
        assert AnalysisRequest.objects.filter(vehicle=self.car_a).count() == 1
        send.assert_not_called()  # nothing is sent before the commit
        with mock.patch("analytics.tasks.analyse_vehicle.apply_async") as send:
            for cb in callbacks:
                cb()
        send.assert_called_once()
        assert AnalysisRequest.objects.get().sent_at is not None

    def test_a_refused_session_writes_no_request(self):
        self.submit(odometer_km=9000)
        try:
            self.submit(odometer_km=100)
        except Exception:  # noqa: BLE001 - the refusal itself is tested in inspections
            pass
        assert AnalysisRequest.objects.count() == 1

    def test_a_request_the_broker_refused_is_sent_by_the_sweep(self):
        with mock.patch("analytics.tasks.analyse_vehicle.apply_async",
                        side_effect=ConnectionError("broker down")), \
                self.captureOnCommitCallbacks(execute=True):
            self.submit()
        req = AnalysisRequest.objects.get()
        assert req.sent_at is None
        with mock.patch("analytics.tasks.analyse_vehicle.apply_async") as send:
            assert services.requests_sweep() == 1
        send.assert_called_once_with(args=[req.pk], retry=False)

    def test_processing_a_request_twice_gives_one_result(self):
        with self.captureOnCommitCallbacks(execute=False):
            self.submit()
        req = AnalysisRequest.objects.get()
        a = services.request_process(request_id=req.pk)
        b = services.request_process(request_id=req.pk)
        assert a == b
        assert AnalysisResult.objects.count() == 1
        assert AnalysisRequest.objects.get().done_at is not None

    def test_one_job_answers_every_open_request_and_the_others_find_theirs_done(self):
        with self.captureOnCommitCallbacks(execute=False):  # nothing sent: a queue backlog
            give_history(self.car_a, self.tech_a, visits=3)
            give_history(self.car_b, self.tech_b, visits=3)
        first = AnalysisRequest.objects.filter(vehicle=self.car_a).order_by("pk").first()
        result_a = services.request_process(request_id=first.pk)
        assert not AnalysisRequest.objects.filter(done_at__isnull=True).exists()
        for car in (self.car_a, self.car_b):  # each result saw the vehicle's newest session
            newest = AlignmentSession.objects.filter(vehicle=car).order_by("-pk").first()
            latest = services.latest_result(car)
            assert latest.input_key.startswith(f"s{newest.pk}.")
        assert services.latest_result(self.car_a).pk == result_a
        stored = AnalysisResult.objects.count()
        for req in AnalysisRequest.objects.exclude(pk=first.pk):  # their own jobs: no-ops
            assert services.request_process(request_id=req.pk) == \
                services.latest_result(req.vehicle).pk
        assert AnalysisResult.objects.count() == stored == 2

    def test_a_request_claimed_by_a_job_that_died_is_still_run_by_its_own_job(self):
        from django.utils import timezone

        with self.captureOnCommitCallbacks(execute=False):
            give_history(self.car_a, self.tech_a, visits=3)
        AnalysisRequest.objects.update(claimed_at=timezone.now())  # claimed, never finished
        last = AnalysisRequest.objects.order_by("-pk").first()
        assert services.request_process(request_id=last.pk) is not None
        assert AnalysisRequest.objects.get(pk=last.pk).done_at is not None
        # the requests claimed by the dead job stay open for their own jobs (and the sweep)
        assert AnalysisRequest.objects.filter(done_at__isnull=True).count() == 2
