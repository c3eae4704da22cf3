"""Property-based requests made from the served OpenAPI document (schemathesis), on both
databases, with an admin key: no answer is a 5xx and every answer matches its documented schema.

Bounded and repeatable: a fixed number of examples per operation, derandomized (Hypothesis
draws from a fixed seed), no deadline (the machine is shared; wall-clock time is not asserted).
"""

from __future__ import annotations

import pytest
import schemathesis
from hypothesis import HealthCheck, given, settings
from schemathesis.checks import not_a_server_error
from schemathesis.specs.openapi.checks import response_schema_conformance

from app.main import create_app
from tests.factories import make_keys, make_panel, make_product, measurement

EXAMPLES_PER_OPERATION = 15


@pytest.fixture
def served(db):
    """The app over a store holding a product, a measured panel and a manual hold."""
    from fastapi.testclient import TestClient

    make_product(db)
    make_panel(db, "P1")
    keys = make_keys(db)
    app = create_app(db)
    with TestClient(app) as c:
        headers = keys.headers("admin")
        assert c.post("/api/v1/measurements", json=measurement("P1", 1, "A", (2.0,)),
                      headers=headers).status_code == 201
        make_panel(db, "P2")
        assert c.post("/api/v1/panels/P2/holds", json={"reason": "fuzz target"},
                      headers=headers).status_code == 201
    return app, headers


OPERATIONS = sorted((method.upper(), path) for path, ops in create_app().openapi()["paths"].items()
                    for method in ops)


@pytest.mark.parametrize("method,path", OPERATIONS, ids=[f"{m} {p}" for m, p in OPERATIONS])
def test_no_server_error_and_answers_match_the_schema(served, method, path):
    app, headers = served
    operation = schemathesis.openapi.from_asgi("/openapi.json", app)[path][method]

    @given(case=operation.as_strategy())
    @settings(max_examples=EXAMPLES_PER_OPERATION, deadline=None, derandomize=True,
              database=None, suppress_health_check=list(HealthCheck))
    def run(case):
        case.call_and_validate(headers=headers,
                               checks=[not_a_server_error, response_schema_conformance])

    run()
