"""Shared pytest configuration: report which database the run uses."""
from django.conf import settings


def pytest_report_header(config):
    db = settings.DATABASES["default"]
    return f"fleetsvc database: {db['ENGINE'].rsplit('.', 1)[-1]} {db['NAME']}"
