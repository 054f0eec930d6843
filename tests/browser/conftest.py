"""Shared fixtures of the real-browser tests: Debian's Chromium driven by Playwright's sync API.

Never downloads a browser: it launches ``/usr/bin/chromium``. Screenshots go to
``test-artifacts/`` at the repository root (gitignored). Fixtures:

- ``browser`` (session): one headless Chromium;
- ``new_page(width, height)``: a factory of fresh pages, each in its own context (own cookies,
  storage and service workers), touch enabled; ``tablet_portrait`` (768×1024) and
  ``tablet_landscape`` (1280×800) are the two tablet shapes;
- ``personas``: the same people and vehicles as ``tests.base.PersonaTestCase`` in a transactional
  database the live server can see;
- ``sign_in(page, username)``: signs in through the real sign-in page;
- ``shot(page, name)``: saves a full-page PNG to ``test-artifacts/<name>.png`` and returns its path.
"""
from __future__ import annotations

import os
from pathlib import Path
from types import SimpleNamespace

import pytest

# Playwright's sync API runs an event loop in this thread; Django's ORM calls from the test body
# (and the live server's own thread) are still synchronous.
os.environ.setdefault("DJANGO_ALLOW_ASYNC_UNSAFE", "true")

CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync"]
ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts"
PASSWORD = "pw-test-123"


@pytest.fixture(scope="session")
def browser():
    from playwright.sync_api import sync_playwright

    if not Path(CHROMIUM).exists():
        pytest.skip(f"{CHROMIUM} is not installed (apt-get install chromium)")
    with sync_playwright() as playwright:
        chromium = playwright.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        yield chromium
        chromium.close()


@pytest.fixture
def new_page(browser, live_server):
    contexts = []

    def make(width: int, height: int):
        context = browser.new_context(viewport={"width": width, "height": height}, has_touch=True,
                                      base_url=live_server.url, locale="en-GB",
                                      timezone_id="Europe/London")
        context.set_default_timeout(15_000)
        contexts.append(context)
        return context.new_page()

    yield make
    for context in contexts:
        context.close()


@pytest.fixture
def tablet_portrait(new_page):
    return new_page(768, 1024)


@pytest.fixture
def tablet_landscape(new_page):
    return new_page(1280, 800)


@pytest.fixture
def media_root(settings, tmp_path):
    settings.MEDIA_ROOT = tmp_path / "media"
    return settings.MEDIA_ROOT


@pytest.fixture
def personas(transactional_db):
    from tests import factories as f

    p = SimpleNamespace()
    f.make_personas(p)
    p.password = PASSWORD
    return p


@pytest.fixture
def sign_in():
    def go(page, username: str, password: str = PASSWORD):
        page.goto("/signin/")
        page.fill("#id_username", username)
        page.fill("#id_password", password)
        page.click("button[type=submit]")
        page.wait_for_load_state()
        return page

    return go


@pytest.fixture
def shot():
    ARTIFACTS.mkdir(exist_ok=True)

    def take(page, name: str, full_page: bool = True) -> Path:
        path = ARTIFACTS / f"{name}.png"
        page.screenshot(path=str(path), full_page=full_page)
        return path

    return take
