"""Keys copied from a row's result have no database constraint of their own; integrity holds.

An advice item's and a drift rate's vehicle is its result's vehicle, and a drift rate's platform
is that vehicle's platform (analytics.models.DENORMALISED_NO_CONSTRAINT). What is checked: which
foreign-key constraints PostgreSQL holds on those tables (its catalogue ``pg_constraint``), that a
vehicle with results still cannot be deleted behind the ORM's back (the result's own constraint,
checked at commit as Django's constraints are ``DEFERRABLE INITIALLY DEFERRED``), and that
deleting a vehicle through the ORM still removes its advice and drift rates.
"""
from __future__ import annotations

import pytest
from django.db import IntegrityError, connection, transaction

from analytics.models import DENORMALISED_NO_CONSTRAINT, AdviceItem, AnalysisResult, DriftRate
from tests.factories import make_platform, make_vehicle, make_workshop

pytestmark = pytest.mark.django_db(transaction=True)  # constraints are checked at commit


def _stored():
    vehicle = make_vehicle(platform=make_platform(), workshop=make_workshop())
    result = AnalysisResult.objects.create(vehicle=vehicle, input_key="k", model_version="t",
                                           payload={"advice": []})
    AdviceItem.objects.create(result=result, vehicle=vehicle, key="a", kind="alignment_check",
                              severity="now", urgency_rank=0, what="check", body={})
    DriftRate.objects.create(vehicle=vehicle, result=result, platform=vehicle.platform,
                             corner="FL", angle="toe", slope_deg_per_10k=0.01)
    return vehicle


def _constrained_columns(table: str) -> set[str]:
    with connection.cursor() as cur:
        cur.execute("SELECT a.attname FROM pg_constraint c JOIN pg_attribute a "
                    "ON a.attrelid = c.conrelid AND a.attnum = ANY(c.conkey) "
                    "WHERE c.contype = 'f' AND c.conrelid = %s::regclass", [table])
        return {row[0] for row in cur.fetchall()}


def test_only_the_copied_keys_go_without_a_constraint():
    if connection.vendor != "postgresql":
        pytest.skip("PostgreSQL catalogue")
    assert _constrained_columns("analytics_adviceitem") == {"result_id"}
    assert _constrained_columns("analytics_driftrate") == {"result_id"}
    assert _constrained_columns("analytics_analysisresult") == {"vehicle_id"}
    assert {f"{m}.{f}" for m, f in DENORMALISED_NO_CONSTRAINT} == {
        "adviceitem.vehicle", "driftrate.vehicle", "driftrate.platform"}


def test_a_vehicle_with_results_cannot_be_deleted_behind_the_orm():
    vehicle = _stored()
    with pytest.raises(IntegrityError), transaction.atomic(), connection.cursor() as cur:
        cur.execute("DELETE FROM inspections_vehicle WHERE id = %s", [vehicle.pk])
        cur.execute("SET CONSTRAINTS ALL IMMEDIATE")
    assert AdviceItem.objects.filter(vehicle=vehicle).count() == 1


def test_deleting_a_vehicle_through_the_orm_removes_its_advice_and_drift_rates():
    vehicle = _stored()
    vehicle.delete()
    assert not AdviceItem.objects.exists() and not DriftRate.objects.exists()
    assert not AnalysisResult.objects.exists()
