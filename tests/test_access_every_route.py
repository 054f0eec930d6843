"""Every route that takes an object id answers 404 to each persona for another tenant's object,
and writes nothing; anonymous callers are sent to sign in (pages) or refused (API).

The routes are enumerated from the URL configuration, so a new route is covered (or fails here)
without anyone remembering to add it.
"""
from __future__ import annotations

import datetime as dt

import pytest
from django.test import Client
from django.urls import URLPattern, URLResolver, get_resolver

from analytics.models import AdviceAction, AnalysisRequest
from inspections import services
from inspections.models import AlignmentSession, ComponentCheck, ServiceEvent
from tests import factories as f
from tests.base import PersonaTestCase


def id_routes() -> list[str]:
    """Every non-admin route pattern with an ``<int:pk>``, as a template like ``bay/sessions/{}/``."""
    out: list[str] = []

    def walk(patterns, prefix=""):
        for p in patterns:
            if isinstance(p, URLResolver):
                walk(p.url_patterns, prefix + str(p.pattern))
            elif isinstance(p, URLPattern):
                route = prefix + str(p.pattern)
                if "<int:pk>" in route and not route.startswith("admin/"):
                    out.append("/" + route.replace("<int:pk>", "{}"))

    walk(get_resolver().url_patterns)
    return out


def kind_of(route: str) -> str:
    for word, kind in (("sessions/{}", "session"), ("checks/{}", "check"), ("vehicles/{}", "vehicle")):
        if word in route:
            return kind
    raise AssertionError(f"route {route} takes an id of an unknown kind: teach this test about it")


class EveryRouteTests(PersonaTestCase):
    @classmethod
    def setUpTestData(cls):
        super().setUpTestData()
        cls.objects = {}
        for car, tech in ((cls.car_a, cls.tech_a), (cls.car_b, cls.tech_b), (cls.van_f, cls.tech_b)):
            session = services.session_submit(
                vehicle=car, technician=tech, measured_at=f.at(3), odometer_km=12_000,
                kind="as_found", equipment_id="RIG", equipment_calibrated_on=dt.date(2026, 1, 1),
                readings=f.readings())
            check = services.component_check_submit(
                vehicle=car, technician=tech, checked_at=f.at(3), odometer_km=12_000, corner="FL",
                part="front_lower_ball_joint", verdict="sound", play_mm=0.2,
                play_direction="axial", play_loading="unloaded")
            cls.objects[car.pk] = {"vehicle": car.pk, "session": session.pk, "check": check.pk}

    def counts(self):
        return (AlignmentSession.objects.count(), ComponentCheck.objects.count(),
                ServiceEvent.objects.count(), AdviceAction.objects.count(),
                AnalysisRequest.objects.count())

    def test_the_route_list_is_not_empty(self):
        routes = id_routes()
        assert len(routes) >= 15, routes
        assert any(r.startswith("/api/") for r in routes) and any(r.startswith("/bay/") for r in routes)

    def test_another_tenants_object_is_not_found_on_every_route_for_every_persona(self):
        # persona → a vehicle that is not theirs to see
        strangers = [
            (self.owner, self.car_b), (self.other_owner, self.car_a),
            (self.tech_a, self.car_b), (self.tech_b, self.car_a),
            (self.manager_a, self.van_f), (self.fleet_manager, self.car_a),
            (self.no_role, self.car_a),
        ]
        before = self.counts()
        failures = []
        for user, car in strangers:
            client = Client()
            client.force_login(user)
            for route in id_routes():
                url = route.format(self.objects[car.pk][kind_of(route)])
                for method in ("get", "post"):
                    response = getattr(client, method)(url)
                    if response.status_code == 405:
                        # a method the route does not take: the same answer as for a missing id,
                        # so it tells nothing about the object
                        missing = getattr(client, method)(route.format(987_654_321))
                        if missing.status_code == 405:
                            continue
                    if response.status_code != 404:
                        failures.append(f"{user.username} {method.upper()} {url} → "
                                        f"{response.status_code}")
        assert not failures, "\n".join(failures)
        assert self.counts() == before, "a refused request wrote something"

    def test_the_owner_reaches_their_own_vehicle_pages(self):
        client = Client()
        client.force_login(self.owner)
        own = self.objects[self.car_a.pk]
        for url in (f"/analysis/vehicles/{own['vehicle']}/", f"/api/v1/vehicles/{own['vehicle']}",
                    f"/records/vehicles/{own['vehicle']}/history.csv"):
            assert client.get(url).status_code == 200, url

    def test_anonymous_callers_are_sent_to_sign_in_or_refused(self):
        client = Client()
        own = self.objects[self.car_a.pk]
        for route in id_routes():
            url = route.format(own[kind_of(route)])
            response = client.get(url)
            if url.startswith("/api/"):
                assert response.status_code in (401, 403), (url, response.status_code)
            else:
                assert response.status_code in (302, 405), (url, response.status_code)
                if response.status_code == 302:
                    assert response["Location"].startswith("/signin/"), (url, response["Location"])

    def test_the_admin_site_is_for_staff_only(self):
        for user in (self.owner, self.tech_a, self.manager_a):
            client = Client()
            client.force_login(user)
            response = client.get("/admin/")
            assert response.status_code == 302 and "/admin/login/" in response["Location"]


@pytest.mark.parametrize("route", id_routes())
def test_every_id_route_is_of_a_known_kind(route):
    assert kind_of(route) in {"vehicle", "session", "check"}
