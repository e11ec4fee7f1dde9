"""Property-based tests of the read endpoints against our own OpenAPI document, with schemathesis.

schemathesis (a general-purpose reference tool for OpenAPI 3) loads the document the app serves,
validating it against the OpenAPI specification's own schema, generates requests from it with
hypothesis, and checks every answer against the document: no server error, a documented status, a
documented content type, a body that fits the documented schema. Valid requests (positive mode) must be
answered as documented; invalid ones (negative mode) must be refused as documented, never with a 500.
"""

from __future__ import annotations

import pytest
import schemathesis
from hypothesis import HealthCheck, given, settings

from linkfold.api import create_app
from linkfold.store import make_engine
from linkfold.store.tokens import create_token
from test_api_support import build_world, settings_for


@pytest.fixture(scope="module")
def world(tmp_path_factory):
    from linkfold.store import upgrade

    tmp = tmp_path_factory.mktemp("schema-world")
    url = f"sqlite:///{tmp / 'registry.db'}"
    engine = make_engine(url)
    upgrade(engine)
    build_world(engine, tmp, settings_for(url))
    token = create_token(engine, scope="read", note="schemathesis").secret
    app = create_app(settings_for(url), engine=engine)
    # The refusals an invalid request may get: schemathesis' default list for its negative-data check, plus
    # 413 Content Too Large (RFC 9110 §15.5.14), our answer to a batch over api_max_batch (the document's
    # maxItems), which that default list leaves out.
    refusals = ["400", "401", "403", "404", "405", "406", "409", "413", "415", "422", "428", "429", "5xx"]
    config = schemathesis.config.SchemathesisConfig.from_dict(
        {"checks": {"negative_data_rejection": {"expected-statuses": refusals}}})
    yield {"schema": schemathesis.openapi.from_asgi("/v1/openapi.json", app, config=config), "token": token}
    engine.dispose()


def _operations(schema, **selector):
    return [result.ok() for result in schema.include(**selector).get_all_operations()]


READS = ["GET /v1/health", "GET /v1/lookup", "GET /v1/datasets", "GET /v1/datasets/{name}", "GET /v1/runs",
         "GET /v1/runs/{run_id}", "GET /v1/clusters", "GET /v1/articles/{cluster_id}",
         "GET /v1/stories/{cluster_id}", "GET /v1/ids/{cluster_id}/history", "GET /v1/decisions",
         "POST /v1/lookup", "GET /v1/outlets", "GET /v1/outlets/report", "GET /v1/network",
         "GET /v1/exposure/outlets", "GET /v1/exposure", "GET /v1/corpus",
         "GET /v1/compare"]  # with a read token, the unit-level rows are a documented 403


def test_the_document_lists_every_read_endpoint(world):
    labels = {op.label for op in _operations(world["schema"], method="GET")}
    labels |= {op.label for op in _operations(world["schema"], method="POST", path="/v1/lookup")}
    assert labels == set(READS)


# Operations that take no input at all have no invalid request to generate.
NO_INPUT = {"GET /v1/health", "GET /v1/datasets"}
CASES = [(label, schemathesis.GenerationMode.POSITIVE) for label in READS] + \
        [(label, schemathesis.GenerationMode.NEGATIVE) for label in READS if label not in NO_INPUT]


@pytest.mark.parametrize(("label", "mode"), CASES, ids=[f"{m.value}-{label}" for label, m in CASES])
def test_read_endpoint_keeps_to_the_document(world, label, mode):
    method, path = label.split(" ", 1)
    [operation] = [op for op in _operations(world["schema"], method=method, path=path) if op.label == label]
    headers = {"Authorization": f"Bearer {world['token']}"}

    @given(case=operation.as_strategy(generation_mode=mode))
    @settings(max_examples=25, deadline=None, suppress_health_check=list(HealthCheck), database=None)
    def check(case):
        case.call_and_validate(headers=headers)

    check()
