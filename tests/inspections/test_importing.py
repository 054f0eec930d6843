"""CSV import (all or nothing, per-row problems, idempotent re-import, row cap, scoping) and the
vehicle history CSV export."""
from __future__ import annotations

import contextlib
import csv
import datetime as dt
import io
import json
from unittest import mock

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile
from django.core.management import call_command
from django.urls import reverse

from inspections import importing
from inspections.importing import ImportRefused, import_records
from inspections.models import AlignmentSession, AuditEntry, ComponentCheck, WheelReading
from tests.base import PersonaTestCase

HEADER = ["record", "visit", "vehicle", "at", "odometer_km", "kind", "rig_id", "rig_calibrated_on",
          "corner", "toe_deg", "camber_deg", "caster_deg", "ride_height_mm", "part", "play_mm",
          "play_direction", "play_loading", "findings", "verdict", "notes"]


def reading(visit, vehicle, at, odometer, corner, toe, camber, caster="", **over):
    row = {"record": "reading", "visit": visit, "vehicle": vehicle, "at": at,
           "odometer_km": str(odometer), "kind": "as_found", "rig_id": "RIG-7",
           "rig_calibrated_on": "2026-01-10", "corner": corner, "toe_deg": toe,
           "camber_deg": camber, "caster_deg": caster}
    row.update(over)
    return row


def check(vehicle, corner, part, verdict="sound", **over):
    row = {"record": "check", "vehicle": vehicle, "corner": corner, "part": part,
           "verdict": verdict}
    row.update(over)
    return row


def visit_rows(visit, vehicle, at, odometer, toe="0.10"):
    return [reading(visit, vehicle, at, odometer, "FL", toe, "-0.50", "4.1"),
            reading(visit, vehicle, at, odometer, "FR", "0.05", "-0°27'", "3.9"),
            reading(visit, vehicle, at, odometer, "RL", "0.12", "-1.30"),
            reading(visit, vehicle, at, odometer, "RR", "0.08", "-1.10")]


def to_csv(rows, header=HEADER, bom=False) -> bytes:
    out = io.StringIO()
    writer = csv.DictWriter(out, fieldnames=header, lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow(row)
    data = out.getvalue().encode("utf-8")
    return (b"\xef\xbb\xbf" + data) if bom else data


class ImportCase(PersonaTestCase):
    def good_file(self, **kw) -> bytes:
        vin = self.car_a.vin
        rows = visit_rows("v1", vin, "2026-03-02 09:15", 20500)
        rows += visit_rows("v2", self.car_a.plate, "2026-06-01 10:00", 31000, toe="0.14")
        rows.append(check(vin, "RL", "rear_toe_link_inner_bush", "keep_watch", visit="v2",
                          play_mm="0.8", play_direction="radial", play_loading="unloaded",
                          findings="cracking;dust_cover_damaged"))
        rows.append(check(vin, "FL", "front_lower_ball_joint", at="2026-04-10 08:00",
                          odometer_km="24000"))
        return to_csv(rows, **kw)

    def stored(self) -> tuple[int, int, int]:
        return (AlignmentSession.objects.count(), WheelReading.objects.count(),
                ComponentCheck.objects.count())

    def refused(self, data: bytes, user=None) -> list[str]:
        with pytest.raises(ImportRefused) as info:
            import_records(data=data, filename="t.csv", user=user or self.tech_a)
        assert self.stored() == (0, 0, 0)
        return [str(p) for p in info.value.problems]


class ImportTests(ImportCase):
    def test_a_good_file_stores_its_sessions_readings_and_checks(self):
        result = import_records(data=self.good_file(), filename="t.csv", user=self.tech_a)
        assert (result.sessions_created, result.readings_created, result.checks_created) == (2, 8, 2)
        assert self.stored() == (2, 8, 2)
        first = AlignmentSession.objects.order_by("measured_at").first()
        # no offset: the workshop's time (Europe/London, GMT on 2 March)
        assert first.measured_at == dt.datetime(2026, 3, 2, 9, 15, tzinfo=dt.UTC)
        assert first.technician == self.tech_a and first.equipment_id == "RIG-7"
        fr = first.readings.get(corner="FR")
        assert fr.camber_deg == pytest.approx(-0.45)  # degrees and minutes read at the edge
        attached = ComponentCheck.objects.get(part="rear_toe_link_inner_bush")
        assert attached.session.measured_at.month == 6 and attached.odometer_km == 31000
        assert attached.findings == ["cracking", "dust_cover_damaged"] and attached.play_mm == 0.8

    def test_a_byte_order_mark_is_tolerated(self):
        result = import_records(data=self.good_file(bom=True), filename="t.csv", user=self.tech_a)
        assert result.sessions_created == 2

    def test_bytes_that_are_not_utf8_are_named_by_row_and_column_and_nothing_is_stored(self):
        rows = visit_rows("v1", self.car_a.vin, "2026-03-02 09:15", 20500)
        rows[1]["notes"] = "XX"
        data = to_csv(rows).replace(b"XX", "réglé".encode("latin-1"))
        problems = self.refused(data)
        assert len(problems) == 1
        assert problems[0].startswith("row 3, column notes: byte 0xE9 is not UTF-8 text")
        assert "CSV UTF-8" in problems[0]

    def test_one_bad_row_commits_none_and_the_message_names_row_column_and_reason(self):
        rows = visit_rows("v1", self.car_a.vin, "2026-03-02 09:15", 20500)
        rows += visit_rows("v2", self.car_a.vin, "2026-06-01 10:00", 31000)
        rows[6]["toe_deg"] = "12.5"  # row 8 of the file: RL of visit v2, past the physical range
        problems = self.refused(to_csv(rows))
        assert problems == ["row 8, column toe_deg: 12.5° is outside the physical range −10.0° … +10.0°"]

    def test_unreadable_cells_are_all_reported_each_with_its_row_and_column(self):
        rows = visit_rows("v1", self.car_a.vin, "2026-03-02 09:15", 20500)
        rows[0]["camber_deg"] = "abc"
        rows[2]["at"] = "2026-03-02 09:15"  # fine
        rows[3]["rig_calibrated_on"] = "10/01/2026"
        rows.append(check(self.car_a.vin, "RL", "front_lower_ball_joint", verdict="great",
                          visit="v1"))
        problems = self.refused(to_csv(rows))
        assert problems[0].startswith("row 2, column camber_deg: cannot read 'abc' as an angle")
        assert any(p.startswith("row 5, column rig_calibrated_on: cannot read '10/01/2026'")
                   for p in problems)
        assert any(p.startswith("row 6, column verdict: 'great' is not one of") for p in problems)

    def test_a_service_refusal_is_mapped_back_to_the_row_and_column(self):
        rows = [check(self.car_a.vin, "RL", "front_lower_ball_joint", at="2026-04-10 08:00",
                      odometer_km="24000")]
        problems = self.refused(to_csv(rows))
        assert problems == ["row 2, column corner: Lower ball joint is a front-axle part; RL is not"]

    def test_a_re_import_of_the_same_file_adds_nothing(self):
        import_records(data=self.good_file(), filename="t.csv", user=self.tech_a)
        before = (self.stored(), AuditEntry.objects.exclude(object_type="import").count())
        again = import_records(data=self.good_file(bom=True), filename="t-again.csv", user=self.tech_a)
        assert (again.sessions_created, again.checks_created) == (0, 0)
        assert (again.sessions_already_stored, again.checks_already_stored) == (2, 2)
        assert (self.stored(), AuditEntry.objects.exclude(object_type="import").count()) == before

    def test_a_re_import_with_changed_values_is_refused_and_changes_nothing(self):
        import_records(data=self.good_file(), filename="t.csv", user=self.tech_a)
        rows = visit_rows("v1", self.car_a.vin, "2026-03-02 09:15", 20500, toe="0.30")
        with pytest.raises(ImportRefused) as info:
            import_records(data=to_csv(rows), filename="t.csv", user=self.tech_a)
        assert "row 2, column visit: visit 'v1'" in str(info.value.problems[0])
        assert "correction" in str(info.value.problems[0])
        assert WheelReading.objects.filter(toe_deg=0.30).count() == 0

    def test_the_row_cap_refuses_a_longer_file_before_storing_anything(self):
        assert importing.MAX_ROWS == 20_000
        rows = visit_rows("v1", self.car_a.vin, "2026-03-02 09:15", 20500)
        with mock.patch.object(importing, "MAX_ROWS", 3):
            problems = self.refused(to_csv(rows))
        assert problems == ["row 5: the file has more than 3 data rows, the most one import takes; "
                            "split it into several files (by visit) and import each"]

    def test_another_workshops_vehicle_is_not_found_and_nothing_is_stored(self):
        rows = visit_rows("v1", self.car_a.vin, "2026-03-02 09:15", 20500)
        rows += visit_rows("v2", self.car_b.vin, "2026-03-02 09:15", 20500)
        problems = self.refused(to_csv(rows))
        assert len(problems) == 4
        assert problems[0] == (f"row 6, column vehicle: no vehicle '{self.car_b.vin}' (VIN, plate or "
                               "fleet number) among the vehicles you may import for")

    def test_a_fleet_manager_and_an_owner_do_not_import(self):
        for user in (self.fleet_manager, self.owner, self.no_role):
            problems = self.refused(self.good_file(), user=user)
            assert problems == ["your role does not import records"]

    def test_a_workshop_manager_imports_for_their_workshop_and_is_the_recorded_author(self):
        import_records(data=self.good_file(), filename="t.csv", user=self.manager_a)
        assert set(AlignmentSession.objects.values_list("technician", flat=True)) == {self.manager_a.pk}

    def test_header_problems_are_named_in_row_1(self):
        data = b"record,vehicle,at,odometer_km,corner,toe,toe\nreading,x,y,1,FL,1,1\n"
        problems = self.refused(data)
        assert problems[0].startswith("row 1, column toe: unknown column")
        assert "row 1, column toe: this column appears twice" in problems

    def test_rows_of_one_visit_must_agree_on_the_session_columns(self):
        rows = visit_rows("v1", self.car_a.vin, "2026-03-02 09:15", 20500)
        rows[2]["odometer_km"] = "20600"
        problems = self.refused(to_csv(rows))
        assert problems == ["row 4, column odometer_km: differs from row 2 of visit 'v1' ('20500'); "
                            "a visit's session columns must be the same on each of its rows"]

    def test_a_workbook_or_a_binary_file_is_refused_by_its_content(self):
        assert "spreadsheet workbook" in self.refused(b"PK\x03\x04rest-of-a-zip")[0]
        assert "NUL byte" in self.refused(b"record,vehicle\n\x00\x01\x02")[0]

    def test_a_dry_run_checks_everything_and_stores_nothing(self):
        result = import_records(data=self.good_file(), filename="t.csv", user=self.tech_a,
                                dry_run=True)
        assert (result.sessions_created, result.checks_created) == (2, 2)
        assert self.stored() == (0, 0, 0) and AuditEntry.objects.count() == 0


class ImportCommandTests(ImportCase):
    def run_command(self, tmp_name: str, data: bytes, *args):
        import tempfile
        from pathlib import Path

        with tempfile.TemporaryDirectory() as folder:
            path = Path(folder) / tmp_name
            path.write_bytes(data)
            out, err = io.StringIO(), io.StringIO()
            code = 0
            with contextlib.redirect_stderr(err):
                try:
                    call_command("import-records", "--file", str(path), *args, stdout=out)
                except SystemExit as exc:
                    code = exc.code
            return code, out.getvalue(), err.getvalue()

    def test_the_command_imports_as_the_named_user_and_prints_json(self):
        code, out, _ = self.run_command("f.csv", self.good_file(), "--as", "tech-a", "--json")
        assert code == 0 and json.loads(out)["sessions_created"] == 2
        assert self.stored() == (2, 8, 2)

    def test_a_refused_file_exits_2_with_one_line_per_problem_and_stores_nothing(self):
        rows = visit_rows("v1", self.car_b.vin, "2026-03-02 09:15", 20500)
        code, _, err = self.run_command("f.csv", to_csv(rows), "--as", "tech-a")
        lines = err.strip().splitlines()
        assert code == 2 and len(lines) == 5
        assert lines[0].startswith("import-records: row 2, column vehicle: no vehicle")
        assert lines[-1] == "import-records: f.csv: refused, nothing was imported"
        assert "Traceback" not in err and self.stored() == (0, 0, 0)

    def test_an_unknown_user_is_named(self):
        code, _, err = self.run_command("f.csv", self.good_file(), "--as", "nobody")
        assert code == 2 and err.strip() == "import-records: --as: no active user 'nobody'"


class ImportPageTests(ImportCase):
    def post(self, data: bytes, **extra):
        return self.client.post(reverse("records:import"),
                                {"file": SimpleUploadedFile("f.csv", data, "text/csv"), **extra})

    def test_a_technician_uploads_a_file_and_sees_what_was_added(self):
        self.client.force_login(self.tech_a)
        assert self.client.get(reverse("records:import")).status_code == 200
        response = self.post(self.good_file())
        assert response.status_code == 200
        assert "Imported f.csv" in response.content.decode() and self.stored() == (2, 8, 2)

    def test_a_refused_upload_lists_row_column_and_reason_and_stores_nothing(self):
        self.client.force_login(self.tech_a)
        rows = visit_rows("v1", self.car_a.vin, "2026-03-02 09:15", 20500)
        rows[3]["camber_deg"] = "-20"
        response = self.post(to_csv(rows))
        page = response.content.decode()
        assert response.status_code == 400 and "nothing was imported" in page
        assert "<td class=\"num\">5</td><td>camber_deg</td>" in page
        assert self.stored() == (0, 0, 0)

    def test_a_file_over_the_size_limit_is_refused_by_the_form(self):
        self.client.force_login(self.tech_a)
        with mock.patch.object(importing, "MAX_FILE_BYTES", 100):
            response = self.post(self.good_file())
        assert response.status_code == 400 and "per import" in response.content.decode()
        assert self.stored() == (0, 0, 0)

    def test_the_page_takes_fewer_rows_than_the_command_and_says_where_larger_files_go(self):
        self.client.force_login(self.tech_a)
        rows = visit_rows("v1", self.car_a.vin, "2026-03-02 09:15", 20500)
        with mock.patch.object(importing, "PAGE_MAX_ROWS", 3):
            response = self.post(to_csv(rows))
        assert response.status_code == 400
        assert "more than 3 data rows" in response.content.decode()
        assert "manage.py import-records" in response.content.decode()
        assert self.stored() == (0, 0, 0)

    def test_the_page_is_not_found_for_those_who_do_not_import(self):
        for user in (self.fleet_manager, self.owner, self.no_role):
            self.client.force_login(user)
            assert self.client.get(reverse("records:import")).status_code == 404
            assert self.post(self.good_file()).status_code == 404
        assert self.stored() == (0, 0, 0)

    def test_anonymous_visitors_are_sent_to_sign_in(self):
        response = self.client.get(reverse("records:import"))
        assert response.status_code == 302 and response["Location"].startswith(reverse("login"))


class HistoryExportTests(ImportCase):
    def setUp(self):
        rows = visit_rows("v1", self.car_a.vin, "2026-03-02 09:15", 20500, toe="-0.12")
        rows[0]["notes"] = "=HYPERLINK(\"http://x.invalid\",\"open\")"
        for row in rows:
            row["notes"] = rows[0]["notes"]
        import_records(data=to_csv(rows), filename="t.csv", user=self.tech_a)

    def rows(self, response):
        text = response.content.decode("utf-8").lstrip("\ufeff")
        return list(csv.DictReader(io.StringIO(text)))

    def test_the_export_escapes_formulas_and_keeps_negative_numbers_numeric(self):
        self.client.force_login(self.owner)
        response = self.client.get(reverse("records:vehicle_history_csv", args=[self.car_a.pk]))
        assert response.status_code == 200 and response["Content-Type"].startswith("text/csv")
        rows = self.rows(response)
        assert len(rows) == 4
        fl = next(r for r in rows if r["corner"] == "FL")
        assert fl["toe_deg"] == "-0.12" and fl["camber_deg"] == "-0.5"
        assert fl["notes"].startswith("'=HYPERLINK(")
        assert fl["status"] == "current" and fl["recorded_by"] == "tech-a"

    def test_another_tenants_vehicle_history_is_not_found(self):
        for user in (self.tech_b, self.other_owner, self.fleet_manager):
            self.client.force_login(user)
            url = reverse("records:vehicle_history_csv", args=[self.car_a.pk])
            assert self.client.get(url).status_code == 404


class ReadmeExampleTests(ImportCase):
    def test_the_readme_example_imports_as_documented(self):
        from pathlib import Path

        readme = (Path(__file__).resolve().parents[2] / "README.md").read_text()
        section = readme[readme.index("## CSV import and export"):]
        example = section[section.index("```csv") + len("```csv"):]
        example = example[:example.index("```")].strip() + "\n"
        result = import_records(data=example.encode(), filename="readme.csv", user=self.tech_a)
        assert (result.sessions_created, result.readings_created, result.checks_created) == (1, 2, 1)
        assert ComponentCheck.objects.get().session == AlignmentSession.objects.get()
