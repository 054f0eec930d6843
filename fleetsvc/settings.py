"""The one settings module of fleetsvc. Every value comes from the environment.

Variables (all optional unless stated):

- ``DEBUG`` (default off), ``SECRET_KEY`` (required when DEBUG is off),
- ``DATABASE_URL`` (default ``sqlite:///var/fleetsvc.sqlite3``),
- ``REDIS_URL`` (unset: jobs run in-process; set: Celery on Redis),
- ``ALLOWED_HOSTS`` (comma-separated), ``TIME_ZONE`` (IANA name, default Europe/London),
- ``EMAIL_URL``-style pieces: ``EMAIL_HOST``/``EMAIL_PORT``/``EMAIL_HOST_USER``/
  ``EMAIL_HOST_PASSWORD``/``EMAIL_USE_TLS`` switch from the console backend to SMTP,
- ``MEDIA_ROOT`` (default ``var/media``), ``FLEETSVC_SECURE`` (production cookie/HSTS settings).

A malformed value stops start-up with one line on stderr naming the variable.
"""
from __future__ import annotations

import sys
from pathlib import Path

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
    "inspections",
    "analytics",
]

MIDDLEWARE = [
    "django.middleware.security.SecurityMiddleware",
    "django.contrib.sessions.middleware.SessionMiddleware",
    "django.middleware.common.CommonMiddleware",
    "django.middleware.csrf.CsrfViewMiddleware",
    "django.contrib.auth.middleware.AuthenticationMiddleware",
    "django.contrib.messages.middleware.MessageMiddleware",
    "django.middleware.clickjacking.XFrameOptionsMiddleware",
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

# Celery: with REDIS_URL unset, jobs run in-process (eagerly) so the embedded default needs no
# broker. With it set, a real worker consumes the queue.
CELERY_BROKER_URL = REDIS_URL or "memory://"
CELERY_RESULT_BACKEND = None
CELERY_TASK_ALWAYS_EAGER = REDIS_URL is None
CELERY_TASK_EAGER_PROPAGATES = True
CELERY_TASK_ACKS_LATE = True
CELERY_TASK_REJECT_ON_WORKER_LOST = True
CELERY_WORKER_PREFETCH_MULTIPLIER = 1
CELERY_BROKER_TRANSPORT_OPTIONS = {"visibility_timeout": JOB_TIMEOUT_S * 4}
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
