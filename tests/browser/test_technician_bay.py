"""A technician on a tablet: sign in, find the car, log a full session offline, send it once."""
from __future__ import annotations

import io
import math
import os
import re

import pytest
from PIL import Image

os.environ.setdefault("DJANGO_ALLOW_ASYNC_UNSAFE", "true")

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]


def png(name: str) -> dict:
    buf = io.BytesIO()
    Image.new("RGB", (64, 48), (120, 90, 60)).save(buf, format="PNG")
    return {"name": name, "mimeType": "image/png", "buffer": buf.getvalue()}


def fill_reading(page, corner: str, quantity: str, text: str) -> None:
    page.fill(f"input[name='readings[{corner}].{quantity}_deg']", text)


def band_text(page, corner: str, quantity: str) -> str:
    reading = page.locator(f".reading[data-name='readings[{corner}].{quantity}_deg']")
    return reading.locator("[data-band-text]").inner_text()


def fill_session(page) -> None:
    page.fill("#odometer_km", "20500")
    page.fill("#equipment_id", "RIG-7")
    page.fill("#equipment_calibrated_on", "2026-01-10")
    # FL toe typed as linear toe in mm at the platform's D
    page.check("input[name='readings[FL].toe_unit'][value=mm]")
    fill_reading(page, "FL", "toe", "0.5")
    fill_reading(page, "FL", "camber", "-0.5")
    fill_reading(page, "FL", "caster", "4.1")
    fill_reading(page, "FR", "toe", "0.06")
    fill_reading(page, "FR", "camber", "0.45")
    page.click(".reading[data-name='readings[FR].camber_deg'] [data-sign]")  # ± → -0.45
    fill_reading(page, "FR", "caster", "3.9")
    fill_reading(page, "RL", "toe", "0.12")
    fill_reading(page, "RL", "camber", "-1.3")
    fill_reading(page, "RR", "toe", "0.31")  # over the rear toe band 0.00 … 0.20
    fill_reading(page, "RR", "camber", "-1.1")


def add_check(page) -> None:
    page.click("#add-check")
    check = page.locator(".check").last
    check.locator("[data-f=part]").select_option("rear_toe_link_inner_bush")
    check.locator("[data-f=corner]").select_option("RL")
    check.locator("[data-f=play_mm]").fill("0.8")
    check.locator("[data-f=play_direction]").select_option("radial")
    check.locator("[data-f=play_loading]").select_option("unloaded")
    check.locator("[data-f=findings][value=cracking]").check()
    check.locator("[data-f=verdict][value=keep_watch]").check()
    check.locator("[data-f=defect_category]").select_option("minor")
    check.locator("[data-photos]").set_input_files([png("bush-rl.png")])
    check.locator("[data-photo-list] li").first.wait_for()


def test_a_technician_logs_a_full_session_offline_and_it_is_stored_once(
        personas, tablet_portrait, sign_in, shot, media_root):
    from inspections.models import AlignmentSession, ComponentCheck, ComponentPhoto

    page = tablet_portrait
    sign_in(page, "tech-a")
    assert page.url.endswith("/bay/")
    shot(page, "bay-search-portrait")

    page.fill("#q", "  ab12-cde ")
    page.click("form.search button[type=submit]")
    page.wait_for_url(re.compile(r"/bay/vehicles/\d+/$"))
    assert "AB12 CDE" in page.inner_text("h1")
    shot(page, "bay-vehicle-portrait")

    page.click("text=Start a session")
    page.wait_for_url(re.compile(r"/sessions/new$"))
    page.wait_for_selector("body[data-offline-ready=yes]")  # the page is kept for offline reloads
    fill_session(page)

    # each value against its band as it is typed; FL toe converted from mm at D = 406.4 mm
    fl = band_text(page, "FL", "toe")
    expected = math.degrees(math.asin(0.5 / 406.4))
    assert f"+{expected:.3f}°" in fl and "from +0.50 mm" in fl and "inside band" in fl
    assert "source: unverified" in fl
    assert "−0.450°" in band_text(page, "FR", "camber")
    assert "over band" in band_text(page, "RR", "toe")
    assert "inside band" in band_text(page, "RL", "toe")

    add_check(page)
    shot(page, "bay-session-form-portrait")

    # the connection drops; the submit is kept on the tablet
    page.context.set_offline(True)
    page.click("#send")
    page.wait_for_selector("#queued-banner:not([hidden])")
    assert "Waiting for a connection" in page.inner_text("#draft-status")
    assert AlignmentSession.objects.count() == 0
    shot(page, "bay-session-queued-portrait", full_page=False)

    # a reload without a connection: the page comes from the tablet, the draft survives
    page.reload()
    page.wait_for_selector("#session-form")
    assert page.input_value("input[name='readings[FL].toe_deg']") == "0.5"
    assert page.input_value("input[name='readings[FR].camber_deg']") == "-0.45"
    assert page.is_checked("input[name='readings[FL].toe_unit'][value=mm]")
    assert page.locator(".check [data-f=part]").input_value() == "rear_toe_link_inner_bush"
    page.locator(".check [data-photo-list] li").first.wait_for()
    assert page.is_visible("#queued-banner")
    assert AlignmentSession.objects.count() == 0

    # the connection returns: the queued submit goes out by itself, once
    page.context.set_offline(False)
    page.wait_for_url(re.compile(r"/bay/sessions/\d+/$"))
    assert page.evaluate("localStorage.getItem('fleetsvc.outbox')") == "[]"
    page.evaluate("window.dispatchEvent(new Event('online'))")  # a second 'online' sends nothing
    shot(page, "bay-session-stored-portrait")

    session = AlignmentSession.objects.get()
    assert session.vehicle == personas.car_a and session.technician == personas.tech_a
    assert session.odometer_km == 20500 and session.kind == "as_found"
    readings = {r.corner: r for r in session.readings.all()}
    assert sorted(readings) == ["FL", "FR", "RL", "RR"]
    assert math.isclose(readings["FL"].toe_deg, expected, rel_tol=1e-12)
    assert readings["FR"].camber_deg == -0.45
    check = ComponentCheck.objects.get()
    assert (check.session, check.part, check.corner, check.verdict) == (
        session, "rear_toe_link_inner_bush", "RL", "keep_watch")
    assert check.findings == ["cracking"] and check.play_mm == 0.8
    assert ComponentPhoto.objects.filter(check_record=check).count() == 1
    assert AlignmentSession.objects.count() == 1


def test_landscape_errors_show_beside_their_field_and_corrections_keep_history(
        personas, tablet_landscape, sign_in, shot):
    from inspections.models import AlignmentSession

    page = tablet_landscape
    sign_in(page, "tech-a")
    page.goto(f"/bay/vehicles/{personas.car_a.pk}/sessions/new")
    fill_session(page)
    fill_reading(page, "RL", "camber", "1.3.")  # a slip of the finger
    assert "cannot read" in band_text(page, "RL", "camber")
    page.click("#send")
    error = page.locator(".reading[data-name='readings[RL].camber_deg'] .field-error")
    error.wait_for(state="visible")
    assert "cannot read" in error.inner_text()
    assert AlignmentSession.objects.count() == 0
    shot(page, "bay-session-error-landscape", full_page=False)

    fill_reading(page, "RL", "camber", "-1.3")
    page.click("#send")
    page.wait_for_url(re.compile(r"/bay/sessions/\d+/$"))
    original = AlignmentSession.objects.get()

    page.click("text=Correct this session")
    page.wait_for_url(re.compile(r"/correct$"))
    assert page.input_value("#odometer_km") == "20500"
    page.fill("#correction_reason", "odometer misread: 25 000")
    page.fill("#odometer_km", "25000")
    page.click("#send")
    page.wait_for_url(re.compile(r"/bay/sessions/\d+/$"))
    assert "As first recorded" in page.content() and "odometer misread" in page.content()
    assert AlignmentSession.objects.count() == 2
    assert AlignmentSession.objects.current().get().supersedes == original
    shot(page, "bay-session-history-landscape")

    page.goto(f"/bay/vehicles/{personas.car_a.pk}/")
    shot(page, "bay-vehicle-landscape")
    page.goto(f"/bay/vehicles/{personas.car_a.pk}/sessions/new")
    fill_session(page)
    shot(page, "bay-session-form-landscape", full_page=False)


def test_touch_targets_are_at_least_44_px(personas, tablet_portrait, sign_in):
    page = tablet_portrait
    sign_in(page, "tech-a")
    page.goto(f"/bay/vehicles/{personas.car_a.pk}/sessions/new")
    page.click("#add-check")
    small = page.evaluate("""() => {
        const out = [];
        const sel = 'button, select, .chip span, summary, '
            + 'input:not([type=radio]):not([type=checkbox]):not([type=hidden])';
        for (const el of document.querySelectorAll(sel)) {
            const r = el.getBoundingClientRect();
            if (r.width === 0 && r.height === 0) continue;  // not shown (e.g. the other angle format)
            const what = `${el.tagName} ${el.name || el.textContent.trim()}`;
            if (r.height < 44 || r.width < 44) out.push(`${what} ${r.width}x${r.height}`);
        }
        return out;
    }""")
    assert small == []
