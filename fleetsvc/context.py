"""Template context shared by every page: the safety caution shown wherever advice appears."""
from django.http import HttpRequest

from analytics.core.caution import CAUTION


def caution(request: HttpRequest) -> dict:
    return {"CAUTION": CAUTION}
