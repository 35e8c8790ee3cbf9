"""The service as deployed: `linfer serve` (gunicorn, 2 workers) on 127.0.0.1, over real HTTP.

Only ``urllib.request`` talks to the server. Every request has a timeout, and every loop
is bounded in count and in time.
"""

from __future__ import annotations

import concurrent.futures
import json
import math
import os
import time
import urllib.error
import urllib.parse
import urllib.request
from dataclasses import dataclass
from email.message import Message
from pathlib import Path
from typing import Any, Iterable, Mapping

import pytest

from contract import check_http

from service.app import create_app

from ._server import OPENER, REPO, Server

pytestmark = pytest.mark.e2e

DATA = REPO / "client_examples" / "data"
TABLE_FILE = DATA / "warehouse_energy_table.json"
MATRIX_FILE = DATA / "warehouse_energy_matrix.json"
REQUEST_TIMEOUT = 10.0
PROBLEM_JSON = "application/problem+json"
# The generating model of the demo data (client_examples/data/README.md).
TRUE_COEFFICIENTS = {"intercept": 1200.0, "temp_c": 38.0, "door_openings": 2.1,
                     "pallets_received": 4.5}


@dataclass
class Answer:
    status: int
    headers: Message
    body: bytes
    seconds: float

    @property
    def content_type(self) -> str:
        return self.headers.get_content_type()

    def json(self) -> Any:
        return json.loads(self.body)


def call(url: str, method: str = "GET", data: bytes | Iterable[bytes] | None = None,
         headers: Mapping[str, str] | None = None,
         timeout: float = REQUEST_TIMEOUT) -> Answer:
    """One HTTP request with urllib; 4xx and 5xx answers are returned, not raised."""
    req = urllib.request.Request(url, data=data, method=method, headers=dict(headers or {}))
    start = time.monotonic()
    try:
        with OPENER.open(req, timeout=timeout) as resp:
            answer = Answer(resp.status, resp.headers, resp.read(), time.monotonic() - start)
    except urllib.error.HTTPError as err:
        with err:
            answer = Answer(err.code, err.headers, err.read(), time.monotonic() - start)
    # Every answer read over real HTTP is checked against openapi/linfer.yaml too.
    parts = urllib.parse.urlsplit(url)
    check_http(method, parts.path, answer.status, answer.headers.get("Content-Type", ""),
               answer.body, parts.query)
    return answer


def post_json(url: str, body: bytes, headers: Mapping[str, str] | None = None,
              timeout: float = REQUEST_TIMEOUT) -> Answer:
    return call(url, "POST", body, {"Content-Type": "application/json", **(headers or {})},
                timeout)


def assert_problem(answer: Answer, status: int) -> dict[str, Any]:
    """The answer is an RFC 9457 problem with the given status; return its document."""
    assert answer.status == status, answer.body[:500]
    assert answer.content_type == PROBLEM_JSON, answer.headers
    doc = answer.json()
    assert {"type", "title", "status", "detail", "errors"} <= doc.keys(), doc
    assert doc["status"] == status
    assert isinstance(doc["type"], str) and doc["type"]
    assert isinstance(doc["title"], str) and doc["title"]
    assert isinstance(doc["detail"], str) and doc["detail"]
    assert isinstance(doc["errors"], list)
    for e in doc["errors"]:
        assert set(e) >= {"pointer", "message"}, e
        assert e["pointer"] == "" or e["pointer"].startswith("/"), e
    assert answer.headers.get("X-Request-ID"), "every response carries X-Request-ID"
    return doc


def assert_close(a: Any, b: Any, where: str = "", rel: float = 1e-10,
                 abs_: float = 1e-12) -> None:
    """Same document structure, same strings/ints/bools, floats equal to ``rel``."""
    if isinstance(a, bool) or isinstance(b, bool) or a is None or b is None \
            or isinstance(a, str) or isinstance(b, str):
        assert a == b, f"{where or '/'}: {a!r} != {b!r}"
    elif isinstance(a, (int, float)) and isinstance(b, (int, float)):
        assert math.isclose(a, b, rel_tol=rel, abs_tol=abs_), f"{where}: {a!r} != {b!r}"
    elif isinstance(a, dict) and isinstance(b, dict):
        assert a.keys() == b.keys(), f"{where or '/'}: keys {sorted(a)} != {sorted(b)}"
        for k in a:
            assert_close(a[k], b[k], f"{where}/{k}", rel, abs_)
    elif isinstance(a, list) and isinstance(b, list):
        assert len(a) == len(b), f"{where}: {len(a)} items != {len(b)} items"
        for i, (x, y) in enumerate(zip(a, b)):
            assert_close(x, y, f"{where}/{i}", rel, abs_)
    else:
        raise AssertionError(f"{where or '/'}: {type(a).__name__} != {type(b).__name__}")


@pytest.fixture(scope="module")
def table_body() -> bytes:
    return TABLE_FILE.read_bytes()


@pytest.fixture(scope="module")
def matrix_body() -> bytes:
    return MATRIX_FILE.read_bytes()


@pytest.fixture
def in_process(monkeypatch: pytest.MonkeyPatch):
    """create_app().test_client() with the same (default) settings as the test servers."""
    for name in [n for n in os.environ if n.startswith("LINFER_")]:
        monkeypatch.delenv(name)
    return create_app().test_client()


# --- operations ------------------------------------------------------------------------

@pytest.mark.parametrize("path, expected", [("/healthz", {"status": "ok"}),
                                            ("/readyz", {"status": "ready"})])
def test_health_endpoints(base_url: str, path: str, expected: dict) -> None:
    answer = call(base_url + path)
    assert answer.status == 200
    assert answer.content_type == "application/json"
    assert answer.json() == expected
    assert answer.headers.get("X-Request-ID")


def test_request_id_is_echoed(base_url: str, table_body: bytes) -> None:
    answers = {
        "e2e-health-1": call(base_url + "/healthz", headers={"X-Request-ID": "e2e-health-1"}),
        "e2e-fit.2:abc": post_json(base_url + "/v1/fit", table_body,
                                   {"X-Request-ID": "e2e-fit.2:abc"}),
        "e2e-404": call(base_url + "/no/such/path", headers={"X-Request-ID": "e2e-404"}),
    }
    for sent, answer in answers.items():
        assert answer.status in (200, 404)
        assert answer.headers.get("X-Request-ID") == sent


def test_request_id_is_generated_when_absent_or_unusable(base_url: str) -> None:
    first = call(base_url + "/healthz").headers.get("X-Request-ID")
    second = call(base_url + "/healthz").headers.get("X-Request-ID")
    assert first and second and first != second
    unusable = "has spaces and ; semicolons"
    replaced = call(base_url + "/healthz", headers={"X-Request-ID": unusable})
    assert replaced.headers.get("X-Request-ID") not in (None, "", unusable)


# --- /v1/fit ---------------------------------------------------------------------------

def test_fit_table_and_matrix_layouts_give_the_same_numbers(
        base_url: str, table_body: bytes, matrix_body: bytes) -> None:
    table_answer = post_json(base_url + "/v1/fit", table_body)
    matrix_answer = post_json(base_url + "/v1/fit", matrix_body)
    for answer in (table_answer, matrix_answer):
        assert answer.status == 200, answer.body[:500]
        assert answer.content_type == "application/json"
    table_doc, matrix_doc = table_answer.json(), matrix_answer.json()

    # Coefficient names follow the table's own column order (the body as sent, not sorted).
    request = json.loads(table_body)
    predictors = [c for c in request["table"] if c != request["response_column"]]
    assert predictors == json.loads(matrix_body)["column_names"]
    assert [c["name"] for c in table_doc["coefficients"]] == ["intercept", *predictors]

    assert_close(table_doc, matrix_doc)

    assert table_doc["n_observations"] == 40
    assert table_doc["n_parameters"] == 4
    assert table_doc["residual_df"] == 36
    assert table_doc["conditioning"]["status"] == "ok"
    # The demo data come from a known model: every 95% interval holds its coefficient.
    for coef in table_doc["coefficients"]:
        (interval,) = coef["intervals"]
        assert interval["level"] == 0.95
        assert interval["lower"] < TRUE_COEFFICIENTS[coef["name"]] < interval["upper"], coef
        assert 0 <= coef["p_value"] < 1e-10


@pytest.mark.parametrize("data_file", [TABLE_FILE, MATRIX_FILE], ids=lambda p: p.stem)
def test_served_answer_equals_in_process_answer(base_url: str, in_process,
                                                data_file: Path) -> None:
    body = data_file.read_bytes()
    served = post_json(base_url + "/v1/fit", body)
    # The raw bytes, as over HTTP: the test client's json= would re-serialise with sorted
    # keys and so reorder the table's columns.
    local = in_process.post("/v1/fit", data=body, content_type="application/json")
    assert served.status == local.status_code == 200, served.body[:500]
    assert served.content_type == local.mimetype == "application/json"
    assert served.json() == local.get_json()


def test_invalid_matrix_value_is_a_422_problem_with_a_pointer(
        base_url: str, matrix_body: bytes) -> None:
    doc = json.loads(matrix_body)
    doc["design_matrix"][3][1] = "many"
    problem = assert_problem(post_json(base_url + "/v1/fit", json.dumps(doc).encode()), 422)
    assert "/design_matrix/3/1" in [e["pointer"] for e in problem["errors"]], problem


def test_invalid_table_value_is_a_422_problem_with_a_pointer(
        base_url: str, table_body: bytes) -> None:
    doc = json.loads(table_body)
    doc["table"]["temp_c"][5] = "warm"
    problem = assert_problem(post_json(base_url + "/v1/fit", json.dumps(doc).encode()), 422)
    assert "/table/temp_c/5" in [e["pointer"] for e in problem["errors"]], problem


def test_unknown_response_column_is_a_422_problem_with_a_pointer(
        base_url: str, table_body: bytes) -> None:
    doc = json.loads(table_body)
    doc["response_column"] = "kw"
    problem = assert_problem(post_json(base_url + "/v1/fit", json.dumps(doc).encode()), 422)
    assert "/response_column" in [e["pointer"] for e in problem["errors"]], problem


def test_malformed_json_is_a_400_problem(base_url: str) -> None:
    assert_problem(post_json(base_url + "/v1/fit", b'{"design_matrix": [[1, 2'), 400)


def test_text_plain_is_a_415_problem(base_url: str, matrix_body: bytes) -> None:
    answer = call(base_url + "/v1/fit", "POST", matrix_body, {"Content-Type": "text/plain"})
    assert_problem(answer, 415)


def test_unknown_path_is_a_404_problem(base_url: str) -> None:
    assert_problem(call(base_url + "/v1/no-such-endpoint"), 404)


def test_get_on_fit_is_a_405_problem(base_url: str) -> None:
    assert_problem(call(base_url + "/v1/fit"), 405)


def test_405_names_the_allowed_methods(base_url: str) -> None:
    # RFC 9110 section 15.5.6: a 405 response MUST carry an Allow header.
    answer = call(base_url + "/v1/fit")
    assert answer.status == 405
    allow = {m.strip().upper() for m in (answer.headers.get("Allow") or "").split(",")}
    assert "POST" in allow, f"Allow header: {answer.headers.get('Allow')!r}"


# --- body limit (a second server with LINFER_MAX_BODY_BYTES=1000) -----------------------

def test_body_over_the_limit_is_a_413_problem(small_body_server: Server,
                                              table_body: bytes) -> None:
    assert len(table_body) > 1000
    answer = post_json(small_body_server.base_url + "/v1/fit", table_body, timeout=10)
    problem = assert_problem(answer, 413)
    assert "1000" in problem["detail"]
    assert answer.seconds < 5


def test_announced_length_over_the_limit_is_refused_before_the_body(
        small_body_server: Server) -> None:
    # Content-Length says 1 MB but only 1 byte follows: the server must answer 413 from
    # the header, not wait for a body that never comes (the client timeout would fire).
    answer = post_json(small_body_server.base_url + "/v1/fit", iter([b"{"]),
                       {"Content-Length": str(1_000_000)}, timeout=10)
    assert_problem(answer, 413)
    assert answer.seconds < 5


def test_chunked_body_over_the_limit_is_a_413_problem(small_body_server: Server,
                                                      table_body: bytes) -> None:
    # No Content-Length (Transfer-Encoding: chunked): the limit still applies, as a 413.
    chunks = [table_body[i:i + 256] for i in range(0, len(table_body), 256)]
    answer = post_json(small_body_server.base_url + "/v1/fit", iter(chunks), timeout=10)
    assert_problem(answer, 413)


def test_body_under_the_limit_is_served(small_body_server: Server) -> None:
    body = b'{"design_matrix": [[1], [2], [3], [4]], "response": [1.0, 2.1, 2.9, 4.2]}'
    answer = post_json(small_body_server.base_url + "/v1/fit", body)
    assert answer.status == 200, answer.body[:500]
    assert answer.json()["n_observations"] == 4


# --- concurrency -----------------------------------------------------------------------

N_REQUESTS = 200
N_THREADS = 8
LOOP_SECONDS = 120.0


def test_concurrent_fits_all_answer_identically(base_url: str, table_body: bytes,
                                                in_process) -> None:
    expected = in_process.post("/v1/fit", data=table_body,
                               content_type="application/json").get_json()

    def one(i: int) -> tuple[int, int, str | None, Any]:
        answer = post_json(base_url + "/v1/fit", table_body, {"X-Request-ID": f"e2e-{i}"},
                           timeout=REQUEST_TIMEOUT)
        doc = answer.json() if answer.status == 200 else answer.body[:300]
        return i, answer.status, answer.headers.get("X-Request-ID"), doc

    pool = concurrent.futures.ThreadPoolExecutor(max_workers=N_THREADS)
    try:
        futures = [pool.submit(one, i) for i in range(N_REQUESTS)]
        done, not_done = concurrent.futures.wait(futures, timeout=LOOP_SECONDS)
    finally:
        pool.shutdown(wait=True, cancel_futures=True)  # each running request has a timeout
    assert not not_done, f"{len(not_done)} of {N_REQUESTS} requests unfinished after " \
                         f"{LOOP_SECONDS:.0f} s"

    failures = []
    for future in futures:
        i, status, request_id, doc = future.result()
        if status != 200:
            failures.append(f"request {i}: status {status}: {doc!r}")
        elif request_id != f"e2e-{i}":
            failures.append(f"request {i}: X-Request-ID {request_id!r}")
        elif doc != expected:
            failures.append(f"request {i}: numbers differ from the in-process answer")
    assert not failures, f"{len(failures)} of {N_REQUESTS} failed:\n" + "\n".join(failures[:10])
