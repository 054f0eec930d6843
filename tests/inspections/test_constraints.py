"""Database constraints hold for physical ranges, also through bulk_create."""
import datetime as dt

import pytest
from django.db import IntegrityError, transaction

from inspections.models import (
    AlignmentSession,
    ComponentCheck,
    Vehicle,
    WheelReading,
)
from inspections.models.records import AppendOnlyError
from tests import factories as f
from tests.base import PersonaTestCase


class ConstraintTests(PersonaTestCase):
    def _session(self, **kw):
        values = dict(vehicle=self.car_a, workshop=self.workshop_a, technician=self.tech_a,
                      measured_at=f.at(1), odometer_km=1000, kind="as_found",
                      equipment_id="RIG-1", equipment_calibrated_on=dt.date(2026, 1, 1))
        values.update(kw)
        return AlignmentSession.objects.create(**values)

    def test_toe_beyond_ten_degrees_is_refused_by_bulk_create(self):
        session = self._session()
        with pytest.raises(IntegrityError), transaction.atomic():
            WheelReading.objects.bulk_create(
                [WheelReading(session=session, corner="FL", toe_deg=10.5, camber_deg=0)])

    def test_camber_beyond_fifteen_degrees_is_refused(self):
        session = self._session()
        with pytest.raises(IntegrityError), transaction.atomic():
            WheelReading.objects.bulk_create(
                [WheelReading(session=session, corner="FL", toe_deg=0, camber_deg=-15.1)])

    def test_caster_on_rear_corner_is_refused_by_the_database(self):
        session = self._session()
        with pytest.raises(IntegrityError), transaction.atomic():
            WheelReading.objects.bulk_create(
                [WheelReading(session=session, corner="RL", toe_deg=0, camber_deg=0,
                              caster_deg=3.0)])

    def test_two_readings_for_one_corner_in_one_session_are_refused(self):
        session = self._session()
        with pytest.raises(IntegrityError), transaction.atomic():
            WheelReading.objects.bulk_create([
                WheelReading(session=session, corner="FL", toe_deg=0, camber_deg=0),
                WheelReading(session=session, corner="FL", toe_deg=0.1, camber_deg=0),
            ])

    def test_negative_play_is_refused_by_bulk_create(self):
        with pytest.raises(IntegrityError), transaction.atomic():
            ComponentCheck.objects.bulk_create([ComponentCheck(
                vehicle=self.car_a, workshop=self.workshop_a, technician=self.tech_a,
                checked_at=f.at(1), odometer_km=10, corner="FL", part="front_lower_ball_joint",
                play_mm=-0.1, play_direction="axial", play_loading="loaded", verdict="sound")])

    def test_deflection_without_force_is_refused(self):
        with pytest.raises(IntegrityError), transaction.atomic():
            ComponentCheck.objects.bulk_create([ComponentCheck(
                vehicle=self.car_a, workshop=self.workshop_a, technician=self.tech_a,
                checked_at=f.at(1), odometer_km=10, corner="RL",
                part="rear_toe_link_inner_bush", deflection_mm=1.0, verdict="sound")])

    def test_vin_with_letter_o_is_refused_by_bulk_create(self):
        bad = Vehicle(vin="TSTWX777777O00001", plate="Q1", platform=self.platform,
                      workshop=self.workshop_a, in_service_date=dt.date(2024, 1, 1))
        with pytest.raises(IntegrityError), transaction.atomic():
            Vehicle.objects.bulk_create([bad])

    def test_plate_key_is_normalised_through_bulk_create(self):
        Vehicle.objects.bulk_create([Vehicle(
            vin=f.make_vin(987654), plate="ab-12 cd", platform=self.platform,
            workshop=self.workshop_a, in_service_date=dt.date(2024, 1, 1))])
        assert Vehicle.objects.get(vin=f.make_vin(987654)).plate_key == "AB12CD"

    def test_a_submitted_session_cannot_be_edited_in_place(self):
        session = self._session()
        session.odometer_km = 5
        with pytest.raises(AppendOnlyError):
            session.save()

    def test_negative_odometer_is_refused(self):
        with pytest.raises(IntegrityError), transaction.atomic():
            self._session(odometer_km=-1)

    def test_correction_without_reason_is_refused_by_the_database(self):
        original = self._session()
        with pytest.raises(IntegrityError), transaction.atomic():
            self._session(supersedes=original)
