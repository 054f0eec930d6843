"""The one settings module of fleetsvc. Every value comes from the environment.

Variables (all optional unless stated):

- ``DEBUG`` (default off), ``SECRET_KEY`` (required when DEBUG is off),
- ``DATABASE_URL`` (default ``sqlite:///var/fleetsvc.sqlite3``),
- ``REDIS_URL`` (unset: jobs run in-process; set: Celery on Redis),
- ``ALLOWED_HOSTS`` (comma-separated), ``TIME_ZONE`` (IANA name, default Europe/London),
- ``EMAIL_URL``-style pieces: ``EMAIL_HOST``/``EMAIL_PORT``/``EMAIL_HOST_USER``/
  ``EMAIL_HOST_PASSWORD``/``EMAIL_USE_TLS`` switch from the console backend to SMTP,
- ``MEDIA_ROOT`` (default ``var/media``), ``FLEETSVC_SECURE`` (production cookie/HSTS settings).
- Sign-in throttling (django-axes): ``FLEETSVC_SIGNIN_THROTTLE`` (default on),
  ``FLEETSVC_SIGNIN_FAILURES`` (failed sign-ins of one user name from one address before the
  lockout, default 5), ``FLEETSVC_SIGNIN_COOLOFF_MIN`` (lockout length, default 15 minutes),
  ``FLEETSVC_TRUSTED_PROXY`` (on behind nginx: take the caller's address from the last
  ``X-Forwarded-For`` hop nginx appended).

A malformed value stops start-up with one line on stderr naming the variable.
"""
from __future__ import annotations

import sys
from pathlib import Path

from csp.constants import NONE, SELF, UNSAFE_INLINE

from fleetsvc.env import (
    ConfigError,
    env_bool,
    env_int,
    env_list,
    env_str,
    env_timezone,
    parse_database_url,
    parse_redis_url,
)

BASE_DIR = Path(__file__).resolve().parent.parent

try:
    DEBUG = env_bool("DEBUG", False)
    SECRET_KEY = env_str("SECRET_KEY", required=not DEBUG) or "insecure-dev-key-for-debug-only"
    _db = parse_database_url("DATABASE_URL", BASE_DIR / "var" / "fleetsvc.sqlite3")
    REDIS_URL = parse_redis_url("REDIS_URL")
    ALLOWED_HOSTS = env_list("ALLOWED_HOSTS", ["127.0.0.1", "localhost", "testserver"])
    TIME_ZONE = env_timezone("TIME_ZONE", "Europe/London")
    EMAIL_HOST = env_str("EMAIL_HOST")
    EMAIL_PORT = env_int("EMAIL_PORT", 587, minimum=1)
    EMAIL_HOST_USER = env_str("EMAIL_HOST_USER", "") or ""
    EMAIL_HOST_PASSWORD = env_str("EMAIL_HOST_PASSWORD", "") or ""
    EMAIL_USE_TLS = env_bool("EMAIL_USE_TLS", True)
    DEFAULT_FROM_EMAIL = env_str("DEFAULT_FROM_EMAIL", "advice@fleetsvc.invalid")
    MEDIA_ROOT = Path(env_str("MEDIA_ROOT", str(BASE_DIR / "var" / "media")))
    SECURE = env_bool("FLEETSVC_SECURE", False)
    JOB_TIMEOUT_S = env_int("FLEETSVC_JOB_TIMEOUT_S", 300, minimum=1)
    # An owner's PDF is made this long after a result with new advice, and only if no newer
    # result came meanwhile: corrections in quick succession send the owner one e-mail.
    OWNER_REPORT_DELAY_S = env_int("FLEETSVC_OWNER_REPORT_DELAY_S", 120, minimum=0)
    AXES_ENABLED = env_bool("FLEETSVC_SIGNIN_THROTTLE", True)
    AXES_FAILURE_LIMIT = env_int("FLEETSVC_SIGNIN_FAILURES", 5, minimum=1)
    _signin_cooloff_min = env_int("FLEETSVC_SIGNIN_COOLOFF_MIN", 15, minimum=1)
    FLEETSVC_TRUSTED_PROXY = env_bool("FLEETSVC_TRUSTED_PROXY", False)
except ConfigError as exc:  # one line naming the variable, no traceback
    sys.stderr.write(f"fleetsvc configuration error: {exc}\n")
    raise SystemExit(2) from None

DATABASES = {"default": _db.settings}
DATABASE_VENDOR = _db.vendor
DEFAULT_AUTO_FIELD = "django.db.models.BigAutoField"

INSTALLED_APPS = [
    "django.contrib.admin",
    "django.contrib.auth",
    "django.contrib.contenttypes",
    "django.contrib.sessions",
    "django.contrib.messages",
    "django.contrib.staticfiles",
    "rest_framework",
    "rest_framework.authtoken",
    "drf_spectacular",
    "axes",
    "csp",
    "inspections",
    "analytics",
    "api",
]

MIDDLEWARE = [
    "django.middleware.security.SecurityMiddleware",
    "csp.middleware.CSPMiddleware",
    "django.contrib.sessions.middleware.SessionMiddleware",
    "django.middleware.common.CommonMiddleware",
    "django.middleware.csrf.CsrfViewMiddleware",
    "django.contrib.auth.middleware.AuthenticationMiddleware",
    "django.contrib.messages.middleware.MessageMiddleware",
    "django.middleware.clickjacking.XFrameOptionsMiddleware",
    "axes.middleware.AxesMiddleware",  # last: turns a locked-out sign-in into the 429 page
]

ROOT_URLCONF = "fleetsvc.urls"
WSGI_APPLICATION = "fleetsvc.wsgi.application"

TEMPLATES = [
    {
        "BACKEND": "django.template.backends.django.DjangoTemplates",
        "DIRS": [BASE_DIR / "fleetsvc" / "templates"],
        "APP_DIRS": True,
        "OPTIONS": {
            "context_processors": [
                "django.template.context_processors.request",
                "django.contrib.auth.context_processors.auth",
                "django.contrib.messages.context_processors.messages",
                "fleetsvc.context.caution",
            ],
        },
    }
]

AUTH_PASSWORD_VALIDATORS = [
    {"NAME": "django.contrib.auth.password_validation.MinimumLengthValidator"},
]
LOGIN_URL = "login"
LOGIN_REDIRECT_URL = "home"
LOGOUT_REDIRECT_URL = "login"

LANGUAGE_CODE = "en-gb"
USE_I18N = True
USE_TZ = True

STATIC_URL = "static/"
STATIC_ROOT = BASE_DIR / "var" / "static"
MEDIA_URL = "media/"
FILE_UPLOAD_MAX_MEMORY_SIZE = 5 * 1024 * 1024
DATA_UPLOAD_MAX_NUMBER_FILES = 12

if EMAIL_HOST:
    EMAIL_BACKEND = "django.core.mail.backends.smtp.EmailBackend"
else:
    EMAIL_BACKEND = "django.core.mail.backends.console.EmailBackend"

# Cache (charts drawn once): Redis when configured, shared by every web worker; else in-process.
if REDIS_URL:
    CACHES = {"default": {"BACKEND": "django.core.cache.backends.redis.RedisCache",
                          "LOCATION": REDIS_URL, "KEY_PREFIX": "fleetsvc", "TIMEOUT": 24 * 3600}}
else:
    CACHES = {"default": {"BACKEND": "django.core.cache.backends.locmem.LocMemCache"}}

# Celery: with REDIS_URL unset, jobs run in-process (eagerly) so the embedded default needs no
# broker. With it set, a real worker consumes the queue.
CELERY_BROKER_URL = REDIS_URL or "memory://"
CELERY_RESULT_BACKEND = None
CELERY_TASK_ALWAYS_EAGER = REDIS_URL is None
CELERY_TASK_EAGER_PROPAGATES = True
CELERY_TASK_ACKS_LATE = True
CELERY_TASK_REJECT_ON_WORKER_LOST = True
CELERY_WORKER_PREFETCH_MULTIPLIER = 1
# Database connections in a worker process: Celery's Django fix-up would close them before and
# after every task (a new PostgreSQL backend per job: ≈ 0.2 CPU-s of catalogue loading a
# recompute chunk, measured); with a reuse count it closes them only every this many tasks, and
# fleetsvc.celery applies Django's own policy before each task instead (CONN_MAX_AGE, health
# checks, a connection left in a bad state closed), as for a web request.
CELERY_DB_REUSE_MAX = 1000
# A publish after commit must not hold a web request on a broker that is down (no connection
# retries: kombu would sleep 2 s or more) or hung (socket timeouts): it fails within about a
# second and the request waits for the sweep (tests/faults/test_broker_down.py). The worker's
# own consumer connection keeps Celery's reconnect policy.
CELERY_BROKER_TRANSPORT_OPTIONS = {"visibility_timeout": JOB_TIMEOUT_S * 4, "max_retries": 0,
                                   "socket_connect_timeout": 1.0, "socket_timeout": 1.0}
CELERY_TASK_TIME_LIMIT = JOB_TIMEOUT_S
CELERY_TIMEZONE = TIME_ZONE
CELERY_BEAT_SCHEDULE = {
    "sweep-pending-analysis": {
        "task": "analytics.tasks.sweep_pending_requests",
        "schedule": 60.0,
    },
    "nightly-fleet-recompute": {
        "task": "analytics.tasks.recompute_fleet",
        "schedule": 24 * 3600.0,
    },
}

# ---- Security (issue 6, hardening). Production: DEBUG=0, FLEETSVC_SECURE=1, a long SECRET_KEY;
# `manage.py check --deploy` is clean then (tests/inspections/test_hardening.py runs it).

# Argon2id first (OWASP parameters, fleetsvc/signin.py); the others only verify older hashes,
# which Django re-hashes with Argon2 at the next sign-in.
PASSWORD_HASHERS = [
    "fleetsvc.signin.Argon2Hasher",
    "django.contrib.auth.hashers.PBKDF2PasswordHasher",
    "django.contrib.auth.hashers.PBKDF2SHA1PasswordHasher",
    "django.contrib.auth.hashers.ScryptPasswordHasher",
]
# Sign-in throttling: django-axes counts failures per (user name, address) in the database and
# answers a locked-out sign-in with 429 and the signin_locked page. A success clears the count.
AUTHENTICATION_BACKENDS = [
    "fleetsvc.signin.ThrottledSignInBackend",  # an axes AxesStandaloneBackend, first
    "django.contrib.auth.backends.ModelBackend",
]
AXES_LOCKOUT_PARAMETERS = [["username", "ip_address"]]
AXES_COOLOFF_TIME = _signin_cooloff_min / 60  # hours
AXES_RESET_ON_SUCCESS = True
AXES_LOCKOUT_TEMPLATE = "signin_locked.html"
AXES_CLIENT_IP_CALLABLE = "fleetsvc.signin.client_ip"
AXES_VERBOSE = False

# Content-Security-Policy (django-csp 4): everything from this origin; no inline or eval'd
# script, no plugins, no framing, forms post only here. Style *attributes* stay allowed
# (style-src-attr): the tolerance bands place their markers with style="left:…%" (the SVG
# charts use presentation attributes only); an attribute cannot run script. <style> elements
# and style sheets must come from this origin.
CONTENT_SECURITY_POLICY = {
    "DIRECTIVES": {
        "default-src": [SELF],
        "script-src": [SELF],
        "style-src": [SELF],
        "style-src-attr": [UNSAFE_INLINE],
        "img-src": [SELF, "data:"],
        "font-src": [SELF],
        "connect-src": [SELF],
        "worker-src": [SELF],
        "object-src": [NONE],
        "base-uri": [SELF],
        "form-action": [SELF],
        "frame-ancestors": [NONE],
    },
}
X_FRAME_OPTIONS = "DENY"
SECURE_CONTENT_TYPE_NOSNIFF = True
SECURE_REFERRER_POLICY = "same-origin"
SESSION_COOKIE_HTTPONLY = True
# Uploads: request bodies without files (the bay's JSON submit) up to 2.5 MB; at most 12 files in
# one request; each photo ≤ 5 MB and a real image (inspections.forms.validate_photos, Pillow);
# a CSV import ≤ inspections.importing.MAX_FILE_BYTES. nginx caps the whole request at 32 MB.
DATA_UPLOAD_MAX_MEMORY_SIZE = 2_621_440

if SECURE:
    SESSION_COOKIE_SECURE = True
    CSRF_COOKIE_SECURE = True
    SECURE_SSL_REDIRECT = True
    SECURE_HSTS_SECONDS = 31536000
    SECURE_HSTS_INCLUDE_SUBDOMAINS = True
    SECURE_HSTS_PRELOAD = True
    SECURE_PROXY_SSL_HEADER = ("HTTP_X_FORWARDED_PROTO", "https")

REST_FRAMEWORK = {
    "DEFAULT_AUTHENTICATION_CLASSES": [
        "rest_framework.authentication.TokenAuthentication",
        "rest_framework.authentication.SessionAuthentication",
    ],
    "DEFAULT_PERMISSION_CLASSES": ["rest_framework.permissions.IsAuthenticated"],
    "DEFAULT_SCHEMA_CLASS": "drf_spectacular.openapi.AutoSchema",
    "DEFAULT_PAGINATION_CLASS": "rest_framework.pagination.PageNumberPagination",
    "PAGE_SIZE": 50,
}
SPECTACULAR_SETTINGS = {
    "TITLE": "fleetsvc API",
    "DESCRIPTION": "Alignment sessions, component checks and advice, scoped to the caller.",
    "VERSION": "1",
    "SERVE_INCLUDE_SCHEMA": False,
}

LOGGING = {
    "version": 1,
    "disable_existing_loggers": False,
    "handlers": {"console": {"class": "logging.StreamHandler"}},
    "root": {"handlers": ["console"], "level": "WARNING"},
    "loggers": {"fleetsvc": {"level": "INFO"}, "analytics": {"level": "INFO"}},
}
