"""Submitting, correcting and refusing inspection records through the services."""
import datetime as dt
import uuid

import pytest
from django.core.exceptions import ValidationError

from inspections import selectors, services
from inspections.models import AlignmentSession, ComponentCheck, WheelReading
from tests import factories as f
from tests.base import PersonaTestCase


def submit(vehicle, tech, **kw):
    values = dict(vehicle=vehicle, technician=tech, measured_at=f.at(kw.pop("days_ago", 1)),
                  odometer_km=10_000, kind="as_found", equipment_id="RIG-7",
                  equipment_calibrated_on=dt.date(2026, 1, 10), readings=f.readings())
    values.update(kw)
    return services.session_submit(**values)


class SessionSubmitTests(PersonaTestCase):
    def test_a_session_is_stored_with_one_reading_per_corner(self):
        session = submit(self.car_a, self.tech_a)
        assert sorted(session.readings.values_list("corner", flat=True)) == ["FL", "FR", "RL", "RR"]

    def test_the_same_client_token_twice_stores_one_session(self):
        token = uuid.uuid4()
        first = submit(self.car_a, self.tech_a, client_token=token)
        again = submit(self.car_a, self.tech_a, client_token=token)
        assert first.pk == again.pk
        assert AlignmentSession.objects.count() == 1

    def test_a_lower_odometer_is_refused_with_the_field_named(self):
        submit(self.car_a, self.tech_a, odometer_km=20_000, days_ago=30)
        with pytest.raises(ValidationError) as err:
            submit(self.car_a, self.tech_a, odometer_km=19_000)
        assert "odometer_km" in err.value.message_dict
        assert "20000" in err.value.message_dict["odometer_km"][0]
        assert AlignmentSession.objects.count() == 1

    def test_a_lower_odometer_marked_as_a_change_with_reason_is_accepted(self):
        submit(self.car_a, self.tech_a, odometer_km=20_000, days_ago=30)
        session = submit(self.car_a, self.tech_a, odometer_km=150,
                         odometer_change_reason="instrument cluster replaced")
        assert session.odometer_change_reason == "instrument cluster replaced"

    def test_caster_on_a_rear_corner_is_refused_by_name(self):
        rows = f.readings()
        rows[2]["caster_deg"] = 3.0
        with pytest.raises(ValidationError) as err:
            submit(self.car_a, self.tech_a, readings=rows)
        assert "readings[RL].caster_deg" in err.value.message_dict
        assert WheelReading.objects.count() == 0

    def test_an_out_of_range_toe_names_the_field_value_and_range(self):
        rows = f.readings()
        rows[0]["toe_deg"] = 12.5
        with pytest.raises(ValidationError) as err:
            submit(self.car_a, self.tech_a, readings=rows)
        message = err.value.message_dict["readings[FL].toe_deg"][0]
        assert "12.5" in message and "10.0" in message

    def test_nan_is_refused(self):
        rows = f.readings()
        rows[1]["camber_deg"] = float("nan")
        with pytest.raises(ValidationError) as err:
            submit(self.car_a, self.tech_a, readings=rows)
        assert "readings[FR].camber_deg" in err.value.message_dict


class CorrectionTests(PersonaTestCase):
    def test_a_correction_keeps_the_original_and_supersedes_it(self):
        original = submit(self.car_a, self.tech_a, odometer_km=12_000)
        fixed = services.session_correct(original=original, author=self.tech_a,
                                         reason="typed 12000 for 21000", odometer_km=21_000)
        assert fixed.supersedes_id == original.pk
        assert AlignmentSession.objects.count() == 2
        assert list(AlignmentSession.objects.current()) == [fixed]
        assert [s.pk for s in selectors.history_of_session(fixed)] == [original.pk, fixed.pk]
        assert fixed.readings.count() == 4

    def test_a_correction_keeps_the_ride_heights_it_does_not_change(self):
        original = submit(self.car_a, self.tech_a, ride_heights_mm={"FL": 371.0, "RR": 365.5})
        fixed = services.session_correct(original=original, author=self.tech_a, reason="notes",
                                         notes="rig re-zeroed")
        assert (fixed.ride_height_fl_mm, fixed.ride_height_rr_mm) == (371.0, 365.5)

    def test_a_correction_needs_a_reason(self):
        original = submit(self.car_a, self.tech_a)
        with pytest.raises(ValidationError) as err:
            services.session_correct(original=original, author=self.tech_a, reason=" ")
        assert "correction_reason" in err.value.message_dict

    def test_an_already_corrected_session_cannot_be_corrected_again(self):
        original = submit(self.car_a, self.tech_a)
        services.session_correct(original=original, author=self.tech_a, reason="first fix")
        with pytest.raises(ValidationError) as err:
            services.session_correct(original=original, author=self.tech_a, reason="again")
        assert "supersedes" in err.value.message_dict

    def test_a_correction_may_lower_the_odometer_of_the_latest_record(self):
        original = submit(self.car_a, self.tech_a, odometer_km=91_000)
        fixed = services.session_correct(original=original, author=self.tech_a,
                                         reason="extra digit", odometer_km=9_100)
        assert fixed.odometer_km == 9_100


class ComponentCheckTests(PersonaTestCase):
    def _check(self, **kw):
        values = dict(vehicle=self.car_a, technician=self.tech_a, checked_at=f.at(1),
                      odometer_km=10_000, corner="RL", part="rear_toe_link_inner_bush",
                      verdict="keep_watch", findings=["cracking"])
        values.update(kw)
        return services.component_check_submit(**values)

    def test_a_check_with_deflection_and_force_is_stored(self):
        check = self._check(deflection_mm=1.2, deflection_force_n=1000)
        assert check.findings == ["cracking"]

    def test_a_front_part_on_a_rear_corner_is_refused(self):
        with pytest.raises(ValidationError) as err:
            self._check(part="front_lower_ball_joint")
        assert "corner" in err.value.message_dict

    def test_play_needs_its_method(self):
        with pytest.raises(ValidationError) as err:
            self._check(part="rear_toe_link_outer_joint", play_mm=0.8)
        assert {"play_direction", "play_loading"} <= set(err.value.message_dict)
        assert ComponentCheck.objects.count() == 0

    def test_deflection_without_force_is_refused_by_name(self):
        with pytest.raises(ValidationError) as err:
            self._check(deflection_mm=1.0)
        assert "deflection_force_n" in err.value.message_dict

    def test_unknown_finding_is_refused(self):
        with pytest.raises(ValidationError) as err:
            self._check(findings=["rusty"])
        assert "findings" in err.value.message_dict
