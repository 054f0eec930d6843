"""Result payloads and advice bodies as PostgreSQL ``json`` (analytics.fields.JSONDocumentField).

What is checked: the columns' type, that documents written through the ORM and through the
recompute's COPY path read back as the same Python values, that the fleet view's key lookups
(``#>>``) still work, and that text which is not JSON is refused by the column (PostgreSQL's
``json`` input validates against RFC 8259, as its documentation says: "The json data type stores
an exact copy of the input text ... checked for validity").
"""
from __future__ import annotations

import pytest
from django.db import DataError, connection, transaction
from django.db.models.fields.json import KT

from analytics.models import AdviceItem, AnalysisResult
from tests.factories import make_platform, make_vehicle, make_workshop

pytestmark = pytest.mark.django_db

PAYLOAD = {"model_version": "t", "zeta": 1, "alpha": [0.1, None, "x"],
           "compliance": {"RL": {"toe_change_new_deg": -0.012, "flips_to_toe_out": True}},
           "text": "toe \u2013 camber"}


def _vehicle():
    return make_vehicle(platform=make_platform(), workshop=make_workshop())


def test_payload_and_body_columns_are_json_on_postgresql():
    if connection.vendor != "postgresql":
        pytest.skip("PostgreSQL storage")
    with connection.cursor() as cur:
        cur.execute("SELECT table_name, data_type FROM information_schema.columns "
                    "WHERE (table_name, column_name) IN "
                    "(('analytics_analysisresult', 'payload'), ('analytics_adviceitem', 'body'))")
        assert dict(cur.fetchall()) == {"analytics_analysisresult": "json",
                                        "analytics_adviceitem": "json"}


def test_a_document_round_trips_through_the_orm_with_key_order_and_lookups():
    v = _vehicle()
    r = AnalysisResult.objects.create(vehicle=v, input_key="k", model_version="t", payload=PAYLOAD)
    AdviceItem.objects.create(result=r, vehicle=v, key="a", kind="k", severity="advisory",
                              urgency_rank=0, what="w", body={"why": ["b", "a"], "limit": None})
    got = AnalysisResult.objects.get(pk=r.pk)
    assert got.payload == PAYLOAD and list(got.payload) == list(PAYLOAD)  # order kept
    assert AnalysisResult.objects.values_list("payload", flat=True).get(pk=r.pk) == PAYLOAD
    assert AdviceItem.objects.get(result=r).body == {"why": ["b", "a"], "limit": None}
    flips = AnalysisResult.objects.filter(pk=r.pk).annotate(
        new=KT("payload__compliance__RL__toe_change_new_deg"),
        flip=KT("payload__compliance__RL__flips_to_toe_out")).values_list("new", "flip").get()
    # text on PostgreSQL; SQLite's json_extract hands numbers back as numbers
    assert (str(flips[0]), flips[1]) == ("-0.012", "true")


def test_text_that_is_not_json_is_refused_and_nothing_is_written():
    if connection.vendor != "postgresql":
        pytest.skip("PostgreSQL json validation")
    v = _vehicle()
    with pytest.raises(DataError), transaction.atomic(), connection.cursor() as cur:
        cur.execute("INSERT INTO analytics_analysisresult (vehicle_id, input_key, model_version, "
                    "computed_at, payload, flips_to_toe_out) "
                    "VALUES (%s, 'k', 't', now(), %s::json, false)", [v.pk, "{'not': json}"])
    assert not AnalysisResult.objects.filter(vehicle=v).exists()
