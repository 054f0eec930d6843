"""Fuzz the API against its own OpenAPI schema with schemathesis: no request gets a 5xx.

The schema is loaded from ``/api/schema/`` and every request goes through the WSGI application
in-process (no server, no network), signed in with a technician's token. Three passes, each
checked with schemathesis' ``not_a_server_error``:

1. every operation, positive and negative cases, everything generated from the schema (path ids
   mostly miss: 404s, the scoping path);
2. every operation that takes an id, positive cases pinned to the technician's own vehicle,
   session or check — and for corrections the session's current ETag in If-Match — so bodies
   reach the serializers, the services and the concurrency checks (201, then 409s);
3. session submits with a valid header and readings drawn over (and past) the physical ranges,
   so the services store sessions and the analysis runs after commit.

Bounded: ``MAX_EXAMPLES`` per operation and pass, derandomized (the same cases every run), no
example database; the whole test takes well under a minute here. The database is real
(``transaction=True``): each request commits on its own connection, as in production.
"""
from __future__ import annotations

import datetime as dt
import uuid
from collections import Counter

import pytest
import schemathesis
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from rest_framework.authtoken.models import Token
from schemathesis import GenerationMode
from schemathesis.checks import not_a_server_error

from inspections import services
from inspections.models import AlignmentSession
from tests import factories as f

MAX_EXAMPLES = 25

pytestmark = pytest.mark.django_db(transaction=True)


def _run(strategy, headers, tally) -> None:
    @settings(max_examples=MAX_EXAMPLES, derandomize=True, database=None, deadline=None,
              suppress_health_check=list(HealthCheck), print_blob=False)
    @given(case=strategy)
    def each(case):
        response = case.call(headers=headers)
        tally.setdefault(case.operation.label, Counter())[response.status_code] += 1
        case.validate_response(response, checks=[not_a_server_error])

    each()


def _reading():
    angle = st.floats(min_value=-30, max_value=30, allow_nan=False)
    return st.fixed_dictionaries(
        {"corner": st.sampled_from(["FL", "FR", "RL", "RR"]), "toe_deg": angle, "camber_deg": angle},
        optional={"caster_deg": st.none() | angle, "sai_deg": st.none() | angle})


def test_no_request_the_schema_allows_gets_a_server_error():
    from fleetsvc.wsgi import application

    workshop = f.make_workshop("Fuzz workshop")
    tech = f.make_user("fuzz-tech", "technician", workshop=workshop)
    vehicle = f.make_vehicle(platform=f.make_platform("Fuzz platform"), workshop=workshop)
    when = f.at(30)
    session = services.session_submit(
        vehicle=vehicle, technician=tech, measured_at=when, odometer_km=12_000, kind="as_found",
        equipment_id="RIG-F", equipment_calibrated_on=(when - dt.timedelta(days=10)).date(),
        readings=f.readings())
    check = services.component_check_submit(
        vehicle=vehicle, technician=tech, checked_at=when, odometer_km=12_000, corner="FL",
        part="front_lower_ball_joint", verdict="sound")
    headers = {"Authorization": f"Token {Token.objects.create(user=tech).key}"}
    own_ids = {"/api/v1/vehicles/{id}": vehicle.pk, "/api/v1/sessions/{id}": session.pk,
               "/api/v1/checks/{id}": check.pk}

    schema = schemathesis.openapi.from_wsgi("/api/schema/", application)
    operations = {op.label: op for op in (result.ok() for result in schema.get_all_operations())}
    assert len(operations) >= 10
    tally: dict[str, Counter] = {}

    for operation in operations.values():  # 1: all generated
        for mode in (GenerationMode.POSITIVE, GenerationMode.NEGATIVE):
            _run(operation.as_strategy(generation_mode=mode), headers, tally)

    for operation in operations.values():  # 2: the technician's own ids
        own = next((pk for prefix, pk in own_ids.items() if operation.path.startswith(prefix)), None)
        if own is None:
            continue
        pinned = {"If-Match": f'"session-{own}"'} if operation.path.endswith("/corrections") else None
        _run(operation.as_strategy(path_parameters={"id": own}, headers=pinned), headers, tally)

    submit = operations["POST /api/v1/vehicles/{id}/sessions"]  # 3: valid header, fuzzed readings
    # at or above whatever passes 1 and 2 stored, so the odometer rule does not refuse them all
    from inspections.services import last_odometer_km

    header = {"kind": "as_found", "odometer_km": max(12_000, last_odometer_km(vehicle) or 0),
              "equipment_id": "RIG-F",
              "equipment_calibrated_on": (when - dt.timedelta(days=10)).date().isoformat()}
    bodies = st.builds(
        lambda readings, days: {**header, "client_token": str(uuid.uuid4()), "readings": readings,
                                "measured_at": f.at(days).isoformat()},
        st.lists(_reading(), min_size=1, max_size=4), st.floats(min_value=0, max_value=9))
    _run(bodies.map(lambda body: submit.Case(path_parameters={"id": vehicle.pk}, body=body,
                                             media_type="application/json")), headers, tally)

    # The fuzzing reached past the scoping into validation, storage and the concurrency checks.
    corrections = tally["POST /api/v1/sessions/{id}/corrections"]
    assert corrections[201] == 1 and corrections[409] > 0, corrections
    assert tally["POST /api/v1/vehicles/{id}/sessions"][201] > 0, tally
    assert tally["POST /api/v1/vehicles/{id}/sessions"][400] > 0
    assert AlignmentSession.objects.filter(supersedes=session).count() == 1
