"""One visit through every persona, in a real browser with a real Celery worker on Redis.

A technician on a 768×1024 tablet logs a session and a worn-bush check; the worker analyses it;
the workshop manager then sees the new reading and the updated advice; the owner downloads the
PDF of their own car and cannot reach another owner's.
"""
from __future__ import annotations

import os
import re
import subprocess
import tempfile

import pytest

from tests.conftest import wait_for

os.environ.setdefault("DJANGO_ALLOW_ASYNC_UNSAFE", "true")

pytestmark = [pytest.mark.browser, pytest.mark.services, pytest.mark.django_db(transaction=True)]


def test_technician_manager_and_owner_each_do_their_part(
        personas, media_root, live_worker, new_page, sign_in, shot):
    from analytics.core.caution import CAUTION
    from analytics.inputs import input_key
    from analytics.models import AdviceItem, AnalysisResult
    from inspections.models import AlignmentSession
    from tests.analytics.helpers import give_corners, give_history

    p = personas
    give_corners(p.platform)
    give_history(p.car_a, p.tech_a, visits=4)  # 10 000 … 31 000 km
    car = p.car_a
    assert wait_for(lambda: AnalysisResult.objects.filter(vehicle=car,
                                                          input_key=input_key(car)).exists())

    # The technician, in portrait on the tablet.
    tablet = new_page(768, 1024)
    sign_in(tablet, "tech-a")
    tablet.goto(f"/bay/vehicles/{car.pk}/sessions/new")
    tablet.wait_for_selector("#session-form")
    tablet.fill("#odometer_km", "38000")
    tablet.fill("#equipment_id", "RIG-9")
    tablet.fill("#equipment_calibrated_on", "2026-06-01")
    for corner, toe, camber in [("FL", "0.06", "-0.5"), ("FR", "0.04", "-0.6"),
                                ("RL", "0.02", "-1.2"), ("RR", "0.31", "-1.1")]:
        tablet.fill(f"input[name='readings[{corner}].toe_deg']", toe)
        tablet.fill(f"input[name='readings[{corner}].camber_deg']", camber.lstrip("-"))
        tablet.click(f".reading[data-name='readings[{corner}].camber_deg'] [data-sign]")
    tablet.click("#add-check")
    check = tablet.locator(".check").last
    check.locator("[data-f=part]").select_option("rear_toe_link_inner_bush")
    check.locator("[data-f=corner]").select_option("RL")
    check.locator("[data-f=findings][value=debonding]").check()
    check.locator("[data-f=verdict][value=unfit]").check()
    check.locator("[data-f=defect_category]").select_option("major")
    tablet.click("#send")
    tablet.wait_for_url(re.compile(r"/bay/sessions/\d+/$"))
    shot(tablet, "journey-1-technician-stored")
    session = AlignmentSession.objects.get(vehicle=car, odometer_km=38000)
    assert session.readings.get(corner="RR").toe_deg == pytest.approx(0.31)

    # The worker picks up the request written with the session and stores the new advice.
    assert wait_for(lambda: AnalysisResult.objects.filter(vehicle=car,
                                                          input_key=input_key(car)).exists())
    assert wait_for(lambda: AdviceItem.objects.filter(
        vehicle=car, kind="replace_part", corner="RL").exists())

    # The workshop manager, in landscape: the new reading and the updated advice.
    desk = new_page(1280, 800)
    sign_in(desk, "manager-a")
    desk.goto(f"/analysis/vehicles/{car.pk}/")
    text = desk.inner_text("main")
    assert CAUTION[:40] in desk.inner_text("body")
    assert "38,000" in text or "38000" in text  # the new odometer reading is in the history
    assert re.search(r"replace.*toe link inner bush.*RL|RL.*replace.*toe link inner bush", text,
                     re.IGNORECASE | re.DOTALL)
    shot(desk, "journey-2-manager-vehicle")
    desk.goto("/analysis/fleet/")
    assert car.plate in desk.inner_text("main")
    shot(desk, "journey-3-manager-fleet")

    # The owner downloads the PDF of their own car, and cannot reach the other owner's.
    phone = new_page(768, 1024)
    sign_in(phone, "owner")
    phone.goto("/analysis/mine/")
    assert CAUTION[:40] in phone.inner_text("body")
    shot(phone, "journey-4-owner")
    href = phone.get_attribute("a:has-text('Advice PDF (A4)')", "href")
    pdf = phone.request.get(href)
    assert pdf.status == 200 and pdf.body().startswith(b"%PDF")
    with tempfile.NamedTemporaryFile(suffix=".pdf") as fh:
        fh.write(pdf.body())
        fh.flush()
        text = subprocess.run(["pdftotext", fh.name, "-"], capture_output=True, text=True,
                              check=True).stdout
    assert car.plate in text and "Advisory only" in text
    other = phone.request.get(f"/analysis/vehicles/{p.car_b.pk}/advice.pdf?paper=A4")
    assert other.status == 404
