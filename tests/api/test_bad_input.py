"""Every kind of bad input to /v1/fit gets an RFC 9457 problem whose pointers resolve.

Each case is (payload, status, pointer, message fragment). ``payload`` is a JSON
document (posted with ``json.dumps``, so key order is the caller's) or ``bytes``
posted as they are. ``pointer`` is the RFC 6901 pointer one of the ``errors`` must
carry (None for the 400 and 415 answers, which have no document to point into), and
the fragment must appear in that error's message (or in ``detail`` when ``pointer``
is None).

The app here runs with small limits so that the limit cases stay small.
"""

from __future__ import annotations

import json
import re

import pytest

from pointers import resolve

from service.app import create_app

PROBLEM = "application/problem+json"
LIMITS = {"max_rows": 30, "max_columns": 4, "max_cells": 100, "max_levels": 3}

X = [[1.0, 2.0], [2.0, 3.0], [3.0, 5.0], [4.0, 1.0], [5.0, 4.0]]
Y = [1.0, 2.0, 3.0, 4.0, 6.0]
TABLE = {"a": [1.0, 2.0, 3.0, 4.0, 5.0], "b": [2.0, 3.0, 5.0, 1.0, 4.0],
         "y": [1.0, 2.0, 3.0, 4.0, 6.0]}


def matrix(**changes):
    """A valid design_matrix body with fields replaced (a value of ... removes the field)."""
    body = {"design_matrix": [list(r) for r in X], "response": list(Y)}
    body.update(changes)
    return {k: v for k, v in body.items() if v is not ...}


def table(columns=None, **changes):
    """A valid table body with columns and fields replaced."""
    cols = {k: list(v) for k, v in TABLE.items()}
    cols.update(columns or {})
    body = {"table": {k: v for k, v in cols.items() if v is not ...}, "response_column": "y"}
    body.update(changes)
    return {k: v for k, v in body.items() if v is not ...}


def with_cell(rows, i, j, value):
    out = [list(r) for r in rows]
    out[i][j] = value
    return out


def with_item(values, i, value):
    out = list(values)
    out[i] = value
    return out


def rows(n, k):
    return [[float((i * (j + 2)) % 7 + i * 0.5 + j) for j in range(k)] for i in range(n)]


CASES = [
    # --- not JSON, wrong type of body --------------------------------------------------
    pytest.param(b"{\"design_matrix\": [[1, 2]", 400, None, "not valid JSON", id="truncated-json"),
    pytest.param(b"design_matrix=1", 400, None, "not valid JSON", id="not-json"),
    pytest.param(b"", 400, None, "not valid JSON", id="empty-body"),
    pytest.param(b"{\"design_matrix\": [[1e999], [2], [3]], \"response\": [1, 2, 3]}", 400, None,
                 "not valid JSON", id="number-too-large-1e999"),
    pytest.param(b"{\"design_matrix\": [[NaN], [2], [3]], \"response\": [1, 2, 3]}", 400, None,
                 "not valid JSON", id="nan-literal"),
    pytest.param(("text/plain", json.dumps(matrix()).encode()), 415, None, "application/json",
                 id="wrong-content-type"),
    pytest.param(("application/xml", b"<fit/>"), 415, None, "application/json",
                 id="xml-content-type"),
    pytest.param([1, 2, 3], 422, "", "JSON object", id="body-is-a-list"),
    pytest.param("fit please", 422, "", "JSON object", id="body-is-a-string"),
    pytest.param(None, 422, "", "JSON object", id="body-is-null"),
    # --- envelope ----------------------------------------------------------------------
    pytest.param(matrix(colour="red"), 422, "/colour", "not a field", id="unknown-field"),
    pytest.param(matrix(table=TABLE, response_column="y"), 422, "/table", "not both",
                 id="both-layouts"),
    pytest.param({"intercept": True}, 422, "", "design_matrix and response, or as table",
                 id="neither-layout"),
    pytest.param({}, 422, "", "design_matrix and response", id="empty-object"),
    # A pointer must resolve (RFC 6901): an absent member is blamed on the object that
    # lacks it, and the message names the member.
    pytest.param(matrix(response=...), 422, "", "response", id="matrix-without-response"),
    pytest.param(matrix(design_matrix=...), 422, "", "design_matrix",
                 id="response-without-matrix"),
    pytest.param(table(response_column=...), 422, "", "response_column",
                 id="table-without-response-column"),
    pytest.param(matrix(predictor_columns=["a"]), 422, "/predictor_columns", "table layout",
                 id="predictor-columns-with-matrix"),
    pytest.param(table(column_names=["a", "b"]), 422, "/column_names", "design_matrix layout",
                 id="column-names-with-table"),
    pytest.param(matrix(weights="w"), 422, "/weights", "table layout",
                 id="weights-name-with-matrix"),
    pytest.param({"table": [[1, 2]], "response_column": "y"}, 422, "/table", "mapping",
                 id="table-not-an-object"),
    pytest.param(matrix(column_names=["a", 7]), 422, "/column_names/1", "string",
                 id="column-name-not-a-string"),
    pytest.param(matrix(column_names=["", "b"]), 422, "/column_names/0", "Length",
                 id="column-name-empty"),
    # --- shape of the bulk numbers -----------------------------------------------------
    pytest.param(matrix(design_matrix=[[1.0, 2.0], [2.0], [3.0, 5.0], [4.0, 1.0], [5.0, 4.0]]),
                 422, "/design_matrix/1", "has 1 values; row 0 has 2", id="ragged-rows"),
    pytest.param(matrix(design_matrix=[[1.0, 2.0], [2.0, 3.0], [3.0, 5.0], [4.0, 1.0, 9.0],
                                       [5.0, 4.0]]),
                 422, "/design_matrix/3", "has 3 values; row 0 has 2", id="ragged-long-row"),
    pytest.param(matrix(design_matrix=[[1.0, 2.0], 3.0, [3.0, 5.0], [4.0, 1.0], [5.0, 4.0]]),
                 422, "/design_matrix/1", "list", id="row-not-a-list"),
    pytest.param(matrix(design_matrix=[1.0, 2.0, 3.0, 4.0, 5.0]), 422, "/design_matrix",
                 "list of rows", id="matrix-is-flat"),
    pytest.param(matrix(design_matrix=[], response=[]), 422, "/design_matrix", "empty",
                 id="matrix-empty"),
    pytest.param(matrix(response=5.0), 422, "/response", "list", id="response-not-a-list"),
    pytest.param(matrix(response=[[1.0], [2.0], [3.0], [4.0], [6.0]]), 422, "/response",
                 "flat list", id="response-is-a-matrix"),
    pytest.param(table({"a": 3.0}), 422, "/table/a", "list", id="table-column-not-a-list"),
    # --- non-numbers among the numbers -------------------------------------------------
    pytest.param(matrix(design_matrix=with_cell(X, 0, 1, "2.0")), 422, "/design_matrix/0/1",
                 "not str", id="string-in-matrix"),
    pytest.param(matrix(response=with_item(Y, 2, "3")), 422, "/response/2", "not str",
                 id="string-in-response"),
    pytest.param(table({"b": with_item(TABLE["b"], 4, "four")}), 422, "/table/b/4", "not str",
                 id="string-in-table"),
    pytest.param(matrix(design_matrix=with_cell(X, 2, 0, [3.0])), 422, "/design_matrix/2/0",
                 "number", id="nested-list-in-matrix"),
    pytest.param(matrix(response=with_item(Y, 1, [2.0])), 422, "/response/1", "number",
                 id="nested-list-in-response"),
    pytest.param(matrix(response=with_item(Y, 1, {"v": 2.0})), 422, "/response/1", "number",
                 id="object-in-response"),
    pytest.param(table({"a": with_item(TABLE["a"], 3, [4.0])}), 422, "/table/a/3", "number",
                 id="nested-list-in-table"),
    pytest.param(matrix(design_matrix=[[True, False]] * 5), 422, "/design_matrix", "boolean",
                 id="all-booleans-in-matrix"),
    pytest.param(matrix(design_matrix=with_cell(X, 0, 1, True)), 422, "/design_matrix/0/1",
                 "boolean", id="boolean-among-numbers-in-matrix"),
    pytest.param(matrix(response=with_item(Y, 3, False)), 422, "/response/3", "boolean",
                 id="boolean-among-numbers-in-response"),
    pytest.param(table({"a": with_item(TABLE["a"], 1, True)}), 422, "/table/a/1", "boolean",
                 id="boolean-among-numbers-in-table"),
    pytest.param(matrix(weights=[1.0, True, 1.0, 2.0, 1.0]), 422, "/weights/1", "boolean",
                 id="boolean-among-weights"),
    # --- missing values ----------------------------------------------------------------
    pytest.param(matrix(design_matrix=with_cell(X, 3, 1, None)), 422, "/design_matrix/3/1",
                 "missing", id="null-in-matrix-missing-reject"),
    pytest.param(matrix(response=with_item(Y, 0, None)), 422, "/response/0", "missing",
                 id="null-in-response-missing-reject"),
    pytest.param(table({"b": with_item(TABLE["b"], 2, None)}, missing="reject"), 422,
                 "/table/b/2", "drop_rows", id="null-in-table-missing-reject"),
    pytest.param(matrix(weights=[1.0, None, 1.0, 1.0, 1.0]), 422, "/weights/1", "missing",
                 id="null-in-weights-missing-reject"),
    # --- lengths and names -------------------------------------------------------------
    pytest.param(matrix(design_matrix=rows(20, 1), response=[float(i) for i in range(18)]),
                 422, "/response", "response has 18 values, design_matrix has 20 rows",
                 id="response-length-mismatch"),
    pytest.param(matrix(column_names=["a", "a"]), 422, "/column_names/1", "repeats 'a'",
                 id="duplicate-column-names"),
    pytest.param(matrix(column_names=["a"]), 422, "/column_names",
                 "has 1 names for 2 design_matrix columns", id="column-names-too-few"),
    pytest.param(matrix(column_names=["a", "b", "c"]), 422, "/column_names",
                 "has 3 names for 2", id="column-names-too-many"),
    pytest.param(matrix(column_names=["intercept", "b"]), 422, "/column_names/0", "'intercept'",
                 id="intercept-as-column-name"),
    pytest.param(table({"intercept": TABLE["a"], "a": ...}), 422, "/table/intercept",
                 "'intercept'", id="intercept-as-table-column"),
    pytest.param(table(response_column="kwh"), 422, "/response_column", "names no column",
                 id="response-column-unknown"),
    pytest.param(table(predictor_columns=["a", "q"]), 422, "/predictor_columns/1",
                 "'q' names no column", id="predictor-column-unknown"),
    pytest.param(table(predictor_columns=["a", "b", "a"]), 422, "/predictor_columns/2",
                 "repeats 'a'", id="predictor-column-duplicate"),
    pytest.param(table(predictor_columns=["y", "a"]), 422, "/predictor_columns/0",
                 "response column", id="predictor-column-is-response"),
    pytest.param(table({"a": [1.0, 2.0, 3.0]}), 422, "/table/a",
                 "has 3 values; the response column 'y' has 5", id="table-column-length"),
    pytest.param(table({"a/b~c": [1.0, 2.0], "a": ...}), 422, "/table/a~1b~0c",
                 "has 2 values", id="table-column-length-escaped-name"),
    # --- weights -----------------------------------------------------------------------
    pytest.param(matrix(weights=[1.0, -1.0, 1.0, 1.0, 1.0]), 422, "/weights/1", "negative",
                 id="weight-negative"),
    pytest.param(matrix(weights=[1.0, 1.0, 1.0]), 422, "/weights", "has 3 values for 5 rows",
                 id="weights-wrong-length"),
    pytest.param(matrix(weights=[0.0] * 5), 422, "/weights", "positive", id="weights-all-zero"),
    pytest.param(matrix(weights=[1.0, "2", 1.0, 1.0, 1.0]), 422, "/weights/1", "not str",
                 id="weight-string"),
    pytest.param(table(weights="w"), 422, "/weights", "names no column",
                 id="weights-unknown-column"),
    pytest.param(table(weights="y"), 422, "/weights", "response", id="weights-name-response"),
    pytest.param(table({"w": [1.0, 1.0, -2.0, 1.0, 1.0]}, weights="w"), 422, "/table/w/2",
                 "negative", id="weights-column-negative"),
    pytest.param(table({"w": [1.0] * 5}, weights="w", predictor_columns=["a", "w"]), 422,
                 "/predictor_columns/1", "weights column", id="predictor-is-weights-column"),
    # --- options -----------------------------------------------------------------------
    pytest.param(matrix(levels=[1.5]), 422, "/levels/0", "between 0 and 1", id="level-above-1"),
    pytest.param(matrix(levels=[0.9, 1]), 422, "/levels/1", "between 0 and 1", id="level-1"),
    pytest.param(matrix(levels=[0]), 422, "/levels/0", "between 0 and 1", id="level-0"),
    pytest.param(matrix(levels=[-0.5]), 422, "/levels/0", "between 0 and 1", id="level-negative"),
    pytest.param(matrix(levels=["0.95"]), 422, "/levels/0", "number", id="level-string"),
    pytest.param(matrix(levels=[True]), 422, "/levels/0", "number", id="level-boolean"),
    pytest.param(matrix(levels=0.95), 422, "/levels", "list", id="levels-not-a-list"),
    pytest.param(matrix(levels=[]), 422, "/levels", "", id="levels-empty"),
    pytest.param(matrix(levels=[0.9, 0.95, 0.9]), 422, "/levels/2", "repeats level 0.9",
                 id="levels-duplicate"),
    pytest.param(matrix(levels=[0.5, 0.8, 0.9, 0.95]), 422, "/levels",
                 "has 4 levels, more than the limit of 3", id="levels-too-many"),
    pytest.param(matrix(intercept="yes"), 422, "/intercept", "true or false",
                 id="intercept-string"),
    pytest.param(matrix(intercept=1), 422, "/intercept", "true or false", id="intercept-one"),
    pytest.param(matrix(intercept=None), 422, "/intercept", "", id="intercept-null"),
    pytest.param(matrix(missing="ignore"), 422, "/missing", "reject, drop_rows",
                 id="missing-not-allowed-word"),
    pytest.param(matrix(missing=False), 422, "/missing", "", id="missing-boolean"),
    pytest.param(matrix(rank_deficiency="fix"), 422, "/rank_deficiency", "reject, drop_aliased",
                 id="rank-deficiency-not-allowed-word"),
    # --- limits (LIMITS above) ---------------------------------------------------------
    pytest.param(matrix(design_matrix=rows(31, 1), response=[float(i) for i in range(31)]),
                 422, "/design_matrix", "has 31 rows, more than the limit of 30",
                 id="too-many-rows"),
    pytest.param(table({"a": [float(i) for i in range(31)], "b": ...,
                        "y": [float(i % 5) for i in range(31)]}),
                 422, "/table", "LINFER_MAX_ROWS", id="too-many-rows-table"),
    pytest.param(matrix(design_matrix=rows(6, 4), response=[float(i) for i in range(6)]),
                 422, "/design_matrix", "has 5 design columns, more than the limit of 4",
                 id="too-many-columns"),
    pytest.param(matrix(design_matrix=rows(26, 3), response=[float(i) for i in range(26)]),
                 422, "/design_matrix", "26 x 4 = 104 cells, more than the limit of 100",
                 id="too-many-cells"),
]




def test_resolver_itself():
    doc = {"a/b": {"m~n": [10, 20]}, "": 1}
    assert resolve(doc, "") is doc
    assert resolve(doc, "/a~1b/m~0n/1") == 20
    assert resolve(doc, "/") == 1
    for bad in ["/a~1b/m~0n/2", "/a~1b/m~0n/01", "/ab", "/a~1b/m~0n/0/x"]:
        with pytest.raises((KeyError, IndexError, AssertionError)):
            resolve(doc, bad)


@pytest.fixture
def limited(clean_env):
    return create_app(dict(LIMITS)).test_client()


def post(client, payload):
    if isinstance(payload, tuple):
        ctype, raw = payload
    elif isinstance(payload, bytes):
        ctype, raw = "application/json", payload
    else:
        ctype, raw = "application/json", json.dumps(payload).encode()
    return client.post("/v1/fit", data=raw, content_type=ctype)


def check_problem(resp, status):
    assert resp.status_code == status, resp.get_data(as_text=True)
    assert resp.mimetype == PROBLEM
    doc = json.loads(resp.get_data())
    assert {"type", "title", "status", "detail", "errors"} <= set(doc)
    assert isinstance(doc["type"], str) and re.match(r"^[a-z][a-z0-9+.-]*:", doc["type"])
    assert isinstance(doc["title"], str) and doc["title"]
    assert doc["status"] == status
    assert isinstance(doc["detail"], str) and doc["detail"]
    assert isinstance(doc["errors"], list)
    for e in doc["errors"]:
        assert set(e) >= {"pointer", "message"}
        assert isinstance(e["message"], str) and e["message"]
    return doc


@pytest.mark.parametrize("payload, status, pointer, fragment", CASES)
def test_bad_input(limited, payload, status, pointer, fragment):
    doc = check_problem(post(limited, payload), status)
    if pointer is None:
        assert doc["errors"] == []
        assert fragment in doc["detail"]
        return
    assert doc["errors"], "a 422 names what it blames"
    for e in doc["errors"]:
        resolve(payload, e["pointer"])
    blamed = [e for e in doc["errors"] if e["pointer"] == pointer]
    assert blamed, f"no error at {pointer!r}: {doc['errors']}"
    assert any(fragment in e["message"] for e in blamed), blamed


def test_several_envelope_errors_come_back_together(limited):
    payload = matrix(colour="red", intercept="yes", levels=[0.9, 2.0], missing="sometimes",
                     rank_deficiency=0)
    doc = check_problem(post(limited, payload), 422)
    pointers = {e["pointer"] for e in doc["errors"]}
    assert {"/colour", "/intercept", "/levels/1", "/missing", "/rank_deficiency"} <= pointers
    assert "5 field(s)" in doc["detail"]
    for e in doc["errors"]:
        resolve(payload, e["pointer"])


def test_null_pointers_are_capped_and_counted(limited):
    x = [[None, None] for _ in range(15)] + [[1.0, 2.0]] * 5
    payload = matrix(design_matrix=x, response=[1.0] * 20)
    doc = check_problem(post(limited, payload), 422)
    assert "30 value(s) are missing" in doc["detail"]
    assert 1 <= len(doc["errors"]) <= 10
    for e in doc["errors"]:
        assert resolve(payload, e["pointer"]) is None


def test_rank_deficient_problem_points_at_the_column(limited):
    payload = table({"b": [2.0 * v for v in TABLE["a"]]})
    doc = check_problem(post(limited, payload), 422)
    assert doc["type"].endswith("/rank_deficient")
    assert [e["pointer"] for e in doc["errors"]] == ["/table/b"]
    assert "b = 2 * a" in doc["errors"][0]["message"]
