"""Requests generated from the served OpenAPI document by schemathesis (a general reference tool for API
testing, schemathesis.readthedocs.io): valid and invalid bodies for every operation, answered without a 5xx
and as the document describes them (status codes, content type, response schemas).

Bounded: a few dozen examples per operation against a real uvicorn server on loopback.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest
import schemathesis
from hypothesis import HealthCheck, given, settings
from schemathesis.checks import FailureGroup, not_a_server_error
from schemathesis.specs.openapi.checks import (
    content_type_conformance,
    response_schema_conformance,
    status_code_conformance,
)

from tests.service_support import serving

OPERATIONS = ["POST /v1/route", "POST /v1/corrections", "GET /v1/health", "GET /v1/model", "GET /openapi.json",
              "GET /metrics"]


@pytest.fixture(scope="module")
def live_schema(base_dir: Path, tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[str, Any]]:
    with serving(base_dir, tmp_path_factory.mktemp("schema")) as (url, _app, _root):
        doc = httpx.get(f"{url}/openapi.json", timeout=30).json()  # as served, with this workspace's fields
        yield url, schemathesis.openapi.from_dict(doc)


# schemathesis' own pytest decorators do not run under this pytest (9), so its strategies are driven here
@pytest.mark.parametrize("label", OPERATIONS)
def test_the_service_answers_as_its_document_says(live_schema: tuple[str, Any], label: str) -> None:
    url, schema = live_schema
    [operation] = [r.ok() for r in schema.get_all_operations() if r.ok().label == label]
    checks = [not_a_server_error, status_code_conformance, content_type_conformance, response_schema_conformance]

    @given(case=operation.as_strategy())
    @settings(max_examples=25, deadline=None, database=None, suppress_health_check=list(HealthCheck))
    def run(case: Any) -> None:
        case.call_and_validate(base_url=url, checks=checks)

    run()


def test_the_checks_can_fail() -> None:
    """Self-check: the same checks flag a server that answers 500 (a check that cannot fail proves nothing)."""
    from starlette.applications import Starlette
    from starlette.responses import JSONResponse
    from starlette.routing import Route

    from tests.service_support import running

    async def broken(request: Any) -> JSONResponse:
        return JSONResponse({"error": "boom", "field": None}, status_code=500)

    doc = {"openapi": "3.1.0", "info": {"title": "broken", "version": "1"},
           "paths": {"/v1/health": {"get": {"responses": {"200": {"description": "up"}}}}}}
    with running(Starlette(routes=[Route("/v1/health", broken)])) as url:
        [operation] = [r.ok() for r in schemathesis.openapi.from_dict(doc).get_all_operations()]
        caught: list[BaseException] = []

        @given(case=operation.as_strategy())
        @settings(max_examples=1, deadline=None, database=None)
        def run(case: Any) -> None:
            with pytest.raises(FailureGroup) as info:
                case.call_and_validate(base_url=url, checks=[not_a_server_error])
            caught.extend(info.value.exceptions)

        run()
        assert caught and all(type(e).__name__ == "ServerError" for e in caught)
