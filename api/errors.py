"""Error bodies of the API: ``{field: [reason, …]}`` with nested fields named flat.

DRF reports a nested serializer's errors nested (``{"readings": [{}, {"toe_deg": [...]}]}``); the
services report them flat (``{"readings[FL].toe_deg": "..."}``). Both become the services' form, so
a client handles one shape: ``{"readings[FL].toe_deg": ["..."]}``. A list item is named by its
``corner`` when it has a valid one, else by its index.
"""
from __future__ import annotations

from collections.abc import Mapping

from django.core.exceptions import ValidationError as DjangoValidationError
from rest_framework import exceptions
from rest_framework.views import exception_handler as drf_exception_handler

from inspections.models.catalogue import CORNER_AXLE

NON_FIELD = "non_field_errors"


def _join(prefix: str, key, data=None) -> str:
    if isinstance(key, int):  # a list item (DRF reports them as {index: errors})
        return f"{prefix}[{_label(data, key)}]"
    if key == NON_FIELD:
        return prefix or NON_FIELD
    return f"{prefix}.{key}" if prefix else key


def _label(data, i: int) -> str:
    if isinstance(data, list) and 0 <= i < len(data) and isinstance(data[i], Mapping):
        corner = data[i].get("corner")
        if isinstance(corner, str) and corner in CORNER_AXLE:
            return corner
    return str(i)


def flatten(detail, data=None, prefix: str = "") -> dict[str, list[str]]:
    """Flatten a DRF error ``detail`` (dicts, lists, strings) against the submitted ``data``."""
    out: dict[str, list[str]] = {}
    if isinstance(detail, Mapping):
        for key, value in detail.items():
            if isinstance(key, int):
                sub = data[key] if isinstance(data, list) and 0 <= key < len(data) else None
            else:
                sub = data.get(key) if isinstance(data, Mapping) else None
            for k, v in flatten(value, sub, _join(prefix, key, data)).items():
                out.setdefault(k, []).extend(v)
    elif isinstance(detail, list):
        if all(not isinstance(item, Mapping | list) for item in detail):
            out.setdefault(prefix or NON_FIELD, []).extend(str(item) for item in detail)
        else:
            for i, item in enumerate(detail):
                if item:
                    sub = data[i] if isinstance(data, list) and i < len(data) else None
                    for k, v in flatten(item, sub, f"{prefix}[{_label(data, i)}]").items():
                        out.setdefault(k, []).extend(v)
    else:
        out.setdefault(prefix or NON_FIELD, []).append(str(detail))
    return out


def service_errors(exc: DjangoValidationError) -> dict[str, list[str]]:
    """A service's refusal (``ValidationError({field: reason})``) in the API's shape."""
    if hasattr(exc, "error_dict"):
        return {(NON_FIELD if k == "__all__" else k): list(v) for k, v in exc.message_dict.items()}
    return {NON_FIELD: list(exc.messages)}


def exception_handler(exc, context):
    """DRF's handler, with validation errors flattened against the request's data."""
    response = drf_exception_handler(exc, context)
    if response is not None and isinstance(exc, exceptions.ValidationError):
        request = context.get("request")
        try:
            data = request.data if request is not None else None
        except exceptions.APIException:
            data = None
        response.data = flatten(exc.detail, data)
    return response
