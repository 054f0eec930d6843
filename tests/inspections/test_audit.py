"""The audit trail: every change to a record says who, when and why, in the same transaction;
entries are never changed; the history page shows originals beside corrections, to managers only."""
from __future__ import annotations

import datetime as dt

import pytest
from django.core.exceptions import ValidationError
from django.db import DatabaseError, connection, transaction
from django.urls import reverse

from inspections import audit, services
from inspections.importing import import_records
from inspections.models import AuditEntry
from inspections.models.records import AppendOnlyError
from tests import factories as f
from tests.base import PersonaTestCase
from tests.inspections.test_importing import to_csv, visit_rows


class AuditCase(PersonaTestCase):
    def submit(self, vehicle=None, technician=None, **over):
        values = dict(vehicle=vehicle or self.car_a, technician=technician or self.tech_a,
                      measured_at=f.at(30), odometer_km=20_000, kind="as_found",
                      equipment_id="RIG-7", equipment_calibrated_on=dt.date(2026, 1, 10),
                      readings=f.readings())
        values.update(over)
        return services.session_submit(**values)


class WrittenByServicesTests(AuditCase):
    def test_a_session_submit_writes_one_entry_with_who_when_and_the_values(self):
        session = self.submit()
        entry = AuditEntry.objects.get()
        assert (entry.actor, entry.action, entry.object_type, entry.object_id, entry.vehicle) == (
            self.tech_a, "created", "alignment_session", session.pk, self.car_a)
        assert abs((entry.at - session.created_at).total_seconds()) < 5
        assert entry.details["values"]["readings"]["FL"]["toe_deg"] == pytest.approx(0.1)
        assert entry.details["client_token"] == str(session.client_token)

    def test_a_repeated_token_writes_no_second_entry(self):
        session = self.submit()
        self.submit(client_token=session.client_token)
        assert AuditEntry.objects.count() == 1

    def test_a_refused_submit_writes_no_entry(self):
        with pytest.raises(ValidationError):
            self.submit(kind="sideways")
        assert AuditEntry.objects.count() == 0

    def test_a_correction_records_its_author_reason_and_what_changed_and_keeps_the_original(self):
        original = self.submit()
        readings = f.readings()
        readings[0]["toe_deg"] = 0.25
        corrected = services.session_correct(original=original, author=self.tech_a,
                                             reason="FL toe misread from the rig", readings=readings)
        entry = AuditEntry.objects.get(object_id=corrected.pk)
        assert entry.action == "corrected" and entry.reason == "FL toe misread from the rig"
        assert entry.details["supersedes"] == original.pk
        assert entry.details["changed"] == {"readings.FL.toe_deg": [pytest.approx(0.1), 0.25]}
        original.refresh_from_db()
        assert original.readings.get(corner="FL").toe_deg == pytest.approx(0.1)

    def test_checks_and_service_events_are_recorded_too(self):
        check = services.component_check_submit(
            vehicle=self.car_a, technician=self.tech_a, checked_at=f.at(20), odometer_km=21_000,
            corner="RL", part="rear_toe_link_inner_bush", verdict="keep_watch")
        event = services.service_event_record(
            vehicle=self.car_a, recorded_by=self.tech_a, performed_at=f.at(10), odometer_km=22_000,
            kind="part_replaced", corner="RL", part="rear_toe_link_inner_bush", reason="preventive")
        kinds = set(AuditEntry.objects.values_list("object_type", "object_id"))
        assert kinds == {("component_check", check.pk), ("service_event", event.pk)}

    def test_an_entry_written_inside_a_channel_says_where_it_came_from(self):
        with audit.channel("api", client="tablet 7"):
            self.submit()
        assert AuditEntry.objects.get().details["channel"] == {"source": "api", "client": "tablet 7"}

    def test_an_import_writes_each_records_entry_and_one_for_the_file_in_its_transaction(self):
        data = to_csv(visit_rows("v1", self.car_a.vin, "2026-03-02 09:15", 20500))
        result = import_records(data=data, filename="march.csv", user=self.tech_a)
        record_entry = AuditEntry.objects.get(object_type="alignment_session")
        assert record_entry.details["channel"]["source"] == "import"
        assert record_entry.details["channel"]["file"] == "march.csv"
        file_entry = AuditEntry.objects.get(object_type="import")
        assert file_entry.pk == result.audit_entry_id and file_entry.actor == self.tech_a
        assert file_entry.details["sessions_created"] == 1
        assert file_entry.details["sha256"] == result.sha256


class AppendOnlyTests(AuditCase):
    def test_an_entry_cannot_be_changed_or_removed_through_the_orm(self):
        self.submit()
        entry = AuditEntry.objects.get()
        entry.reason = "rewritten"
        for attempt in (entry.save, entry.delete, lambda: AuditEntry.objects.update(reason="x"),
                        lambda: AuditEntry.objects.all().delete()):
            with pytest.raises(AppendOnlyError):
                attempt()
        assert AuditEntry.objects.get().reason == ""

    @pytest.mark.skipif(connection.vendor != "postgresql", reason="the trigger is PostgreSQL's")
    def test_postgresql_refuses_an_update_or_delete_in_sql(self):
        self.submit()
        for sql in ("UPDATE inspections_auditentry SET reason = 'x'",
                    "DELETE FROM inspections_auditentry"):
            with pytest.raises(DatabaseError, match="append-only"), transaction.atomic():
                with connection.cursor() as cursor:
                    cursor.execute(sql)
        assert AuditEntry.objects.count() == 1


class DemoResetTests(AuditCase):
    def test_only_a_demo_vehicles_entries_can_be_removed_for_the_demo_reset(self):
        demo_car = f.make_vehicle(platform=self.platform, workshop=self.workshop_a, is_demo=True)
        self.submit(vehicle=demo_car, odometer_km=5_000)
        self.submit()
        assert audit.demo_entries_delete() == 1
        assert list(AuditEntry.objects.values_list("vehicle", flat=True)) == [self.car_a.pk]


class HistoryPageTests(AuditCase):
    def setUp(self):
        self.original = self.submit()
        readings = f.readings()
        readings[2]["camber_deg"] = -1.4
        self.corrected = services.session_correct(original=self.original, author=self.tech_a,
                                                  reason="RL camber typed with the wrong sign",
                                                  readings=readings)
        self.url = reverse("records:vehicle_audit", args=[self.car_a.pk])

    def test_a_workshop_manager_sees_the_original_beside_its_correction_with_who_when_why(self):
        self.client.force_login(self.manager_a)
        response = self.client.get(self.url)
        assert response.status_code == 200
        page = response.content.decode()
        assert f"original (#{self.original.pk})" in page
        assert f"correction 1 (#{self.corrected.pk}) · current" in page
        assert "RL camber typed with the wrong sign" in page
        assert "tech-a" in page
        chain = response.context["sessions"][0]
        row = next(r for r in chain["rows"] if r["label"] == "RL camber °")
        assert [c["text"] for c in row["cells"]] == ["-0.800", "-1.400"]
        assert [c["changed"] for c in row["cells"]] == [False, True]

    def test_an_administrator_sees_it_too(self):
        self.client.force_login(self.admin)
        assert self.client.get(self.url).status_code == 200

    def test_everyone_else_gets_404(self):
        # technician and owner of this very car; a manager who may not see it
        for user in (self.tech_a, self.owner, self.fleet_manager, self.tech_b, self.other_owner,
                     self.no_role):
            self.client.force_login(user)
            assert self.client.get(self.url).status_code == 404, user.username

    def test_a_manager_gets_404_for_another_workshops_vehicle(self):
        self.submit(vehicle=self.car_b, technician=self.tech_b)
        self.client.force_login(self.manager_a)
        url = reverse("records:vehicle_audit", args=[self.car_b.pk])
        assert self.client.get(url).status_code == 404

    def test_an_anonymous_visitor_is_sent_to_sign_in(self):
        response = self.client.get(self.url)
        assert response.status_code == 302 and response["Location"].startswith(reverse("login"))

    def test_entries_visible_to_a_user_are_scoped_like_vehicles(self):
        self.submit(vehicle=self.van_f, technician=self.tech_b)
        assert set(AuditEntry.objects.visible_to(self.manager_a)
                   .values_list("vehicle", flat=True)) == {self.car_a.pk}
        assert set(AuditEntry.objects.visible_to(self.fleet_manager)
                   .values_list("vehicle", flat=True)) == {self.van_f.pk}
