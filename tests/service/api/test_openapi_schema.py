"""The service against its own OpenAPI schema: schemathesis generates requests for every operation,
valid ones and broken ones, and every answer must be a non-5xx that matches what the schema declares."""

import pytest
import schemathesis
from hypothesis import HealthCheck, given, settings
from hypothesis.errors import Unsatisfiable
from schemathesis import GenerationMode
from schemathesis.checks import (
    content_type_conformance,
    not_a_server_error,
    response_headers_conformance,
    response_schema_conformance,
    status_code_conformance,
)

CHECKS = [
    not_a_server_error,
    status_code_conformance,
    content_type_conformance,
    response_headers_conformance,
    response_schema_conformance,
]
# The service under test has no worker, so /readyz rightly answers its declared 503; the other checks still apply.
# (No worker also means no webhook is ever called, whatever URL the generated requests registered.)
CHECKS_BY_OPERATION = {"GET /readyz": [check for check in CHECKS if check is not not_a_server_error]}
EXAMPLES_PER_OPERATION_AND_MODE = 10


@pytest.fixture(scope="module")
def operations(idle_service) -> list:
    schema = schemathesis.openapi.from_url(f"{idle_service.base_url}/openapi.json")
    return [result.ok() for result in schema.get_all_operations()]


def _failures_of(operation, mode: GenerationMode, headers: dict[str, str]) -> list[str]:
    failures: list[str] = []

    @given(case=operation.as_strategy(generation_mode=mode))
    @settings(
        max_examples=EXAMPLES_PER_OPERATION_AND_MODE,
        deadline=None,
        database=None,
        derandomize=True,
        suppress_health_check=list(HealthCheck),
    )
    def exercise(case) -> None:
        try:
            case.call_and_validate(headers=headers, checks=CHECKS_BY_OPERATION.get(operation.label, CHECKS))
        except (Exception, BaseExceptionGroup) as failure:
            failures.append(f"{operation.label} ({mode.value}): {failure}"[:2000])

    try:
        exercise()
    except Unsatisfiable:
        pass  # no broken request exists for an operation without parameters or body
    return failures


def test_generated_requests_get_no_5xx_and_answers_that_match_the_schema(idle_service, operations):
    headers = {"Authorization": f"Bearer {idle_service.admin_token}"}
    assert len(operations) >= 20
    failures = [
        failure
        for operation in operations
        for mode in (GenerationMode.POSITIVE, GenerationMode.NEGATIVE)
        for failure in _failures_of(operation, mode, headers)
    ]
    assert failures == [], "\n\n".join(failures[:10])
