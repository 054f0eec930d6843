"""Manager's and owner's pages: access by scope, the action form, CSV escaping and the caution."""
from __future__ import annotations

import csv
import io
import re

from django.urls import reverse
from django.utils.html import escape

from analytics.core.caution import CAUTION
from analytics.models import AdviceAction, AdviceItem
from fleetsvc.csvsafe import safe_cell
from tests.analytics.analysis_setup import add_corners, give_history
from tests.base import PersonaTestCase


class AnalysisPagesTestCase(PersonaTestCase):
    @classmethod
    def setUpTestData(cls):
        super().setUpTestData()
        add_corners(cls.platform)
        cls.result_a = give_history(cls.car_a, cls.tech_a)
        cls.result_b = give_history(cls.car_b, cls.tech_b, toe_step=0.04)
        cls.result_f = give_history(cls.van_f, cls.tech_b)
        cls.item_a = AdviceItem.objects.filter(vehicle=cls.car_a).first()

    def vehicle_url(self, v):
        return reverse("analytics:vehicle", args=[v.pk])

    def pdf_url(self, v, paper="A4"):
        return reverse("analytics:advice_pdf", args=[v.pk]) + f"?paper={paper}"


class AccessTests(AnalysisPagesTestCase):
    def test_the_history_produces_advice_to_show(self):
        self.assertIsNotNone(self.item_a)
        self.assertIn("FL.toe", self.result_a.payload["drift"])
        self.assertIn("RL", self.result_a.payload["compliance"])

    def test_anonymous_visitors_are_sent_to_sign_in(self):
        for url in (reverse("analytics:fleet"), reverse("analytics:mine"),
                    self.vehicle_url(self.car_a), self.pdf_url(self.car_a)):
            response = self.client.get(url)
            self.assertEqual(response.status_code, 302, url)
            self.assertIn(reverse("login"), response["Location"])

    def test_another_owner_gets_not_found_for_the_vehicle_page_and_the_pdf(self):
        self.client.force_login(self.other_owner)
        self.assertEqual(self.client.get(self.vehicle_url(self.car_a)).status_code, 404)
        self.assertEqual(self.client.get(self.pdf_url(self.car_a)).status_code, 404)
        self.assertEqual(self.client.get(self.vehicle_url(self.car_b)).status_code, 200)

    def test_a_manager_does_not_see_another_workshops_vehicle(self):
        self.client.force_login(self.manager_a)
        self.assertEqual(self.client.get(self.vehicle_url(self.car_b)).status_code, 404)
        page = self.client.get(reverse("analytics:fleet"))
        self.assertContains(page, self.car_a.plate)
        self.assertNotContains(page, self.car_b.plate)

    def test_the_fleet_manager_sees_the_fleet_van_only(self):
        self.client.force_login(self.fleet_manager)
        page = self.client.get(reverse("analytics:fleet"))
        self.assertContains(page, self.van_f.plate)
        self.assertNotContains(page, self.car_a.plate)

    def test_the_due_lists_count_is_the_number_of_items_it_pages_through(self):
        # the count comes from the urgency tallies; the reference is the list's own queryset
        from analytics import selectors

        def shown(response) -> int:
            return int(re.search(r'Due and overdue <span class="count">(\d+)</span>',
                                 response.content.decode()).group(1))

        for user in (self.manager_a, self.fleet_manager, self.admin):
            self.client.force_login(user)
            for severity in ("", *selectors.SEVERITIES):
                for overdue in (False, True):
                    query = f"?severity={severity}" + ("&overdue=1" if overdue else "")
                    expected = selectors.due_advice(user, severity=severity or None,
                                                    overdue_only=overdue).count()
                    got = shown(self.client.get(reverse("analytics:fleet") + query))
                    self.assertEqual(got, expected, (user.username, query))
            counts = selectors.urgency_counts(user)
            self.assertEqual([c["severity"] for c in counts], list(selectors.SEVERITIES))
            self.assertEqual(sum(c["items"] for c in counts), selectors.advice_for(user).count())

    def test_owners_and_technicians_cannot_open_the_fleet_view(self):
        for user in (self.owner, self.tech_a):
            self.client.force_login(user)
            self.assertEqual(self.client.get(reverse("analytics:fleet")).status_code, 404)

    def test_the_owner_page_lists_only_their_own_vehicles(self):
        self.client.force_login(self.owner)
        page = self.client.get(reverse("analytics:mine"))
        self.assertContains(page, self.car_a.plate)
        self.assertNotContains(page, self.car_b.plate)
        self.assertContains(page, self.pdf_url(self.car_a).replace("&", "&amp;"))

    def test_a_bad_paper_size_is_not_found(self):
        self.client.force_login(self.owner)
        self.assertEqual(self.client.get(self.pdf_url(self.car_a, "A3")).status_code, 404)


class ActionTests(AnalysisPagesTestCase):
    def act(self, user, vehicle, **data):
        self.client.force_login(user)
        return self.client.post(reverse("analytics:advice_action", args=[vehicle.pk]),
                                {"key": self.item_a.key, **data})

    def test_a_technician_cannot_acknowledge_advice(self):
        response = self.act(self.tech_a, self.car_a, action="acknowledged")
        self.assertEqual(response.status_code, 404)
        self.assertFalse(AdviceAction.objects.exists())

    def test_an_owner_cannot_schedule_advice(self):
        response = self.act(self.owner, self.car_a, action="scheduled", scheduled_for="2027-01-10")
        self.assertEqual(response.status_code, 404)
        self.assertFalse(AdviceAction.objects.exists())

    def test_a_manager_acknowledges_and_the_page_says_so(self):
        response = self.act(self.manager_a, self.car_a, action="acknowledged", note="seen")
        self.assertEqual(response.status_code, 302)
        action = AdviceAction.objects.get()
        self.assertEqual((action.action, action.by, action.key), ("acknowledged", self.manager_a,
                                                                  self.item_a.key))
        self.assertContains(self.client.get(self.vehicle_url(self.car_a)), "Acknowledged")

    def test_scheduling_without_a_date_is_refused(self):
        self.act(self.manager_a, self.car_a, action="scheduled")
        self.assertFalse(AdviceAction.objects.exists())

    def test_a_manager_schedules_with_a_date(self):
        self.act(self.manager_a, self.car_a, action="scheduled", scheduled_for="2027-01-10")
        self.assertEqual(str(AdviceAction.objects.get().scheduled_for), "2027-01-10")

    def test_a_manager_of_another_workshop_gets_not_found(self):
        self.client.force_login(self.manager_a)
        response = self.client.post(reverse("analytics:advice_action", args=[self.car_b.pk]),
                                    {"key": "x", "action": "acknowledged"})
        self.assertEqual(response.status_code, 404)

    def test_the_action_form_needs_a_csrf_token(self):
        from django.test import Client

        client = Client(enforce_csrf_checks=True)
        client.force_login(self.manager_a)
        response = client.post(reverse("analytics:advice_action", args=[self.car_a.pk]),
                               {"key": self.item_a.key, "action": "acknowledged"})
        self.assertEqual(response.status_code, 403)
        self.assertFalse(AdviceAction.objects.exists())


class CsvTests(AnalysisPagesTestCase):
    def test_cells_that_a_spreadsheet_would_run_are_escaped(self):
        for raw in ("=HYPERLINK(1)", "+1+cmd", "-2+A1", "@SUM(A1)"):
            self.assertEqual(safe_cell(raw), "'" + raw)
        self.assertEqual(safe_cell("FL toe"), "FL toe")
        self.assertEqual(safe_cell("-0.5"), "-0.5")  # a plain number stays a number
        self.assertEqual(safe_cell(-0.5), "-0.5")
        self.assertEqual(safe_cell(None), "")

    def test_the_fleet_csv_escapes_a_plate_that_looks_like_a_formula(self):
        self.car_a.plate = "=CMD()"
        self.car_a.save(update_fields=["plate"])
        self.client.force_login(self.manager_a)
        response = self.client.get(reverse("analytics:fleet") + "?format=csv&show=due")
        self.assertEqual(response["Content-Type"], "text/csv; charset=utf-8")
        rows = list(csv.reader(io.StringIO(response.content.decode())))
        plates = {r[3] for r in rows[1:]}
        self.assertEqual(plates, {"'=CMD()"})
        self.assertEqual(len(rows) - 1, AdviceItem.objects.filter(vehicle=self.car_a).count())

    def test_the_vehicle_csv_escapes_formulas_keeps_numbers_and_the_caution(self):
        self.client.force_login(self.manager_a)
        response = self.client.get(self.vehicle_url(self.car_a) + "?format=csv")
        body = response.content.decode()
        rows = list(csv.reader(io.StringIO(body)))
        cells = [c for r in rows for c in r]
        plain_number = re.compile(r"[+-]?\d+(\.\d+)?([eE][+-]?\d+)?")
        self.assertFalse([c for c in cells if c[:1] in "=+-@" and c and not plain_number.fullmatch(c)],
                         "an unescaped formula lead")
        self.assertIn(CAUTION, cells)
        self.assertTrue(any(r[0] == "load case" for r in rows))

    def test_another_workshops_vehicle_csv_is_not_found(self):
        self.client.force_login(self.manager_a)
        self.assertEqual(self.client.get(self.vehicle_url(self.car_b) + "?format=csv").status_code, 404)


class CautionTests(AnalysisPagesTestCase):
    def test_every_page_with_advice_shows_the_caution(self):
        walk = [
            (self.manager_a, reverse("analytics:fleet")),
            (self.manager_a, reverse("analytics:fleet") + "?severity=watch"),
            (self.manager_a, self.vehicle_url(self.car_a)),
            (self.fleet_manager, self.vehicle_url(self.van_f)),
            (self.owner, reverse("analytics:mine")),
            (self.owner, self.vehicle_url(self.car_a)),
            (self.tech_a, self.vehicle_url(self.car_a)),
            (self.admin, reverse("analytics:fleet")),
        ]
        for user, url in walk:
            self.client.force_login(user)
            response = self.client.get(url)
            self.assertEqual(response.status_code, 200, url)
            self.assertContains(response, escape(CAUTION), msg_prefix=url)

    def test_the_vehicle_page_shows_charts_as_svg_with_text(self):
        self.client.force_login(self.manager_a)
        page = self.client.get(self.vehicle_url(self.car_a)).content.decode()
        self.assertIn("<svg", page)
        self.assertIn("odometer, km", page)  # text kept as text (svg.fonttype none)
        self.assertIn("braking in a turn", page)
        self.assertIn("Lower ball joint", page)
