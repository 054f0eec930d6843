"""A JSON document column stored as PostgreSQL ``json`` (validated text) instead of ``jsonb``.

Result payloads and advice bodies are written once and read whole; nothing queries inside them
but the fleet view's few inline figures of the rows on one page (``#>>`` works on ``json`` too).
``jsonb`` would parse every document into its binary form on the way in and print it back to
text on the way out; ``json`` only checks the text is valid JSON. Measured on one 791-vehicle
recompute chunk (13 MB of payload JSON, PostgreSQL 15): the server spent 0.18 CPU-s storing the
payloads as ``jsonb`` against 0.075 s as ``json`` (both lz4-compressed, 6.0 and 5.1 MB stored).
Given up with it: containment/key-existence lookups and GIN indexes on these columns (not used),
and equality (``json`` has no ``=``; never compared). Other databases keep Django's ``JSONField``
storage (SQLite: text).
"""
from __future__ import annotations

from typing import Any

from django.db import models


class JSONDocumentField(models.JSONField):
    """:class:`~django.db.models.JSONField` kept as PostgreSQL ``json``."""

    def db_type(self, connection) -> str:
        if connection.vendor == "postgresql":
            return "json"
        return super().db_type(connection)

    def get_db_prep_value(self, value: Any, connection, prepared: bool = False) -> Any:
        if connection.vendor != "postgresql":
            return super().get_db_prep_value(value, connection, prepared)
        from django.db.backends.postgresql.operations import get_json_dumps
        from psycopg.types.json import Json

        if not prepared:
            value = self.get_prep_value(value)
        return Json(value, dumps=get_json_dumps(self.encoder))

    def from_db_value(self, value: Any, expression, connection) -> Any:
        # psycopg parses ``json`` values itself (Django registers its text loader for ``jsonb``
        # only); other databases hand over text
        if connection.vendor == "postgresql":
            return value
        return super().from_db_value(value, expression, connection)
