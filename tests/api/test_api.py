"""The API (``/api/v1/``): token sign-in, scoping per persona, idempotent creates, optimistic
concurrency on corrections, validation errors that name the field, and a schema without warnings.

Choice documented in the README: a caller who cannot see an object gets 404 (the same answer as a
missing id); a caller who can see a vehicle but whose role may not record on it (owner, manager)
gets 403 on writes.
"""
from __future__ import annotations

import datetime as dt
import threading
import uuid
from unittest import mock

import pytest
from django.core.management import call_command
from django.db import connection
from django.test import TransactionTestCase
from rest_framework.authtoken.models import Token
from rest_framework.test import APIClient

from analytics import services as analysis
from analytics.core.caution import CAUTION
from analytics.models import AdviceItem, AnalysisResult
from inspections import services
from inspections.models import AlignmentSession, ComponentCheck
from tests import factories as f
from tests.base import PersonaTestCase

API = "/api/v1"


def client_for(user) -> APIClient:
    client = APIClient()
    if user is not None:
        token, _ = Token.objects.get_or_create(user=user)
        client.credentials(HTTP_AUTHORIZATION=f"Token {token.key}")
    return client


def session_body(**overrides) -> dict:
    body = {
        "client_token": str(uuid.uuid4()), "kind": "as_found",
        "measured_at": (f.at(1)).isoformat(), "odometer_km": 41_000, "equipment_id": "RIG-7",
        "equipment_calibrated_on": "2026-01-10",
        "readings": [
            {"corner": "FL", "toe_deg": 0.05, "camber_deg": -0.6, "caster_deg": 4.1},
            {"corner": "FR", "toe_deg": 0.07, "camber_deg": -0.5, "caster_deg": 4.0},
            {"corner": "RL", "toe_deg": 0.10, "camber_deg": -1.2},
            {"corner": "RR", "toe_deg": 0.12, "camber_deg": -1.1},
        ],
    }
    body.update(overrides)
    return body


def check_body(**overrides) -> dict:
    body = {"client_token": str(uuid.uuid4()), "checked_at": f.at(1).isoformat(),
            "odometer_km": 41_000, "corner": "FL", "part": "front_lower_ball_joint",
            "verdict": "keep_watch", "play_mm": 0.4, "play_direction": "axial",
            "play_loading": "loaded"}
    body.update(overrides)
    return body


def stored_session(vehicle, technician, **kw) -> AlignmentSession:
    when = f.at(kw.pop("days_ago", 10))
    values = dict(vehicle=vehicle, technician=technician, measured_at=when, odometer_km=40_000,
                  kind="as_found", equipment_id="RIG-1",
                  equipment_calibrated_on=(when - dt.timedelta(days=30)).date(), readings=f.readings())
    values.update(kw)
    return services.session_submit(**values)


def stored_check(vehicle, technician) -> ComponentCheck:
    return services.component_check_submit(
        vehicle=vehicle, technician=technician, checked_at=f.at(10), odometer_km=40_000,
        corner="RL", part="rear_toe_link_inner_bush", verdict="sound")


class TokenAuthTests(PersonaTestCase):
    def test_a_user_name_and_password_give_a_token_that_signs_requests_in(self):
        response = APIClient().post(f"{API}/token", {"username": "tech-a", "password": "pw-test-123"},
                                    format="json")
        assert response.status_code == 200
        key = response.json()["token"]
        assert key == Token.objects.get(user=self.tech_a).key
        client = APIClient()
        client.credentials(HTTP_AUTHORIZATION=f"Token {key}")
        assert client.get(f"{API}/vehicles").status_code == 200

    def test_a_wrong_password_gets_no_token(self):
        response = APIClient().post(f"{API}/token", {"username": "tech-a", "password": "nope"},
                                    format="json")
        assert response.status_code == 400
        assert "non_field_errors" in response.json()
        assert not Token.objects.filter(user=self.tech_a).exists()

    def test_without_a_token_or_with_a_bad_one_every_route_answers_401(self):
        session = stored_session(self.car_a, self.tech_a)
        bad = APIClient()
        bad.credentials(HTTP_AUTHORIZATION="Token not-a-real-token")
        for client in (APIClient(), bad):
            for url in (f"{API}/vehicles", f"{API}/vehicles/{self.car_a.pk}",
                        f"{API}/vehicles/{self.car_a.pk}/sessions", f"{API}/sessions/{session.pk}",
                        f"{API}/vehicles/{self.car_a.pk}/advice"):
                assert client.get(url).status_code == 401, url
            response = client.post(f"{API}/vehicles/{self.car_a.pk}/sessions", session_body(),
                                   format="json")
            assert response.status_code == 401
        assert AlignmentSession.objects.count() == 1


class ScopingTests(PersonaTestCase):
    @classmethod
    def setUpTestData(cls):
        super().setUpTestData()
        cls.sessions = {v.pk: stored_session(v, t) for v, t in
                        [(cls.car_a, cls.tech_a), (cls.car_b, cls.tech_b), (cls.van_f, cls.tech_b)]}
        cls.checks = {v.pk: stored_check(v, t) for v, t in
                      [(cls.car_a, cls.tech_a), (cls.car_b, cls.tech_b), (cls.van_f, cls.tech_b)]}

    def expected(self):
        """Who sees what, written out independently of the scoping code (README, choices)."""
        a, b, f_ = self.car_a.pk, self.car_b.pk, self.van_f.pk
        return {
            self.owner: {a}, self.other_owner: {b}, self.tech_a: {a}, self.tech_b: {b, f_},
            self.manager_a: {a}, self.fleet_manager: {f_}, self.admin: {a, b, f_}, self.no_role: set(),
        }

    def test_each_persona_lists_exactly_the_vehicles_it_may_see(self):
        for user, ids in self.expected().items():
            response = client_for(user).get(f"{API}/vehicles")
            assert response.status_code == 200, user
            assert {v["id"] for v in response.json()["results"]} == ids, user.username
            assert response.json()["count"] == len(ids)

    def test_each_persona_reads_its_own_vehicles_records(self):
        for user, ids in self.expected().items():
            client = client_for(user)
            for pk in ids:
                assert client.get(f"{API}/vehicles/{pk}").status_code == 200
                listed = client.get(f"{API}/vehicles/{pk}/sessions").json()["results"]
                assert [s["id"] for s in listed] == [self.sessions[pk].pk]
                checks = client.get(f"{API}/vehicles/{pk}/checks").json()["results"]
                assert [c["id"] for c in checks] == [self.checks[pk].pk]
                assert client.get(f"{API}/sessions/{self.sessions[pk].pk}").status_code == 200
                assert client.get(f"{API}/checks/{self.checks[pk].pk}").status_code == 200
                assert client.get(f"{API}/vehicles/{pk}/advice").status_code == 200

    def test_other_tenants_objects_answer_404_to_every_persona_and_nothing_is_written(self):
        all_ids = {self.car_a.pk, self.car_b.pk, self.van_f.pk}
        counts = (AlignmentSession.objects.count(), ComponentCheck.objects.count())
        for user, ids in self.expected().items():
            client = client_for(user)
            for pk in all_ids - ids:
                session, check = self.sessions[pk], self.checks[pk]
                for url in (f"{API}/vehicles/{pk}", f"{API}/vehicles/{pk}/sessions",
                            f"{API}/vehicles/{pk}/checks", f"{API}/vehicles/{pk}/advice",
                            f"{API}/sessions/{session.pk}", f"{API}/checks/{check.pk}"):
                    assert client.get(url).status_code == 404, (user.username, url)
                writes = [
                    (f"{API}/vehicles/{pk}/sessions", session_body(), {}),
                    (f"{API}/vehicles/{pk}/checks", check_body(), {}),
                    (f"{API}/sessions/{session.pk}/corrections",
                     {"client_token": str(uuid.uuid4()), "correction_reason": "typo"},
                     {"HTTP_IF_MATCH": f'"session-{session.pk}"'}),
                ]
                for url, body, headers in writes:
                    response = client.post(url, body, format="json", **headers)
                    assert response.status_code == 404, (user.username, url)
                    assert response.json() == {"detail": "not found"}
        assert (AlignmentSession.objects.count(), ComponentCheck.objects.count()) == counts

    def test_an_id_that_does_not_exist_gets_the_same_answer_as_another_tenants(self):
        client = client_for(self.owner)
        theirs = client.get(f"{API}/vehicles/{self.car_b.pk}")
        missing = client.get(f"{API}/vehicles/987654321")
        assert (theirs.status_code, theirs.json()) == (missing.status_code, missing.json())

    def test_search_forgives_case_spaces_and_dashes_and_stays_in_scope(self):
        found = client_for(self.tech_b).get(f"{API}/vehicles", {"q": "xy-99 z"}).json()["results"]
        assert [v["plate"] for v in found] == ["XY99 ZZZ"]
        assert client_for(self.tech_a).get(f"{API}/vehicles", {"q": "xy99"}).json()["results"] == []
        by_vin = client_for(self.tech_a).get(f"{API}/vehicles", {"q": self.car_a.vin.lower()})
        assert [v["id"] for v in by_vin.json()["results"]] == [self.car_a.pk]

    def test_a_search_with_a_nul_character_is_refused_not_crashed(self):
        response = client_for(self.tech_a).get(f"{API}/vehicles", {"q": "AB\x0012"})
        assert response.status_code == 400
        assert "q" in response.json()


class RolesTests(PersonaTestCase):
    def test_owners_and_managers_may_read_but_not_record_403(self):
        session = stored_session(self.car_a, self.tech_a)
        for user in (self.owner, self.manager_a):
            client = client_for(user)
            r1 = client.post(f"{API}/vehicles/{self.car_a.pk}/sessions", session_body(), format="json")
            r2 = client.post(f"{API}/vehicles/{self.car_a.pk}/checks", check_body(), format="json")
            r3 = client.post(f"{API}/sessions/{session.pk}/corrections",
                             {"client_token": str(uuid.uuid4()), "correction_reason": "typo"},
                             format="json", HTTP_IF_MATCH=f'"session-{session.pk}"')
            for response in (r1, r2, r3):
                assert response.status_code == 403, user.username
                assert "technicians and administrators" in response.json()["detail"]
        assert AlignmentSession.objects.count() == 1
        assert ComponentCheck.objects.count() == 0

    def test_an_administrator_may_record_on_any_vehicle(self):
        response = client_for(self.admin).post(f"{API}/vehicles/{self.car_b.pk}/sessions",
                                               session_body(), format="json")
        assert response.status_code == 201


class SessionCreateTests(PersonaTestCase):
    def post(self, body, user=None, vehicle=None):
        return client_for(user or self.tech_a).post(
            f"{API}/vehicles/{(vehicle or self.car_a).pk}/sessions", body, format="json")

    def test_a_session_is_stored_through_the_service_with_its_readings(self):
        body = session_body(ride_height_fl_mm=352.0)
        response = self.post(body)
        assert response.status_code == 201
        data = response.json()
        session = AlignmentSession.objects.get()
        assert data["id"] == session.pk and data["technician"] == "tech-a"
        assert response["Location"] == f"{API}/sessions/{session.pk}"
        assert response["ETag"] == f'"session-{session.pk}"' == data["etag"]
        assert {r["corner"]: r["toe_deg"] for r in data["readings"]} == {
            "FL": 0.05, "FR": 0.07, "RL": 0.10, "RR": 0.12}
        assert session.ride_height_fl_mm == 352.0
        assert str(session.client_token) == body["client_token"]

    def test_a_resend_with_the_same_client_token_returns_the_stored_session_with_200(self):
        body = session_body()
        first = self.post(body)
        again = self.post(body)
        assert (first.status_code, again.status_code) == (201, 200)
        assert again.json()["id"] == first.json()["id"]
        assert again["ETag"] == first["ETag"]
        assert AlignmentSession.objects.count() == 1

    def test_a_client_token_used_for_another_vehicles_record_is_refused(self):
        body = session_body()
        assert self.post(body).status_code == 201
        response = self.post(body, user=self.admin, vehicle=self.car_b)
        assert response.status_code == 400
        assert list(response.json()) == ["client_token"]
        assert AlignmentSession.objects.count() == 1

    def test_a_reading_out_of_range_names_the_corner_and_field(self):
        body = session_body()
        body["readings"][0]["toe_deg"] = 12.5
        response = self.post(body)
        assert response.status_code == 400
        errors = response.json()
        assert list(errors) == ["readings[FL].toe_deg"]
        assert "10" in errors["readings[FL].toe_deg"][0]
        assert AlignmentSession.objects.count() == 0

    def test_a_reading_that_is_not_a_number_names_the_corner_and_field(self):
        body = session_body()
        body["readings"][3]["camber_deg"] = "minus one"
        body["readings"][2]["corner"] = "XX"
        errors = self.post(body).json()
        assert set(errors) == {"readings[RR].camber_deg", "readings[2].corner"}

    def test_the_services_refusals_name_the_field_too(self):
        body = session_body()
        body["readings"][2]["caster_deg"] = 3.0  # caster on a rear corner: the service refuses it
        response = self.post(body)
        assert response.status_code == 400
        assert list(response.json()) == ["readings[RL].caster_deg"]
        stored_session(self.car_a, self.tech_a, odometer_km=50_000)
        response = self.post(session_body(odometer_km=49_000))
        assert response.status_code == 400
        assert "50000" in response.json()["odometer_km"][0]
        assert AlignmentSession.objects.count() == 1

    def test_missing_and_malformed_fields_are_each_named(self):
        body = session_body(measured_at="yesterday", kind="wobbly")
        del body["equipment_id"]
        body["readings"] = "FL 0.1"
        errors = self.post(body).json()
        assert set(errors) == {"measured_at", "kind", "equipment_id", "readings"}
        assert all(isinstance(v, list) and v for v in errors.values())

    def test_a_session_in_the_future_is_refused(self):
        response = self.post(session_body(measured_at=f.at(-3).isoformat()))
        assert response.status_code == 400
        assert list(response.json()) == ["measured_at"]

    def test_only_the_json_body_is_accepted(self):
        response = client_for(self.tech_a).post(f"{API}/vehicles/{self.car_a.pk}/sessions",
                                                {"kind": "as_found"})  # multipart form
        assert response.status_code == 415


class CorrectionTests(PersonaTestCase):
    def setUp(self):
        self.original = stored_session(self.car_a, self.tech_a)
        self.url = f"{API}/sessions/{self.original.pk}/corrections"

    def etag(self, client, pk=None) -> str:
        response = client.get(f"{API}/sessions/{pk or self.original.pk}")
        return response["ETag"]

    def correct(self, client, etag, **overrides):
        body = {"client_token": str(uuid.uuid4()), "correction_reason": "FL toe typed wrong",
                "readings": [{"corner": "FL", "toe_deg": 0.15, "camber_deg": -0.8, "caster_deg": 4.0}]}
        body.update(overrides)
        headers = {"HTTP_IF_MATCH": etag} if etag is not None else {}
        return client.post(self.url, body, format="json", **headers), body

    def test_two_tablets_correcting_the_same_session_one_stored_the_other_409(self):
        tablet_1, tablet_2 = client_for(self.tech_a), client_for(self.admin)
        etag_1, etag_2 = self.etag(tablet_1), self.etag(tablet_2)
        assert etag_1 == etag_2 == f'"session-{self.original.pk}"'
        first, _ = self.correct(tablet_1, etag_1)
        second, _ = self.correct(tablet_2, etag_2, correction_reason="RR camber typed wrong")
        assert first.status_code == 201
        assert second.status_code == 409
        newer = first.json()["id"]
        conflict = second.json()
        assert conflict["code"] == "already_corrected"
        assert conflict["newer"]["id"] == newer == conflict["latest"]["id"]
        assert f"corrected by session {newer}" in conflict["detail"]
        assert conflict["newer"]["url"] == f"{API}/sessions/{newer}"
        assert AlignmentSession.objects.filter(supersedes=self.original).count() == 1
        assert AlignmentSession.objects.count() == 2

    def test_a_correction_carries_what_it_does_not_change_and_supersedes_the_original(self):
        response, body = self.correct(client_for(self.tech_a), self.etag(client_for(self.tech_a)))
        data = response.json()
        assert data["supersedes"] == self.original.pk
        assert data["correction_reason"] == "FL toe typed wrong"
        assert data["odometer_km"] == self.original.odometer_km
        assert data["equipment_id"] == self.original.equipment_id
        assert [(r["corner"], r["toe_deg"]) for r in data["readings"]] == [("FL", 0.15)]
        old = client_for(self.tech_a).get(f"{API}/sessions/{self.original.pk}")
        assert old.json()["superseded_by"] == data["id"]
        assert old["ETag"] == f'"session-{self.original.pk}.superseded-by-{data["id"]}"'

    def test_the_ride_heights_of_the_original_are_kept_unless_changed(self):
        original = stored_session(self.car_b, self.tech_b, ride_heights_mm={"FL": 350.0, "RR": 361.0})
        client = client_for(self.tech_b)
        self.url = f"{API}/sessions/{original.pk}/corrections"
        response, _ = self.correct(client, self.etag(client, original.pk), ride_height_rr_mm=362.5)
        data = response.json()
        assert (data["ride_height_fl_mm"], data["ride_height_rr_mm"]) == (350.0, 362.5)

    def test_a_resend_of_the_stored_correction_gets_it_back_with_200_not_409(self):
        client = client_for(self.tech_a)
        etag = self.etag(client)
        first, body = self.correct(client, etag)
        again = client.post(self.url, body, format="json", HTTP_IF_MATCH=etag)
        assert (first.status_code, again.status_code) == (201, 200)
        assert again.json()["id"] == first.json()["id"]
        assert AlignmentSession.objects.count() == 2

    def test_a_correction_without_if_match_is_428_and_stores_nothing(self):
        client = client_for(self.tech_a)
        for etag in (None, "*"):
            response, _ = self.correct(client, etag)
            assert response.status_code == 428
            assert f"GET {API}/sessions/{self.original.pk}" in response.json()["detail"]
        assert AlignmentSession.objects.count() == 1

    def test_an_if_match_naming_another_version_is_412_and_stores_nothing(self):
        client = client_for(self.tech_a)
        for etag in ('"session-999999"', f'W/"session-{self.original.pk}"', "garbage"):
            response, _ = self.correct(client, etag)
            assert response.status_code == 412, etag
            assert response.json()["current_etag"] == f'"session-{self.original.pk}"'
        assert AlignmentSession.objects.count() == 1

    def test_correcting_the_latest_version_after_a_conflict_succeeds(self):
        client = client_for(self.tech_a)
        etag = self.etag(client)
        first, _ = self.correct(client, etag)
        conflict, _ = self.correct(client, etag)
        latest = conflict.json()["latest"]
        self.url = f"{API}/sessions/{latest['id']}/corrections"
        again, _ = self.correct(client, latest["etag"])
        assert again.status_code == 201
        assert again.json()["supersedes"] == first.json()["id"]

    def test_the_database_refuses_a_second_correction_that_raced_past_the_checks_409(self):
        # Another tablet's correction commits between this request's checks and its insert: the
        # views' and the service's "already corrected?" both read the stale answer, and the
        # one-to-one ``supersedes`` in the database is what refuses the second row.
        client = client_for(self.tech_a)
        etag = self.etag(client)
        other = services.session_correct(original=self.original, author=self.admin, reason="other tablet")
        with mock.patch("api.views.concurrency.newer_id", return_value=None), \
                mock.patch.object(AlignmentSession, "is_superseded", new=False):
            response, _ = self.correct(client, etag)
        assert response.status_code == 409
        assert response.json()["newer"]["id"] == other.pk
        assert AlignmentSession.objects.filter(supersedes=self.original).count() == 1

    def test_a_correction_without_a_reason_names_the_field(self):
        response, _ = self.correct(client_for(self.tech_a), self.etag(client_for(self.tech_a)),
                                   correction_reason="  ")
        assert response.status_code == 400
        assert list(response.json()) == ["correction_reason"]

    def test_if_none_match_with_the_current_etag_answers_304(self):
        client = client_for(self.owner)
        etag = self.etag(client)
        response = client.get(f"{API}/sessions/{self.original.pk}", HTTP_IF_NONE_MATCH=etag)
        assert response.status_code == 304
        self.correct(client_for(self.tech_a), etag)
        assert client.get(f"{API}/sessions/{self.original.pk}",
                          HTTP_IF_NONE_MATCH=etag).status_code == 200

    def test_lists_hold_current_sessions_unless_superseded_ones_are_asked_for(self):
        client = client_for(self.tech_a)
        first, _ = self.correct(client, self.etag(client))
        url = f"{API}/vehicles/{self.car_a.pk}/sessions"
        assert [s["id"] for s in client.get(url).json()["results"]] == [first.json()["id"]]
        everything = client.get(url, {"include_superseded": "true"}).json()["results"]
        assert [s["id"] for s in everything] == [self.original.pk, first.json()["id"]]

    def test_a_vehicles_etag_changes_when_a_record_is_stored(self):
        client = client_for(self.tech_a)
        before = client.get(f"{API}/vehicles/{self.car_a.pk}")
        assert before.json()["newest_session_id"] == self.original.pk
        assert client.get(f"{API}/vehicles/{self.car_a.pk}",
                          HTTP_IF_NONE_MATCH=before["ETag"]).status_code == 304
        self.correct(client, self.etag(client))
        after = client.get(f"{API}/vehicles/{self.car_a.pk}", HTTP_IF_NONE_MATCH=before["ETag"])
        assert after.status_code == 200 and after["ETag"] != before["ETag"]


class RacingTabletsTests(TransactionTestCase):
    """Two real requests at once, each in its own thread with its own database connection."""

    def setUp(self):
        workshop = f.make_workshop("Race workshop")
        self.tech = f.make_user("race-tech", "technician", workshop=workshop)
        self.other = f.make_user("race-tech-2", "technician", workshop=workshop)
        vehicle = f.make_vehicle(platform=f.make_platform("Race platform"), workshop=workshop)
        self.original = stored_session(vehicle, self.tech)

    def test_two_tablets_correcting_at_the_same_moment_one_201_one_409(self):
        etag = f'"session-{self.original.pk}"'
        barrier = threading.Barrier(2, timeout=20)
        real = services.session_correct
        statuses, bodies = [], []

        def both_past_the_checks(**kwargs):
            barrier.wait()  # both requests passed If-Match and "already corrected?" before either writes
            return real(**kwargs)

        def tablet(user):
            try:
                response = client_for(user).post(
                    f"{API}/sessions/{self.original.pk}/corrections",
                    {"client_token": str(uuid.uuid4()), "correction_reason": f"by {user.username}"},
                    format="json", HTTP_IF_MATCH=etag)
                statuses.append(response.status_code)
                bodies.append(response.json())
            finally:
                connection.close()

        with mock.patch("api.views.services.session_correct", side_effect=both_past_the_checks), \
                mock.patch("analytics.receivers.enqueue_request"):
            threads = [threading.Thread(target=tablet, args=(u,)) for u in (self.tech, self.other)]
            for t in threads:
                t.start()
            for t in threads:
                t.join(30)
        assert sorted(statuses) == [201, 409], bodies
        stored = AlignmentSession.objects.get(supersedes=self.original)
        conflict = next(b for b in bodies if b.get("code") == "already_corrected")
        assert conflict["newer"]["id"] == stored.pk


class ComponentCheckTests(PersonaTestCase):
    def post(self, body, vehicle=None):
        return client_for(self.tech_a).post(f"{API}/vehicles/{(vehicle or self.car_a).pk}/checks", body,
                                            format="json")

    def test_a_check_is_stored_and_a_resend_returns_it_with_200(self):
        body = check_body(findings=["cracking"])
        first, again = self.post(body), self.post(body)
        assert (first.status_code, again.status_code) == (201, 200)
        assert first.json()["id"] == again.json()["id"]
        assert first.json()["findings"] == ["cracking"]
        assert first["ETag"] == f'"check-{first.json()["id"]}"'
        assert ComponentCheck.objects.count() == 1
        listed = client_for(self.owner).get(f"{API}/vehicles/{self.car_a.pk}/checks").json()["results"]
        assert [c["id"] for c in listed] == [first.json()["id"]]

    def test_play_without_how_it_was_measured_names_the_fields(self):
        errors = self.post(check_body(play_direction="", play_loading="")).json()
        assert set(errors) == {"play_direction", "play_loading"}

    def test_an_unknown_finding_is_named_by_its_position(self):
        errors = self.post(check_body(findings=["cracking", "melted"])).json()
        assert list(errors) == ["findings[1]"]

    def test_a_part_of_the_other_axle_is_refused_by_the_service_naming_the_corner(self):
        errors = self.post(check_body(corner="RL")).json()
        assert list(errors) == ["corner"]
        assert "front-axle part" in errors["corner"][0]
        assert ComponentCheck.objects.count() == 0

    def test_a_session_of_another_vehicle_is_refused_as_not_there(self):
        theirs = stored_session(self.car_b, self.tech_b)
        response = self.post(check_body(session=theirs.pk))
        assert response.status_code == 400
        assert list(response.json()) == ["session"]
        ours = stored_session(self.car_a, self.tech_a, odometer_km=41_000)
        assert self.post(check_body(session=ours.pk)).json()["session"] == ours.pk


class AdviceTests(PersonaTestCase):
    def test_before_any_analysis_the_advice_is_pending_and_still_carries_the_caution(self):
        data = client_for(self.owner).get(f"{API}/vehicles/{self.car_a.pk}/advice").json()
        assert (data["status"], data["items"], data["result"]) == ("pending", [], None)
        assert data["caution"] == CAUTION

    def test_every_advice_item_of_a_real_analysis_carries_the_caution(self):
        for i in range(4):
            stored_session(self.car_a, self.tech_a, days_ago=100 * (4 - i), odometer_km=20_000 + 8_000 * i,
                           readings=f.readings(toe=0.05 + 0.04 * i))
        result = analysis.vehicle_analyse(vehicle_id=self.car_a.pk)
        data = client_for(self.owner).get(f"{API}/vehicles/{self.car_a.pk}/advice").json()
        assert data["result"]["id"] == result.pk
        assert len(data["items"]) == AdviceItem.objects.filter(vehicle=self.car_a).count() > 0
        for item in data["items"]:
            assert item["caution"] == CAUTION
            assert item["what"] and item["detail"]["why"]

    def test_an_item_stored_without_a_caution_is_still_served_with_it(self):
        from analytics.core.advice import MODEL_VERSION

        result = AnalysisResult.objects.create(vehicle=self.car_a, input_key="k", model_version=MODEL_VERSION,
                                               payload={})
        AdviceItem.objects.create(result=result, vehicle=self.car_a, key="x", kind="alignment",
                                  severity="routine", urgency_rank=0, what="check toe", body={})
        items = client_for(self.tech_a).get(f"{API}/vehicles/{self.car_a.pk}/advice").json()["items"]
        assert [i["caution"] for i in items] == [CAUTION]


@pytest.mark.django_db
def test_the_schema_is_served_and_generates_without_warnings_or_errors(tmp_path):
    response = APIClient().get("/api/schema/", HTTP_ACCEPT="application/vnd.oai.openapi+json")
    assert response.status_code == 200
    schema = response.json()
    assert {"/api/v1/token", "/api/v1/vehicles", "/api/v1/sessions/{id}/corrections"} <= set(schema["paths"])
    correction = schema["paths"]["/api/v1/sessions/{id}/corrections"]["post"]
    assert {"201", "409", "412", "428"} <= set(correction["responses"])
    assert any(p["name"] == "If-Match" and p["required"] for p in correction["parameters"])
    out = tmp_path / "schema.yaml"
    call_command("spectacular", "--validate", "--fail-on-warn", "--file", str(out))
    assert out.stat().st_size > 0


def test_the_api_routes_are_the_ones_the_persona_tests_request():
    """A new route under /api/ fails here until the scoping tests above request it."""
    from django.urls import get_resolver

    routes = set()
    for pattern in get_resolver().url_patterns:
        if str(pattern.pattern) == "api/":
            routes = {str(p.pattern) for p in pattern.url_patterns}
    assert routes == {
        "schema/", "v1/token", "v1/vehicles", "v1/vehicles/<int:pk>", "v1/vehicles/<int:pk>/sessions",
        "v1/vehicles/<int:pk>/checks", "v1/vehicles/<int:pk>/advice", "v1/sessions/<int:pk>",
        "v1/sessions/<int:pk>/corrections", "v1/checks/<int:pk>"}
