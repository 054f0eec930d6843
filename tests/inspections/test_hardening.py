"""Hardening: password hashing, sign-in throttling, the content-security policy, CSRF, uploads and
``manage.py check --deploy`` with production settings."""
from __future__ import annotations

import json
import os
import re
import secrets
import struct
import subprocess
import sys
import zlib
from pathlib import Path

from django.conf import settings
from django.contrib.auth import authenticate, get_user_model
from django.core.files.uploadedfile import SimpleUploadedFile
from django.test import Client, RequestFactory, override_settings
from django.urls import reverse

from fleetsvc.signin import client_ip
from inspections.models import AlignmentSession, ComponentPhoto
from tests.base import PersonaTestCase
from tests.inspections.test_views import a_check, payload, png_bytes

ROOT = Path(__file__).resolve().parents[2]
PASSWORD = "pw-test-123"


class PasswordHashingTests(PersonaTestCase):
    def test_a_new_password_is_stored_as_argon2id_with_the_owasp_parameters(self):
        # OWASP Password Storage Cheat Sheet, Argon2id: m = 19 MiB, t = 2, p = 1.
        user = get_user_model().objects.create_user("hash-check", password="a long pass phrase")
        algorithm, variant, version, params, *_ = user.password.split("$")
        assert (algorithm, variant) == ("argon2", "argon2id")
        assert params == "m=19456,t=2,p=1"
        assert user.check_password("a long pass phrase") and not user.check_password("wrong")

    def test_an_older_pbkdf2_hash_still_signs_in_and_is_upgraded_to_argon2(self):
        from django.contrib.auth.hashers import make_password

        user = get_user_model().objects.create_user("old-hash")
        user.password = make_password("old pass phrase", hasher="pbkdf2_sha256")
        user.save()
        assert user.check_password("old pass phrase")
        user.refresh_from_db()
        assert user.password.startswith("argon2$")


class SignInThrottleTests(PersonaTestCase):
    def fail(self, client, username="tech-a"):
        return client.post(reverse("login"), {"username": username, "password": "wrong guess"})

    def test_after_the_failure_limit_even_the_right_password_is_refused_on_the_real_page(self):
        limit = settings.AXES_FAILURE_LIMIT
        assert limit == 5
        for _ in range(limit - 1):
            response = self.fail(self.client)
            assert response.status_code == 200  # the form again, with its error
        locked = self.fail(self.client)
        assert locked.status_code == 429
        assert "Sign-in paused" in locked.content.decode()
        right = self.client.post(reverse("login"), {"username": "tech-a", "password": PASSWORD})
        assert right.status_code == 429
        assert "_auth_user_id" not in self.client.session

    def test_the_lockout_is_per_user_name_and_address(self):
        for _ in range(settings.AXES_FAILURE_LIMIT):
            self.fail(self.client)
        other_user = self.client.post(reverse("login"), {"username": "tech-b", "password": PASSWORD})
        assert other_user.status_code == 302
        elsewhere = Client(REMOTE_ADDR="203.0.113.9")
        same_user = elsewhere.post(reverse("login"), {"username": "tech-a", "password": PASSWORD})
        assert same_user.status_code == 302

    def test_a_success_before_the_limit_clears_the_count(self):
        for _ in range(settings.AXES_FAILURE_LIMIT - 1):
            self.fail(self.client)
        assert self.client.post(reverse("login"), {"username": "tech-a",
                                                   "password": PASSWORD}).status_code == 302
        self.client.logout()
        for _ in range(settings.AXES_FAILURE_LIMIT - 1):
            assert self.fail(self.client).status_code == 200

    def test_a_call_without_a_request_is_not_from_the_network_and_still_authenticates(self):
        assert authenticate(username="tech-a", password=PASSWORD) == self.tech_a
        assert authenticate(username="tech-a", password="wrong") is None

    def test_the_callers_address_comes_from_nginx_only_behind_a_trusted_proxy(self):
        request = RequestFactory().get("/", REMOTE_ADDR="127.0.0.1",
                                       HTTP_X_FORWARDED_FOR="10.9.9.9, 198.51.100.7")
        assert client_ip(request) == "127.0.0.1"
        with override_settings(FLEETSVC_TRUSTED_PROXY=True):
            assert client_ip(request) == "198.51.100.7"  # the hop nginx appended; not the forged one


class ContentSecurityPolicyTests(PersonaTestCase):
    def test_every_page_carries_a_policy_without_inline_or_eval_script(self):
        self.client.force_login(self.tech_a)
        for url in [reverse("login"), reverse("bay"), reverse("bay_vehicle", args=[self.car_a.pk])]:
            response = self.client.get(url)
            policy = response["Content-Security-Policy"]
            directives = dict(d.strip().split(" ", 1) for d in policy.split(";") if d.strip())
            assert directives["default-src"] == "'self'"
            assert directives["script-src"] == "'self'"
            assert directives["object-src"] == "'none'"
            assert directives["frame-ancestors"] == "'none'"
            assert directives["form-action"] == "'self'"
            assert "unsafe" not in directives["style-src"]

    def test_no_template_holds_an_inline_script_or_an_event_handler_attribute(self):
        # The policy forbids inline script, so any would silently stop working in the browser.
        offenders = []
        for path in ROOT.glob("*/templates/**/*.html"):
            text = path.read_text()
            for tag in re.findall(r"<script\b[^>]*>", text, flags=re.I):
                if "src=" not in tag:
                    offenders.append(f"{path.relative_to(ROOT)}: {tag}")
            for attr in re.findall(r"\son[a-z]+\s*=\s*[\"']", text, flags=re.I):
                offenders.append(f"{path.relative_to(ROOT)}: {attr.strip()}")
            if "javascript:" in text.lower():
                offenders.append(f"{path.relative_to(ROOT)}: javascript: URL")
        assert offenders == []


class CsrfTests(PersonaTestCase):
    def setUp(self):
        self.strict = Client(enforce_csrf_checks=True)

    def test_the_sign_in_form_refuses_a_post_without_its_token(self):
        response = self.strict.post(reverse("login"), {"username": "tech-a", "password": PASSWORD})
        assert response.status_code == 403

    def test_the_session_submit_refuses_a_post_without_the_token_and_stores_nothing(self):
        self.strict.force_login(self.tech_a)
        response = self.strict.post(reverse("bay_session_submit", args=[self.car_a.pk]),
                                    json.dumps(payload()), content_type="application/json")
        assert response.status_code == 403
        assert AlignmentSession.objects.count() == 0

    def test_the_import_form_refuses_a_post_without_the_token_and_accepts_it_with(self):
        self.strict.force_login(self.tech_a)
        upload = SimpleUploadedFile("x.csv", b"record,vehicle,at,odometer_km,corner\n")
        assert self.strict.post(reverse("records:import"), {"file": upload}).status_code == 403
        page = self.strict.get(reverse("records:import"))
        token = re.search(r'name="csrfmiddlewaretoken" value="([^"]+)"', page.content.decode())[1]
        upload = SimpleUploadedFile("x.csv", b"record,vehicle,at,odometer_km,corner\n")
        response = self.strict.post(reverse("records:import"),
                                    {"file": upload, "csrfmiddlewaretoken": token})
        assert response.status_code == 400  # past CSRF: refused for having no data rows
        assert "no data rows" in response.content.decode()


def png_claiming(width: int, height: int) -> bytes:
    """A tiny PNG whose header claims ``width`` × ``height`` pixels (a decompression bomb)."""
    data = bytearray(png_bytes((1, 1)))
    ihdr = bytearray(data[16:29])
    ihdr[0:8] = struct.pack(">II", width, height)
    data[16:29] = ihdr
    data[29:33] = struct.pack(">I", zlib.crc32(b"IHDR" + bytes(ihdr)) & 0xFFFFFFFF)
    return bytes(data)


@override_settings(MEDIA_ROOT="/tmp/fleetsvc-test-media-hardening")
class UploadTests(PersonaTestCase):
    def setUp(self):
        self.client.force_login(self.tech_a)

    def post(self, files, checks=1):
        data = payload(checks=[a_check(corner="RL") for _ in range(checks)])
        return self.client.post(reverse("bay_session_submit", args=[self.car_a.pk]),
                                {"payload": json.dumps(data), **files})

    def test_a_photo_claiming_a_huge_size_is_refused_not_decoded(self):
        bomb = SimpleUploadedFile("bomb.png", png_claiming(40_000, 40_000), "image/png")
        response = self.post({"checks[0].photos": [bomb]})
        assert response.status_code == 400
        assert "bomb.png" in response.json()["errors"]["checks[0].photos"]
        assert AlignmentSession.objects.count() == 0 and ComponentPhoto.objects.count() == 0

    def test_more_files_in_one_request_than_the_limit_is_refused_with_a_message(self):
        limit = settings.DATA_UPLOAD_MAX_NUMBER_FILES
        files = {f"checks[{i}].photos": [SimpleUploadedFile(f"{i}-{j}.png", png_bytes(), "image/png")
                                         for j in range(5)] for i in range(3)}
        assert sum(len(v) for v in files.values()) > limit
        response = self.post(files, checks=3)
        assert response.status_code == 400
        assert "too many photos" in response.json()["errors"]["__all__"]
        assert AlignmentSession.objects.count() == 0

    def test_a_script_named_like_a_photo_is_refused_by_its_content(self):
        fake = SimpleUploadedFile("x.jpg", b"<script>alert(1)</script>", "image/jpeg")
        response = self.post({"checks[0].photos": [fake]})
        assert response.status_code == 400 and AlignmentSession.objects.count() == 0


def test_check_deploy_is_clean_with_production_settings(tmp_path):
    env = {k: v for k, v in os.environ.items()
           if not k.startswith(("DATABASE_URL", "REDIS_URL", "SECRET_KEY", "DEBUG", "FLEETSVC_",
                                "ALLOWED_HOSTS", "DJANGO_"))}
    env.update(DEBUG="0", FLEETSVC_SECURE="1", SECRET_KEY=secrets.token_urlsafe(64),
               DATABASE_URL=f"sqlite:///{tmp_path / 'deploy.sqlite3'}",
               ALLOWED_HOSTS="fleet.example.invalid")
    result = subprocess.run([sys.executable, "manage.py", "check", "--deploy", "--fail-level",
                             "DEBUG"], cwd=ROOT, env=env, capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stdout + result.stderr
    assert "System check identified no issues (0 silenced)." in result.stdout


def test_check_deploy_warns_when_the_secure_switch_is_off(tmp_path):
    """The same check fails without FLEETSVC_SECURE: the test above can fail."""
    env = {k: v for k, v in os.environ.items()
           if not k.startswith(("DATABASE_URL", "REDIS_URL", "SECRET_KEY", "DEBUG", "FLEETSVC_",
                                "DJANGO_"))}
    env.update(DEBUG="0", SECRET_KEY=secrets.token_urlsafe(64),
               DATABASE_URL=f"sqlite:///{tmp_path / 'deploy.sqlite3'}")
    result = subprocess.run([sys.executable, "manage.py", "check", "--deploy"], cwd=ROOT, env=env,
                            capture_output=True, text=True, timeout=120)
    assert "security.W004" in result.stderr + result.stdout  # HSTS not set
