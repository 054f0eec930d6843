"""The technician's bay pages and submit endpoints, through the Django test client."""
from __future__ import annotations

import io
import json
import math
import shutil
import tempfile
import uuid

from django.core.files.uploadedfile import SimpleUploadedFile
from django.test import override_settings
from django.urls import reverse
from PIL import Image

from analytics.core.units import toe_from_linear
from inspections import services
from inspections.models import AlignmentSession, ComponentCheck, ComponentPhoto, WheelReading
from tests import factories as f
from tests.base import PersonaTestCase

PASSWORD = "pw-test-123"


def payload(**over):
    """A full session as the tablet sends it: four corners, FL toe typed as linear mm."""
    data = {
        "client_token": str(uuid.uuid4()), "kind": "as_found", "odometer_km": "20500",
        "odometer_unit": "km", "equipment_id": "RIG-7", "equipment_calibrated_on": "2026-01-10",
        "notes": "", "readings": {
            "FL": {"toe_deg": "0.5", "toe_unit": "mm", "camber_deg": "-0°30'", "caster_deg": "4.1"},
            "FR": {"toe_deg": "0.06", "toe_unit": "angle", "camber_deg": "-0.45", "caster_deg": "3.9"},
            "RL": {"toe_deg": "0.12", "toe_unit": "angle", "camber_deg": "-1.3"},
            "RR": {"toe_deg": "0°06'", "toe_unit": "angle", "camber_deg": "-1.1"},
        },
        "checks": [],
    }
    data.update(over)
    return data


def a_check(**over):
    row = {"client_token": str(uuid.uuid4()), "part": "rear_toe_link_inner_bush", "corner": "RL",
           "play_mm": "0.8", "play_direction": "radial", "play_loading": "unloaded",
           "deflection_mm": "", "deflection_force_n": "", "findings": ["cracking"],
           "verdict": "keep_watch", "defect_category": "minor", "notes": ""}
    row.update(over)
    return row


def png_bytes(size=(8, 8)) -> bytes:
    buf = io.BytesIO()
    Image.new("RGB", size, (20, 80, 90)).save(buf, format="PNG")
    return buf.getvalue()


class BayViewCase(PersonaTestCase):
    def sign_in(self, user):
        self.client.force_login(user)

    def post_json(self, url, data):
        return self.client.post(url, json.dumps(data), content_type="application/json")

    def submit_url(self, vehicle):
        return reverse("bay_session_submit", args=[vehicle.pk])


class HomeRoutingTests(BayViewCase):
    def test_an_anonymous_visitor_is_sent_to_sign_in(self):
        response = self.client.get(reverse("home"))
        assert response.status_code == 302 and response["Location"].startswith(reverse("login"))

    def test_a_technician_lands_in_the_bay(self):
        self.sign_in(self.tech_a)
        assert self.client.get(reverse("home"))["Location"] == reverse("bay")

    def test_a_manager_lands_on_the_fleet_page_and_an_owner_on_their_own(self):
        self.sign_in(self.manager_a)
        assert self.client.get(reverse("home"))["Location"] == "/analysis/fleet/"
        self.sign_in(self.owner)
        assert self.client.get(reverse("home"))["Location"] == "/analysis/mine/"

    def test_a_user_without_a_role_is_told_so(self):
        self.sign_in(self.no_role)
        response = self.client.get(reverse("home"))
        assert response.status_code == 403
        assert b"no role" in response.content

    def test_the_sign_in_page_signs_in_and_goes_home(self):
        page = self.client.get(reverse("login"))
        assert page.status_code == 200 and b'name="password"' in page.content
        response = self.client.post(reverse("login"), {"username": "tech-a", "password": PASSWORD})
        assert response.status_code == 302 and response["Location"] == reverse("home")


class AccessTests(BayViewCase):
    def test_anonymous_bay_pages_redirect_to_sign_in(self):
        for url in (reverse("bay"), reverse("bay_vehicle", args=[self.car_a.pk]),
                    reverse("bay_session_new", args=[self.car_a.pk])):
            response = self.client.get(url)
            assert response.status_code == 302, url
            assert response["Location"].startswith(reverse("login")), url

    def test_an_anonymous_submit_answers_401_and_stores_nothing(self):
        response = self.post_json(self.submit_url(self.car_a), payload())
        assert response.status_code == 401
        assert response.json()["ok"] is False
        assert AlignmentSession.objects.count() == 0

    def test_a_technician_of_another_workshop_gets_404_on_the_bay_page_and_the_submit(self):
        self.sign_in(self.tech_b)
        assert self.client.get(reverse("bay_vehicle", args=[self.car_a.pk])).status_code == 404
        assert self.client.get(reverse("bay_session_new", args=[self.car_a.pk])).status_code == 404
        response = self.post_json(self.submit_url(self.car_a), payload())
        assert response.status_code == 404
        assert AlignmentSession.objects.count() == 0

    def test_an_owner_cannot_open_the_bay_or_post_a_session_even_for_their_own_car(self):
        self.sign_in(self.owner)
        assert self.client.get(reverse("bay")).status_code == 404
        assert self.client.get(reverse("bay_vehicle", args=[self.car_a.pk])).status_code == 404
        response = self.post_json(self.submit_url(self.car_a), payload())
        assert response.status_code == 404
        assert AlignmentSession.objects.count() == 0

    def test_a_manager_cannot_post_a_session(self):
        self.sign_in(self.manager_a)
        assert self.post_json(self.submit_url(self.car_a), payload()).status_code == 404

    def test_another_workshops_session_page_is_not_found(self):
        session = services.session_submit(
            vehicle=self.car_b, technician=self.tech_b, measured_at=f.at(1), odometer_km=1000,
            kind="as_found", equipment_id="R", equipment_calibrated_on=f.at(30).date(),
            readings=f.readings())
        self.sign_in(self.tech_a)
        assert self.client.get(reverse("bay_session", args=[session.pk])).status_code == 404
        assert self.client.get(reverse("bay_session_correction", args=[session.pk])).status_code == 404
        response = self.post_json(reverse("bay_session_correct_submit", args=[session.pk]),
                                  {**payload(), "correction_reason": "x"})
        assert response.status_code == 404

    def test_the_submit_endpoint_refuses_get(self):
        self.sign_in(self.tech_a)
        assert self.client.get(self.submit_url(self.car_a)).status_code == 405


class SearchAndPagesTests(BayViewCase):
    def test_search_forgives_case_spaces_and_dashes(self):
        self.sign_in(self.tech_a)
        response = self.client.get(reverse("bay"), {"q": "  ab-12  cde "})
        assert response.status_code == 302
        assert response["Location"] == reverse("bay_vehicle", args=[self.car_a.pk])

    def test_search_by_fleet_number_and_vin_stays_inside_the_workshop(self):
        self.sign_in(self.tech_b)
        found = self.client.get(reverse("bay"), {"q": self.van_f.fleet_number.lower()})
        assert found["Location"] == reverse("bay_vehicle", args=[self.van_f.pk])
        nothing = self.client.get(reverse("bay"), {"q": self.car_a.vin})
        assert nothing.status_code == 200 and b"Nothing matches" in nothing.content

    def test_the_vehicle_page_shows_spec_bands_with_sources_and_the_diameter(self):
        self.sign_in(self.tech_a)
        response = self.client.get(reverse("bay_vehicle", args=[self.car_a.pk]))
        text = response.content.decode()
        assert response.status_code == 200
        assert "Spec bands" in text and "unverified" in text
        assert "406.4 mm" in text
        assert "-0.05 … +0.15°" in text  # front toe 0.05 ± 0.10

    def test_the_session_form_offers_numeric_keypads_the_camera_and_the_diameter(self):
        self.sign_in(self.tech_a)
        text = self.client.get(reverse("bay_session_new", args=[self.car_a.pk])).content.decode()
        assert 'inputmode="decimal"' in text
        assert 'capture="environment"' in text and 'accept="image/*"' in text
        assert "D = 406.4 mm" in text
        assert 'name="readings[FL].toe_deg"' in text and 'name="readings[RR].camber_deg"' in text
        assert "readings[RL].caster_deg" not in text  # caster only on the steered axle


class SubmitTests(BayViewCase):
    def setUp(self):
        self.sign_in(self.tech_a)

    def test_a_full_session_is_stored_with_its_four_corners(self):
        response = self.post_json(self.submit_url(self.car_a), payload())
        assert response.status_code == 200, response.content
        body = response.json()
        assert body["ok"] is True
        session = AlignmentSession.objects.get(pk=body["session_id"])
        assert session.vehicle == self.car_a and session.technician == self.tech_a
        assert session.odometer_km == 20500
        assert sorted(session.readings.values_list("corner", flat=True)) == ["FL", "FR", "RL", "RR"]
        rr = session.readings.get(corner="RR")
        assert math.isclose(rr.toe_deg, 0.1, abs_tol=1e-12)  # 0°06' = 0.1°
        assert math.isclose(session.readings.get(corner="FL").camber_deg, -0.5, abs_tol=1e-12)

    def test_linear_toe_in_mm_is_converted_at_the_platforms_diameter(self):
        self.post_json(self.submit_url(self.car_a), payload())
        fl = WheelReading.objects.get(corner="FL")
        # independent reference: θ = asin(x / D), x = 0.5 mm, D = 406.4 mm (DESIGN.md §3)
        assert math.isclose(fl.toe_deg, math.degrees(math.asin(0.5 / 406.4)), rel_tol=1e-12)
        assert math.isclose(fl.toe_deg, toe_from_linear(0.5, 406.4), rel_tol=1e-12)

    def test_miles_are_converted_to_km_at_the_edge(self):
        self.post_json(self.submit_url(self.car_a), payload(odometer_km="10000", odometer_unit="mi"))
        assert AlignmentSession.objects.get().odometer_km == 16093  # 10 000 × 1.609344

    def test_the_same_token_twice_stores_one_session(self):
        data = payload(checks=[a_check()])
        first = self.post_json(self.submit_url(self.car_a), data).json()
        again = self.post_json(self.submit_url(self.car_a), data).json()
        assert first["ok"] and again["ok"] and first["session_id"] == again["session_id"]
        assert AlignmentSession.objects.count() == 1
        assert ComponentCheck.objects.count() == 1

    def test_a_bad_value_answers_400_naming_the_field_and_stores_nothing(self):
        data = payload()
        data["readings"]["FR"]["camber_deg"] = "minus a bit"
        response = self.post_json(self.submit_url(self.car_a), data)
        assert response.status_code == 400
        errors = response.json()["errors"]
        assert list(errors) == ["readings[FR].camber_deg"]
        assert AlignmentSession.objects.count() == 0 and WheelReading.objects.count() == 0

    def test_an_out_of_range_value_is_refused_by_the_service_with_the_field_named(self):
        data = payload()
        data["readings"]["RL"]["toe_deg"] = "12.5"
        response = self.post_json(self.submit_url(self.car_a), data)
        assert response.status_code == 400
        assert "12.5" in response.json()["errors"]["readings[RL].toe_deg"]
        assert AlignmentSession.objects.count() == 0

    def test_linear_toe_larger_than_the_diameter_is_refused(self):
        data = payload()
        data["readings"]["FL"]["toe_deg"] = "500"
        response = self.post_json(self.submit_url(self.car_a), data)
        assert "readings[FL].toe_deg" in response.json()["errors"]

    def test_missing_header_fields_are_named(self):
        response = self.post_json(self.submit_url(self.car_a), payload(equipment_id="", odometer_km=""))
        errors = response.json()["errors"]
        assert {"equipment_id", "odometer_km"} <= set(errors)

    def test_no_readings_at_all_is_refused(self):
        response = self.post_json(self.submit_url(self.car_a), payload(readings={}))
        assert response.status_code == 400 and "readings" in response.json()["errors"]

    def test_a_bad_component_check_names_its_index_and_nothing_is_stored(self):
        data = payload(checks=[a_check(), a_check(part="front_lower_ball_joint", corner="RL")])
        response = self.post_json(self.submit_url(self.car_a), data)
        assert response.status_code == 400
        assert "checks[1].corner" in response.json()["errors"]
        assert AlignmentSession.objects.count() == 0 and ComponentCheck.objects.count() == 0

    def test_a_check_with_play_but_no_method_is_refused(self):
        data = payload(checks=[a_check(play_direction="")])
        errors = self.post_json(self.submit_url(self.car_a), data).json()["errors"]
        assert "checks[0].play_direction" in errors

    def test_malformed_json_is_a_400(self):
        response = self.client.post(self.submit_url(self.car_a), "{not json",
                                    content_type="application/json")
        assert response.status_code == 400 and "__all__" in response.json()["errors"]


class PhotoTests(BayViewCase):
    def setUp(self):
        self.media = tempfile.mkdtemp()
        self.addCleanup(shutil.rmtree, self.media, ignore_errors=True)
        override = override_settings(MEDIA_ROOT=self.media)
        override.enable()
        self.addCleanup(override.disable)
        self.sign_in(self.tech_a)

    def post_multipart(self, data, files):
        return self.client.post(self.submit_url(self.car_a),
                                {"payload": json.dumps(data), **files})

    def test_photos_are_stored_with_their_check(self):
        files = {"checks[0].photos": [SimpleUploadedFile("a.png", png_bytes(), "image/png"),
                                      SimpleUploadedFile("b.png", png_bytes(), "image/png")]}
        response = self.post_multipart(payload(checks=[a_check()]), files)
        assert response.status_code == 200, response.content
        check = ComponentCheck.objects.get()
        assert check.photos.count() == 2

    def test_a_resend_with_photos_stores_the_photos_once(self):
        data = payload(checks=[a_check()])
        for _ in range(2):
            files = {"checks[0].photos": [SimpleUploadedFile("a.png", png_bytes(), "image/png")]}
            assert self.post_multipart(data, files).status_code == 200
        assert AlignmentSession.objects.count() == 1
        assert ComponentPhoto.objects.count() == 1

    def test_a_file_that_is_not_an_image_is_refused(self):
        files = {"checks[0].photos": [SimpleUploadedFile("x.png", b"not an image", "image/png")]}
        response = self.post_multipart(payload(checks=[a_check()]), files)
        assert response.status_code == 400
        assert "not a readable image" in response.json()["errors"]["checks[0].photos"]
        assert ComponentPhoto.objects.count() == 0 and AlignmentSession.objects.count() == 0

    def test_seven_photos_are_too_many(self):
        files = {"checks[0].photos": [SimpleUploadedFile(f"{i}.png", png_bytes(), "image/png")
                                      for i in range(7)]}
        response = self.post_multipart(payload(checks=[a_check()]), files)
        assert "at most 6" in response.json()["errors"]["checks[0].photos"]

    def test_a_photo_over_5_mb_is_refused(self):
        big = SimpleUploadedFile("big.png", png_bytes() + b"\0" * (5 * 1024 * 1024), "image/png")
        response = self.post_multipart(payload(checks=[a_check()]), {"checks[0].photos": [big]})
        assert "5 MB" in response.json()["errors"]["checks[0].photos"]


class CorrectionTests(BayViewCase):
    def setUp(self):
        self.sign_in(self.tech_a)
        body = self.post_json(self.submit_url(self.car_a), payload()).json()
        self.original = AlignmentSession.objects.get(pk=body["session_id"])

    def correct(self, **over):
        data = payload(correction_reason="typed 20500 for 25000", odometer_km="25000")
        data.update(over)
        return self.post_json(reverse("bay_session_correct_submit", args=[self.original.pk]), data)

    def test_a_correction_keeps_the_original_and_the_history_shows_both(self):
        response = self.correct()
        assert response.status_code == 200, response.content
        fixed = AlignmentSession.objects.get(pk=response.json()["session_id"])
        assert fixed.supersedes == self.original and fixed.odometer_km == 25000
        page = self.client.get(reverse("bay_session", args=[fixed.pk])).content.decode()
        assert "As first recorded" in page and "Correction 1" in page
        assert "typed 20500 for 25000" in page

    def test_a_correction_needs_a_reason(self):
        response = self.correct(correction_reason="")
        assert response.status_code == 400 and "correction_reason" in response.json()["errors"]
        assert AlignmentSession.objects.count() == 1

    def test_the_correction_form_is_prefilled_and_a_superseded_session_points_to_the_latest(self):
        page = self.client.get(reverse("bay_session_correction", args=[self.original.pk]))
        assert 'value="20500"' in page.content.decode()
        fixed_id = self.correct().json()["session_id"]
        again = self.client.get(reverse("bay_session_correction", args=[self.original.pk]))
        assert again["Location"] == reverse("bay_session", args=[fixed_id])

    def test_a_repeated_correction_token_is_applied_once(self):
        token = str(uuid.uuid4())
        first = self.correct(client_token=token).json()
        again = self.correct(client_token=token).json()
        assert first["session_id"] == again["session_id"]
        assert AlignmentSession.objects.count() == 2
