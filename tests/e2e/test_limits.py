"""Every limit, over real HTTP: a 413 or 422 problem that names the limit and its value.

One server runs with every limit small (the LINFER_* variables below). Each case sends
a request just over one limit and checks the status, the problem document, the pointer
and that one message names both the variable and its value; a request exactly at the
limit is served.
"""

from __future__ import annotations

import contextlib
import http.client
import json
from typing import Any

import numpy as np
import pytest

from contract import check_http

from .test_load import PROBLEM_JSON, Reply, post

pytestmark = pytest.mark.e2e

LIMITS = {"LINFER_MAX_BODY_BYTES": 20_000, "LINFER_MAX_ROWS": 50, "LINFER_MAX_COLUMNS": 6,
          "LINFER_MAX_CELLS": 200, "LINFER_MAX_HYPOTHESES": 2, "LINFER_MAX_LEVELS": 3}


@pytest.fixture(scope="module")
def limited(start_server) -> str:
    server = start_server(env={k: str(v) for k, v in LIMITS.items()}, label="limits")
    return server.base_url


def _matrix(n: int, k: int, **options: Any) -> dict[str, Any]:
    rng = np.random.default_rng(n * 100 + k)
    x = rng.normal(size=(n, k))
    return {"design_matrix": x.round(6).tolist(),
            "response": (x.sum(axis=1) + rng.normal(size=n)).round(6).tolist(), **options}


def _send(base_url: str, doc: dict[str, Any], path: str = "/v1/fit") -> Reply:
    reply = post(base_url, path, json.dumps(doc).encode())
    check_http("POST", path, reply.status, reply.content_type, reply.body)
    return reply


def _assert_limit(reply: Reply, status: int, variable: str, pointer: str) -> dict:
    """A problem with ``status`` whose errors name ``variable`` and its value at ``pointer``."""
    assert reply.status == status, reply.body[:500]
    assert reply.content_type == PROBLEM_JSON
    doc = reply.json()
    assert doc["status"] == status and {"type", "title", "detail", "errors"} <= doc.keys()
    value = str(LIMITS[variable])
    texts = [doc["detail"]] + [e["message"] for e in doc["errors"]]
    assert any(variable in t and value in t for t in texts), (variable, value, texts)
    if pointer is not None:
        named = [e["pointer"] for e in doc["errors"] if variable in e["message"]]
        assert pointer in named, (pointer, doc["errors"])
    return doc


# --- body bytes (413) ------------------------------------------------------------------

def test_body_over_the_byte_limit_is_a_413_problem(limited: str) -> None:
    doc = _matrix(50, 1)
    doc["column_names"] = ["x" * 19_000]  # past 20,000 bytes with a valid rest
    body = json.dumps(doc).encode()
    assert len(body) > LIMITS["LINFER_MAX_BODY_BYTES"]
    _assert_limit(post(limited, "/v1/fit", body), 413, "LINFER_MAX_BODY_BYTES", None)


def test_a_python_client_sending_a_large_body_sees_the_413(limited: str) -> None:
    # A body well past the limit, sent whole by the project's client (urllib): the
    # server reads and drops it while it arrives, so the caller gets the problem
    # document, not a broken pipe.
    from service.client import ApiError, Client

    n = 200_000  # about 3 MB of JSON, 150 times the limit
    with pytest.raises(ApiError) as caught:
        Client(limited, retries=0, timeout=30).fit(
            design_matrix=[[float(i % 7)] for i in range(n)],
            response=[float(i % 11) for i in range(n)])
    assert caught.value.status == 413
    assert "LINFER_MAX_BODY_BYTES" in caught.value.problem["detail"]


def test_chunked_body_over_the_byte_limit_is_a_413_problem(limited: str) -> None:
    # No Content-Length: the server must count what it reads, not trust a header.
    chunks = [b'{"design_matrix": [', *([b"[1.0], "] * 4000), b'[1.0]], "response": [1]}']
    host, port = limited.rsplit("/", 1)[1].split(":")
    conn = http.client.HTTPConnection(host, int(port), timeout=10.0)
    with contextlib.closing(conn):
        conn.request("POST", "/v1/fit", body=iter(chunks), encode_chunked=True,
                     headers={"Content-Type": "application/json"})
        resp = conn.getresponse()
        reply = Reply(resp.status, (resp.getheader("Content-Type") or "").split(";")[0],
                      resp.read())
    _assert_limit(reply, 413, "LINFER_MAX_BODY_BYTES", None)


# --- rows, columns, cells (422) --------------------------------------------------------

@pytest.mark.parametrize("n, k, variable", [
    (51, 1, "LINFER_MAX_ROWS"),      # 51 rows; 2 columns; 102 cells
    (10, 6, "LINFER_MAX_COLUMNS"),   # 6 predictors + intercept = 7 columns; 70 cells
    (41, 4, "LINFER_MAX_CELLS"),     # 41 x 5 = 205 cells; rows and columns within
])
def test_design_over_a_size_limit_is_a_422_problem(limited: str, n: int, k: int,
                                                   variable: str) -> None:
    doc = _assert_limit(_send(limited, _matrix(n, k)), 422, variable, "/design_matrix")
    assert len(doc["errors"]) == 1, doc["errors"]  # only the limit that was passed


@pytest.mark.parametrize("n, k", [(50, 1), (10, 5), (40, 4)])
def test_design_at_the_size_limits_is_served(limited: str, n: int, k: int) -> None:
    reply = _send(limited, _matrix(n, k))
    assert reply.status == 200, reply.body[:300]
    assert reply.json()["n_observations"] == n


def test_every_size_limit_passed_is_named_at_once(limited: str) -> None:
    doc = _assert_limit(_send(limited, _matrix(60, 4)), 422, "LINFER_MAX_ROWS",
                        "/design_matrix")
    messages = " ".join(e["message"] for e in doc["errors"])
    assert "LINFER_MAX_CELLS" in messages and "300" in messages, doc["errors"]


def test_table_over_the_column_limit_is_a_422_problem(limited: str) -> None:
    table = {f"c{j}": [float((i * (j + 3)) % 7) for i in range(10)] for j in range(6)}
    table["y"] = [float(i) for i in range(10)]
    _assert_limit(_send(limited, {"table": table, "response_column": "y"}), 422,
                  "LINFER_MAX_COLUMNS", "/table")


def test_terms_that_expand_past_the_column_limit_are_a_422_problem(limited: str) -> None:
    # One categorical column of 8 levels: 7 indicators + intercept = 8 design columns.
    table = {"shift": [f"s{i % 8}" for i in range(24)], "y": [float(i) for i in range(24)]}
    doc = {"table": table, "response_column": "y", "terms": [{"categorical": "shift"}]}
    _assert_limit(_send(limited, doc), 422, "LINFER_MAX_COLUMNS", "/terms")


# --- hypotheses, restrictions, levels (422) --------------------------------------------

def _hypothesis(names: list[str]) -> dict[str, Any]:
    return {"restrictions": [{"coefficients": {n: 1}, "equals": 0} for n in names]}


def test_too_many_hypotheses_are_a_422_problem(limited: str) -> None:
    doc = _matrix(20, 2, hypotheses=[_hypothesis(["x1"])] * 3)
    _assert_limit(_send(limited, doc), 422, "LINFER_MAX_HYPOTHESES", "/hypotheses")


def test_hypotheses_at_the_limit_are_served(limited: str) -> None:
    reply = _send(limited, _matrix(20, 2, hypotheses=[_hypothesis(["x1"])] * 2))
    assert reply.status == 200, reply.body[:300]
    assert len(reply.json()["hypotheses"]) == 2


def test_a_hypothesis_with_too_many_restrictions_is_a_422_problem(limited: str) -> None:
    doc = _matrix(20, 2, hypotheses=[_hypothesis(["x1"] * 7)])
    _assert_limit(_send(limited, doc), 422, "LINFER_MAX_COLUMNS",
                  "/hypotheses/0/restrictions")


def test_too_many_levels_are_a_422_problem(limited: str) -> None:
    doc = _matrix(20, 2, levels=[0.5, 0.8, 0.9, 0.95])
    _assert_limit(_send(limited, doc), 422, "LINFER_MAX_LEVELS", "/levels")


# --- follow-up endpoints ---------------------------------------------------------------

@pytest.fixture(scope="module")
def model(limited: str) -> dict[str, Any]:
    reply = _send(limited, _matrix(30, 2, return_model=True))
    assert reply.status == 200, reply.body[:300]
    return reply.json()["model"]


def test_too_many_new_rows_are_a_422_problem(limited: str, model: dict) -> None:
    doc = {"model": model, "new_rows": [[0.5, 0.5]] * 51}
    _assert_limit(_send(limited, doc, "/v1/predict"), 422, "LINFER_MAX_ROWS", "/new_rows")


def test_too_many_hypotheses_on_a_model_are_a_422_problem(limited: str, model: dict) -> None:
    doc = {"model": model, "hypotheses": [_hypothesis(["x1"])] * 3}
    _assert_limit(_send(limited, doc, "/v1/test"), 422, "LINFER_MAX_HYPOTHESES",
                  "/hypotheses")


# --- the CSV body (text/csv, options in the query) --------------------------------------

def _csv(rows: int, predictors: int) -> bytes:
    header = ",".join([f"c{j}" for j in range(predictors)] + ["y"])
    lines = [",".join(str((i * (j + 2)) % 11 + 0.5 * j) for j in range(predictors + 1))
             for i in range(rows)]
    return ("\n".join([header, *lines]) + "\n").encode()


@pytest.mark.parametrize("body, status, variable, where", [
    (_csv(51, 1), 422, "LINFER_MAX_ROWS", "/table"),
    (_csv(10, 6), 422, "LINFER_MAX_COLUMNS", "/table"),
    (_csv(4000, 1), 413, "LINFER_MAX_BODY_BYTES", None),  # ~32 kB
])
def test_csv_body_over_a_limit_is_a_problem(limited: str, body: bytes, status: int,
                                            variable: str, where: str | None) -> None:
    reply = post(limited, "/v1/fit?response_column=y", body, content_type="text/csv")
    _assert_limit(reply, status, variable, where)
