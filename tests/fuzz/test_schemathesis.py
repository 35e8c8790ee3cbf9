"""Schema-driven fuzzing of the POST endpoints with schemathesis, against a real gunicorn server.

``openapi/linfer.yaml`` (the contract) is loaded from the repository; schemathesis
generates requests for POST /v1/fit, /v1/predict and /v1/test from it: the schema's
examples, the coverage phase's boundary cases, and Hypothesis fuzzing, both bodies
that match the schema (positive) and bodies that break it (negative). Each answer is
checked:

- no 5xx (``not_a_server_error``);
- the status code is one the contract documents for the operation;
- the content type is one the contract documents for that status;
- the body matches the documented schema for that status and content type;
- every 4xx is ``application/problem+json`` with the problem fields (RFC 9457).

Bounded: at most MAX_EXAMPLES generated examples per operation, no Hypothesis
deadline (a fit may take tens of milliseconds on a busy machine), a 30 s timeout per
request, and a hard timeout for the whole test. The server is ``linfer serve`` with 2
workers on a free 127.0.0.1 port, started here and stopped at the end of the module.

Runs in the normal suite (marked e2e like the other tests that start a server); it
is skipped with the reason when schemathesis is not installed (``pip install
schemathesis``). A failure report from schemathesis gives the exact request
(a curl command line) that reproduces it.
"""

from __future__ import annotations

import json
from typing import Iterator

import pytest

schemathesis = pytest.importorskip("schemathesis", reason="pip install schemathesis")

from hypothesis import HealthCheck, settings  # noqa: E402  (after the import check)

from e2e._server import REPO, START_ATTEMPTS, Server, start_once  # noqa: E402

pytestmark = pytest.mark.e2e

CONTRACT = REPO / "openapi" / "linfer.yaml"
OPERATIONS = ["/v1/fit", "/v1/predict", "/v1/test"]
MAX_EXAMPLES = 60
REQUEST_TIMEOUT = 30
WHOLE_TEST_SECONDS = 150   # a hard stop; the run takes well under 90 s
PROBLEM_FIELDS = {"type", "title", "status", "detail", "errors"}


@pytest.fixture(scope="module")
def fuzz_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Server]:
    tmp = tmp_path_factory.mktemp("fuzz-server")
    failures = []
    for _ in range(START_ATTEMPTS):
        result = start_once(tmp, None, "fuzz")
        if isinstance(result, Server):
            break
        failures.append(result)
    else:
        pytest.fail("linfer serve did not start:\n" + "\n\n".join(failures), pytrace=False)
    try:
        yield result
    finally:
        result.stop()


@pytest.fixture(scope="module")
def linfer_contract(fuzz_server: Server):
    schema = schemathesis.openapi.from_path(CONTRACT)
    schema.config.update(base_url=fuzz_server.base_url, request_timeout=REQUEST_TIMEOUT)
    schema.config.generation.update(max_examples=MAX_EXAMPLES,
                                    modes=[schemathesis.GenerationMode.POSITIVE,
                                           schemathesis.GenerationMode.NEGATIVE])
    return schema


contract = schemathesis.pytest.from_fixture("linfer_contract").include(method="POST",
                                                                        path=OPERATIONS)


@schemathesis.check
def four_xx_is_a_problem(ctx, response, case) -> None:
    """Every 4xx answer is an RFC 9457 problem document (application/problem+json)."""
    if not 400 <= response.status_code < 500:
        return None
    media_type = (response.headers.get("content-type") or [""])[0].split(";")[0].strip()
    if media_type != "application/problem+json":
        raise AssertionError(f"{response.status_code} answered as {media_type or 'no type'}, "
                             "not application/problem+json")
    document = json.loads(response.content)
    missing = PROBLEM_FIELDS - set(document)
    if missing:
        raise AssertionError(f"the problem document lacks {sorted(missing)}")
    if document["status"] != response.status_code:
        raise AssertionError(f"problem status {document['status']} != HTTP "
                             f"{response.status_code}")
    return None


CHECKS = [
    schemathesis.checks.not_a_server_error,
    schemathesis.checks.status_code_conformance,
    schemathesis.checks.content_type_conformance,
    schemathesis.checks.response_schema_conformance,
    four_xx_is_a_problem,
]


@pytest.mark.timeout(WHOLE_TEST_SECONDS)
@contract.parametrize()
@settings(max_examples=MAX_EXAMPLES, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much,
                                 HealthCheck.data_too_large])
def test_post_endpoints_keep_the_contract(case) -> None:
    response = case.call(timeout=REQUEST_TIMEOUT)
    case.validate_response(response, checks=CHECKS)
