"""Sign-in hardening: the password hasher and the throttled sign-in backend.

- :class:`Argon2Hasher` is Django's Argon2id hasher with the parameters of the OWASP Password
  Storage Cheat Sheet's first Argon2id configuration (m = 19 MiB, t = 2, p = 1) instead of
  Django's default (m = 100 MiB, p = 8): on this service's 2-core hosts with several gunicorn
  workers, 100 MiB per concurrent sign-in is a memory spike, not extra safety. The algorithm name
  stays ``argon2``, so hashes stored with other parameters still verify and are re-hashed at the
  next sign-in (Django's ``must_update``).
- :class:`ThrottledSignInBackend` is django-axes' standalone backend (it counts failed sign-ins
  and refuses a locked-out user before any password is checked). Axes needs the request to know
  where an attempt came from; a call of ``authenticate()`` without a request (a management
  command, the shell, a test) cannot come from the network, so it is not throttled here instead
  of failing with ``AxesBackendRequestParameterRequired``. Every web sign-in (Django's
  ``LoginView``, DRF's token view and basic authentication) passes the request.
- :func:`client_ip` tells axes the address of the caller: ``REMOTE_ADDR``, or — only when
  ``FLEETSVC_TRUSTED_PROXY`` is on (nginx in front, ``deploy/nginx.conf.example``) — the address
  nginx appended last to ``X-Forwarded-For``, which the client cannot forge.
"""
from __future__ import annotations

from axes.backends import AxesStandaloneBackend
from django.conf import settings
from django.contrib.auth.hashers import Argon2PasswordHasher


class Argon2Hasher(Argon2PasswordHasher):
    """Argon2id, OWASP parameters (m = 19 MiB, t = 2, p = 1); see the module docstring."""

    time_cost = 2
    memory_cost = 19 * 1024  # KiB
    parallelism = 1


class ThrottledSignInBackend(AxesStandaloneBackend):
    """Axes' lockout check for every sign-in that arrives with a request."""

    def authenticate(self, request, username=None, password=None, **kwargs):
        if request is None:
            return None  # not from the network: nothing to throttle (see the module docstring)
        return super().authenticate(request, username=username, password=password, **kwargs)


def client_ip(request) -> str | None:
    """The caller's address for sign-in throttling (see the module docstring)."""
    if getattr(settings, "FLEETSVC_TRUSTED_PROXY", False):
        forwarded = request.META.get("HTTP_X_FORWARDED_FOR", "")
        hops = [hop.strip() for hop in forwarded.split(",") if hop.strip()]
        if hops:
            return hops[-1]
    return request.META.get("REMOTE_ADDR")
