"""Property-based tests of the service's API from its own ``/openapi.json`` (schemathesis):
generated requests never get a 5xx, and every response matches the schema. The number of
examples is bounded so the whole module runs in well under a minute."""

from __future__ import annotations

import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path

import pytest
import schemathesis
from hypothesis import HealthCheck, settings
from schemathesis.checks import negative_data_rejection, positive_data_acceptance

from geonorm.service import create_app

_DATA = Path(tempfile.mkdtemp(prefix="geonorm-schema-"))
app = create_app(_DATA, rate=0)
TOKEN = app.state.service.store.add_token("schema", "admin")
schema = schemathesis.openapi.from_asgi("/openapi.json", app)
# Values a schema cannot judge (an ISO code that does not exist, a column the file lacks)
# are refused with 422 by design, so "schema-valid data is accepted" is not a property here.
EXCLUDED = [positive_data_acceptance]
# Every part of a multipart form is text: a "column" made of JSON is a (strange) column name.
FORM_EXCLUDED = [*EXCLUDED, negative_data_rejection]


def _excluded(case) -> list:
    return FORM_EXCLUDED if case.operation.path == "/v1/jobs" else EXCLUDED


@pytest.fixture(scope="module", autouse=True)
def _service() -> Iterator[None]:
    app.state.service.start()  # the lifespan starts it too; starting twice is harmless
    yield
    app.state.service.stop()
    shutil.rmtree(_DATA, ignore_errors=True)


@schema.parametrize()
@settings(
    max_examples=25,
    deadline=None,
    suppress_health_check=list(HealthCheck),
    database=None,
)
def test_api_matches_its_schema(case):
    case.call_and_validate(
        headers={"Authorization": f"Bearer {TOKEN}"}, excluded_checks=_excluded(case)
    )


@schema.parametrize()
@settings(max_examples=5, deadline=None, suppress_health_check=list(HealthCheck), database=None)
def test_api_without_a_token_matches_its_schema(case):
    case.call_and_validate(excluded_checks=_excluded(case))
