"""The owner PDF: its text (pdftotext), page size (pdfinfo), made once, e-mailed once."""
from __future__ import annotations

import datetime as dt
import re
import shutil
import subprocess
import tempfile
from pathlib import Path

from django.core import mail
from django.test import override_settings
from django.urls import reverse

from analytics import reports
from analytics.models import AdviceItem, OwnerReport
from tests.analytics.analysis_setup import add_corners, give_history
from tests.base import PersonaTestCase

MEDIA = tempfile.mkdtemp(prefix="fleetsvc-test-media-")
ARTEFACTS = Path(__file__).resolve().parents[2] / "var" / "test-artefacts"


def pdf_text(path: str) -> str:
    out = subprocess.run(["pdftotext", "-layout", path, "-"], check=True, capture_output=True, text=True)
    return re.sub(r"\s+", " ", out.stdout)


def run_report_callbacks(callbacks) -> int:
    """Run only the owner-report callbacks (the analysis-request ones need a real worker)."""
    mine = [cb for cb in callbacks if "owner_report_on_commit" in cb.__qualname__]
    for cb in mine:
        cb()
    return len(mine)


def pdf_page_size(path: str) -> str:
    out = subprocess.run(["pdfinfo", path], check=True, capture_output=True, text=True).stdout
    return re.search(r"Page size:\s+(.*)", out).group(1)


@override_settings(MEDIA_ROOT=MEDIA, EMAIL_BACKEND="django.core.mail.backends.locmem.EmailBackend")
class OwnerReportTests(PersonaTestCase):
    @classmethod
    def setUpTestData(cls):
        super().setUpTestData()
        add_corners(cls.platform)
        cls.result = give_history(cls.car_a, cls.tech_a)

    @classmethod
    def tearDownClass(cls):
        super().tearDownClass()
        shutil.rmtree(MEDIA, ignore_errors=True)

    def test_the_pdf_says_what_is_due_why_the_caution_and_the_sources(self):
        report = OwnerReport.objects.get(pk=reports.owner_report_issue(
            result_id=self.result.pk, paper="A4", email=False))
        text = pdf_text(report.pdf.path)
        self.assertIn("In short", text)
        self.assertIn(f"for {self.car_a.plate}", text)
        first = AdviceItem.objects.filter(result=self.result).order_by("urgency_rank", "due_date").first()
        self.assertIn(first.what[:40], text)
        self.assertIn("What is due, by when and why", text)
        self.assertIn(f"by {first.due_date:%-d %b %Y}", text)
        self.assertIn("Advisory only. Suspension and steering parts are safety-critical", text)
        self.assertIn("Where the data comes from", text)
        self.assertIn("unverified", text)          # the factory platform's spec source
        self.assertIn("test limit source", text)   # the ball-joint limit's source
        self.assertIn("lateral acceleration: 0.5 g (default)", text)  # an assumption
        self.assertIn("odometer, km", text)        # chart text kept as text
        self.assertIn(self.workshop_a.name, text)
        ARTEFACTS.mkdir(parents=True, exist_ok=True)
        shutil.copy(report.pdf.path, ARTEFACTS / "owner-advice-A4.pdf")

    def test_rendering_twice_stores_one_report(self):
        first = reports.owner_report_issue(result_id=self.result.pk, paper="A4", email=False)
        second = reports.owner_report_issue(result_id=self.result.pk, paper="A4", email=False)
        self.assertEqual(first, second)
        self.assertEqual(OwnerReport.objects.filter(result=self.result, paper="A4").count(), 1)

    def test_the_owner_is_e_mailed_once_with_the_pdf_attached(self):
        reports.owner_report_issue(result_id=self.result.pk, paper="A4", email=True)
        reports.owner_report_issue(result_id=self.result.pk, paper="A4", email=True)
        self.assertEqual(len(mail.outbox), 1)
        message = mail.outbox[0]
        self.assertEqual(message.to, [self.owner.email])
        self.assertIn(self.car_a.plate, message.subject)
        self.assertIn("Advisory only", message.body)
        name, content, mimetype = message.attachments[0]
        self.assertEqual(mimetype, "application/pdf")
        self.assertTrue(content.startswith(b"%PDF"))
        self.assertIsNotNone(OwnerReport.objects.get(result=self.result, paper="A4").emailed_at)

    def test_letter_and_a4_have_their_own_page_size(self):
        a4 = OwnerReport.objects.get(pk=reports.owner_report_issue(
            result_id=self.result.pk, paper="A4", email=False))
        letter = OwnerReport.objects.get(pk=reports.owner_report_issue(
            result_id=self.result.pk, paper="Letter", email=False))
        self.assertIn("(A4)", pdf_page_size(a4.pdf.path))
        self.assertIn("612 x 792", pdf_page_size(letter.pdf.path))
        self.assertNotEqual(a4.pk, letter.pk)

    def test_the_download_link_makes_the_report_when_missing(self):
        self.client.force_login(self.owner)
        url = reverse("analytics:advice_pdf", args=[self.car_a.pk]) + "?paper=Letter"
        response = self.client.get(url)
        self.assertEqual(response.status_code, 200)
        self.assertEqual(response["Content-Type"], "application/pdf")
        # consume the stream instead of close(): the test client's wrapper then keeps the
        # test transaction's connection open (close() would fire request_finished)
        self.assertTrue(b"".join(response.streaming_content).startswith(b"%PDF"))
        self.assertEqual(OwnerReport.objects.filter(result=self.result, paper="Letter").count(), 1)
        b"".join(self.client.get(url).streaming_content)
        self.assertEqual(OwnerReport.objects.filter(result=self.result, paper="Letter").count(), 1)
        self.assertEqual(len(mail.outbox), 0)  # downloading does not e-mail

    @override_settings(CELERY_TASK_ALWAYS_EAGER=True)  # in-process jobs: the report is made here
    def test_new_advice_enqueues_the_owner_report_after_commit(self):
        from analytics import services
        from tests import factories as f

        car = f.make_vehicle(platform=self.platform, workshop=self.workshop_a, owner=self.owner)
        with self.captureOnCommitCallbacks() as callbacks:
            result = give_history(car, self.tech_a)
        run_report_callbacks(callbacks)
        self.assertTrue(AdviceItem.objects.filter(result=result).exists())
        self.assertEqual(OwnerReport.objects.filter(result=result, paper="A4").count(), 1)
        self.assertEqual(len(mail.outbox), 1)
        # the same inputs again: no new result, nothing sent
        with self.captureOnCommitCallbacks() as callbacks:
            self.assertEqual(services.vehicle_analyse(vehicle_id=car.pk).pk, result.pk)
        self.assertEqual(run_report_callbacks(callbacks), 0)
        self.assertEqual(len(mail.outbox), 1)

    def test_a_vehicle_without_an_owner_gets_no_report(self):
        with self.captureOnCommitCallbacks() as callbacks:
            result = give_history(self.van_f, self.tech_b)
        self.assertEqual(run_report_callbacks(callbacks), 0)
        self.assertFalse(OwnerReport.objects.filter(result=result).exists())


@override_settings(MEDIA_ROOT=MEDIA, EMAIL_BACKEND="django.core.mail.backends.locmem.EmailBackend")
class DelayedOwnerReportTests(PersonaTestCase):
    """With a queue, the owner's PDF is made after a delay and only for the newest result."""

    @classmethod
    def setUpTestData(cls):
        super().setUpTestData()
        add_corners(cls.platform)

    def test_the_report_job_is_sent_with_the_delay_and_skips_a_result_no_longer_newest(self):
        from unittest import mock

        from django.conf import settings

        from analytics import services
        from inspections import services as records
        from tests import factories as f

        car = f.make_vehicle(platform=self.platform, workshop=self.workshop_a, owner=self.owner)
        with mock.patch("analytics.tasks.make_owner_report.apply_async") as send, \
                self.settings(CELERY_TASK_ALWAYS_EAGER=False), \
                self.captureOnCommitCallbacks(execute=True):
            first = give_history(car, self.tech_a)
        kwargs = send.call_args.kwargs
        assert kwargs["countdown"] == settings.OWNER_REPORT_DELAY_S > 0
        assert kwargs["kwargs"] == {"only_if_latest": True} and kwargs["args"][0] == first.pk
        records.session_submit(vehicle=car, technician=self.tech_a, measured_at=f.at(days_ago=1),
                               odometer_km=80_000, kind="as_found", equipment_id="R",
                               equipment_calibrated_on=dt.date(2026, 1, 1),
                               readings=f.readings(toe=0.3, camber=-0.8))
        newer = services.vehicle_analyse(vehicle_id=car.pk)
        assert newer.pk != first.pk
        assert reports.owner_report_issue(result_id=first.pk, only_if_latest=True) is None
        assert not OwnerReport.objects.filter(result=first).exists() and len(mail.outbox) == 0
        rid = reports.owner_report_issue(result_id=newer.pk, only_if_latest=True)
        assert OwnerReport.objects.get(pk=rid).result_id == newer.pk and len(mail.outbox) == 1
