"""Problems for bad follow-up input: hypotheses, covariance and simultaneous options, include,
/v1/predict and /v1/test.

Every case checks the status (422), the problem media type, and that one of the
``errors`` carries the expected RFC 6901 pointer and a message fragment; every pointer
the service returns must also resolve in the request document (an absent member is
blamed on the object that lacks it, and the message names the member: the convention
of tests/api/test_bad_input.py).

Bodies are posted with ``json.dumps`` so that their key order is the caller's.
"""

from __future__ import annotations

import json

import pytest

from pointers import resolve

from service.app import create_app

PROBLEM = "application/problem+json"

X = [[1.0, 2.0], [2.0, 3.0], [3.0, 5.0], [4.0, 1.0], [5.0, 4.0], [6.0, 2.5], [7.0, 6.0]]
Y = [1.0, 2.0, 3.0, 4.0, 6.0, 5.5, 8.0]
BASE = {"design_matrix": X, "response": Y, "column_names": ["a", "b"]}


@pytest.fixture(scope="module")
def client():
    return create_app({"max_hypotheses": 2}).test_client()


def post(client, path, body):
    return client.post(path, data=json.dumps(body), content_type="application/json")




def check(resp, body, ptr, fragment):
    assert resp.status_code == 422, resp.get_data(as_text=True)
    assert resp.mimetype == PROBLEM
    doc = resp.get_json()
    assert doc["status"] == 422
    assert doc["errors"], doc
    for e in doc["errors"]:
        resolve(body, e["pointer"])  # every pointer resolves in the request
    hits = [e for e in doc["errors"] if e["pointer"] == ptr]
    assert hits, f"no error at {ptr!r}: {doc['errors']}"
    assert any(fragment.lower() in e["message"].lower() for e in hits), (fragment, hits)
    return doc


def with_hypotheses(*restrictions, **extra):
    return {**BASE, "hypotheses": [{"label": "h", "restrictions": list(restrictions)}], **extra}


FIT_CASES = [
    pytest.param(with_hypotheses({"coefficients": {"a": 1}}, {"coefficients": {"zz": 1}}),
                 "/hypotheses/0/restrictions/1/coefficients/zz", "zz", id="unknown-name"),
    pytest.param(with_hypotheses({"coefficients": {"a": 1}},
                                 {"coefficients": {"b": 1, "a/b~c": 2}}),
                 "/hypotheses/0/restrictions/1/coefficients/a~1b~0c", "not a coefficient",
                 id="unknown-name-escaped"),
    pytest.param({**BASE, "hypotheses": [{"restrictions": []}]},
                 "/hypotheses/0/restrictions", "", id="empty-restriction-set"),
    pytest.param(with_hypotheses({"coefficients": {}}),
                 "/hypotheses/0/restrictions/0/coefficients", "", id="empty-coefficients"),
    pytest.param(with_hypotheses({"coefficients": {"a": 1}}, {"coefficients": {"a": 0, "b": 0}}),
                 "/hypotheses/0/restrictions/1", "zero", id="all-zero-multipliers"),
    pytest.param(with_hypotheses({"coefficients": {"a": 1, "b": -1}, "equals": 1},
                                 {"coefficients": {"b": 2}},
                                 {"coefficients": {"a": -3, "b": 3}, "equals": -3}),
                 "/hypotheses/0/restrictions/2", "follows from", id="redundant"),
    pytest.param(with_hypotheses({"coefficients": {"a": 1}, "equals": 1},
                                 {"coefficients": {"a": 2}, "equals": 1}),
                 "/hypotheses/0/restrictions/1", "contradicts", id="contradictory"),
    pytest.param({**BASE, "hypotheses": [{"restrictions": [{"coefficients": {"a": 1}}]}] * 3},
                 "/hypotheses", "limit", id="too-many-sets"),
    pytest.param({**BASE, "covariance": "hc4"}, "/covariance", "hc3", id="unknown-covariance"),
    pytest.param({**BASE, "simultaneous": "tukey"}, "/simultaneous", "bonferroni",
                 id="unknown-simultaneous"),
    pytest.param({**BASE, "include": ["residuals", "leverage"]}, "/include/1", "influence",
                 id="unknown-include"),
]


@pytest.mark.parametrize("body, ptr, fragment", FIT_CASES)
def test_fit_problems(client, body, ptr, fragment):
    check(post(client, "/v1/fit", body), body, ptr, fragment)


def test_hypothesis_errors_in_later_sets_point_at_that_set(client):
    body = {**BASE, "hypotheses": [
        {"restrictions": [{"coefficients": {"a": 1}}]},
        {"restrictions": [{"coefficients": {"b": 1}}, {"coefficients": {"nope": 1}}]}]}
    check(post(client, "/v1/fit", body), body, "/hypotheses/1/restrictions/1/coefficients/nope",
          "nope")


def test_the_hypothesis_limit_is_a_setting(client):
    body = {**BASE, "hypotheses": [{"restrictions": [{"coefficients": {"a": 1}}]}] * 2}
    assert post(client, "/v1/fit", body).status_code == 200


# ------------------------------------------------------------------------- /v1/predict


@pytest.fixture(scope="module")
def model(client):
    resp = post(client, "/v1/fit", {**BASE, "return_model": True})
    assert resp.status_code == 200
    return resp.get_json()["model"]


def _covariance_edit(model, edit):
    cov = [list(r) for r in model["covariance"]]
    edit(cov)
    return {**model, "covariance": cov}


def _asym(cov):
    cov[0][1] += 1e-3 * abs(cov[0][0])


def _negvar(cov):
    cov[2][2] = -cov[2][2]


PREDICT_CASES = [
    ("width", lambda m: {"model": m, "new_rows": [[1.0, 2.0, 3.0]]}, "/new_rows", "3"),
    ("width-numbers", lambda m: {"model": m, "new_rows": [[1.0]]}, "/new_rows", "2"),
    ("unknown-column", lambda m: {"model": m, "new_table": {"a": [1.0], "b": [2.0], "c": [3.0]}},
     "/new_table/c", "c"),
    ("missing-column", lambda m: {"model": m, "new_table": {"a": [1.0]}}, "/new_table", "b"),
    ("null-in-new-rows", lambda m: {"model": m, "new_rows": [[1.0, 2.0], [None, 3.0]]},
     "/new_rows/1/0", "null"),
    ("null-in-new-table", lambda m: {"model": m, "new_table": {"a": [1.0, 2.0], "b": [2.0, None]}},
     "/new_table/b/1", "null"),
    ("new-weights-with-mean", lambda m: {"model": m, "new_rows": [[1.0, 2.0]], "kind": "mean",
                                         "new_weights": [1.0]}, "/new_weights", "observation"),
    ("new-weights-default-kind", lambda m: {"model": m, "new_rows": [[1.0, 2.0]],
                                            "new_weights": [1.0]}, "/new_weights", "observation"),
    ("zero-new-weight", lambda m: {"model": m, "new_rows": [[1.0, 2.0], [2.0, 1.0]],
                                   "kind": "observation", "new_weights": [1.0, 0.0]},
     "/new_weights/1", "positive"),
    ("negative-new-weight", lambda m: {"model": m, "new_rows": [[1.0, 2.0], [2.0, 1.0]],
                                       "kind": "observation", "new_weights": [-2.0, 1.0]},
     "/new_weights/0", "positive"),
    ("both-new-rows-and-table", lambda m: {"model": m, "new_rows": [[1.0, 2.0]],
                                           "new_table": {"a": [1.0], "b": [2.0]}}, "", "exactly one"),
    ("neither-new-rows-nor-table", lambda m: {"model": m}, "", "exactly one"),
    ("covariance-shape", lambda m: {"model": {**m, "covariance": [r[:2] for r in m["covariance"]]},
                                    "new_rows": [[1.0, 2.0]]}, "/model/covariance", "3 x 3"),
    ("covariance-asymmetric", lambda m: {"model": _covariance_edit(m, _asym),
                                         "new_rows": [[1.0, 2.0]]},
     "/model/covariance/0/1", "symmetr"),
    ("negative-variance", lambda m: {"model": _covariance_edit(m, _negvar),
                                     "new_rows": [[1.0, 2.0]]},
     "/model/covariance/2/2", "negative"),
    ("not-psd", lambda m: {"model": {**m, "covariance": [[1.0, 2.0, 0.0], [2.0, 1.0, 0.0],
                                                         [0.0, 0.0, 1.0]]},
                           "new_rows": [[1.0, 2.0]]}, "/model/covariance", "semi-definite"),
    ("version-2", lambda m: {"model": {**m, "version": 2}, "new_rows": [[1.0, 2.0]]},
     "/model/version", "1"),
    ("model-plus-design-matrix", lambda m: {"model": m, "design_matrix": X, "response": Y,
                                            "new_rows": [[1.0, 2.0]]},
     "/design_matrix", "model"),
    ("model-plus-table", lambda m: {"model": m, "table": {"a": [1.0, 2.0], "y": [1.0, 2.0]},
                                    "response_column": "y", "new_rows": [[1.0, 2.0]]},
     "/table", "model"),
]


@pytest.mark.parametrize("name, make, ptr, fragment", PREDICT_CASES,
                         ids=[c[0] for c in PREDICT_CASES])
def test_predict_problems(client, model, name, make, ptr, fragment):
    body = make(model)
    check(post(client, "/v1/predict", body), body, ptr, fragment)


def test_width_mismatch_message_carries_the_numbers(client, model):
    body = {"model": model, "new_rows": [[1.0, 2.0, 3.0]]}
    doc = check(post(client, "/v1/predict", body), body, "/new_rows", "")
    message = next(e["message"] for e in doc["errors"] if e["pointer"] == "/new_rows")
    assert "3" in message and "2" in message, message


def test_predict_from_data_reports_width_mismatch_too(client):
    body = {**BASE, "new_rows": [[1.0, 2.0, 3.0]]}
    check(post(client, "/v1/predict", body), body, "/new_rows", "3")


# ---------------------------------------------------------------------------- /v1/test


def test_test_without_hypotheses_from_model(client, model):
    body = {"model": model}
    # The member is absent: the error must point at the object that lacks it and name it.
    check(post(client, "/v1/test", body), body, "", "hypotheses")


def test_test_without_hypotheses_from_data(client):
    body = dict(BASE)
    check(post(client, "/v1/test", body), body, "", "hypotheses")


def test_test_with_empty_hypotheses(client, model):
    body = {"model": model, "hypotheses": []}
    check(post(client, "/v1/test", body), body, "/hypotheses", "")


def test_test_unknown_coefficient_against_model(client, model):
    body = {"model": model, "hypotheses": [{"restrictions": [
        {"coefficients": {"a": 1}}, {"coefficients": {"c": 1}}]}]}
    check(post(client, "/v1/test", body), body, "/hypotheses/0/restrictions/1/coefficients/c", "c")


def test_test_hypothesis_limit(client, model):
    body = {"model": model, "hypotheses": [{"restrictions": [{"coefficients": {"a": 1}}]}] * 3}
    check(post(client, "/v1/test", body), body, "/hypotheses", "limit")


def test_model_missing_required_member_points_at_model(client, model):
    body = {"model": {k: v for k, v in model.items() if k != "names"}, "new_rows": [[1.0, 2.0]]}
    check(post(client, "/v1/predict", body), body, "/model", "names")


# ------------------------------------------------------- rank-deficient model, new rows

X1 = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0]
X2 = [2.0, 1.0, 4.0, 3.0, 6.0, 5.0, 8.0, 9.0]
X3 = [2 * a + b for a, b in zip(X1, X2)]  # aliased: x3 = 2 x1 + x2
YR = [3.1, 2.9, 6.2, 6.8, 9.9, 9.1, 13.2, 14.0]
ALIASED = {"table": {"x1": X1, "x2": X2, "x3": X3, "y": YR}, "response_column": "y",
           "rank_deficiency": "drop_aliased"}


@pytest.fixture(scope="module")
def aliased_model(client):
    resp = post(client, "/v1/fit", {**ALIASED, "return_model": True})
    assert resp.status_code == 200
    doc = resp.get_json()
    assert [c["estimable"] for c in doc["coefficients"]] == [True, True, True, False]
    return doc["model"]


@pytest.mark.parametrize("kind", ["mean", "observation", "band"])
def test_aliased_model_predicts_only_rows_that_respect_the_relation(client, aliased_model, kind):
    body = {"model": aliased_model, "kind": kind, "levels": [0.9, 0.99],
            "new_rows": [[1.0, 1.0, 3.0], [1.0, 1.0, 4.0], [10.0, -2.0, 18.0]]}
    resp = post(client, "/v1/predict", body)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    doc = resp.get_json()
    good, bad, good2 = doc["predictions"]
    b = aliased_model["estimates"]
    assert good["mean"] == pytest.approx(b[0] + b[1] + b[2], rel=1e-12)
    assert good2["mean"] == pytest.approx(b[0] + 10 * b[1] - 2 * b[2], rel=1e-12)
    for p in (good, good2):
        assert p["standard_error"] > 0
        for iv in p["intervals"]:
            assert iv["lower"] < p["mean"] < iv["upper"]
    assert bad["mean"] is None and bad["standard_error"] is None
    assert all(iv["lower"] is None and iv["upper"] is None for iv in bad["intervals"])
    warnings = [w for w in doc["warnings"] if w["code"] == "not_estimable"]
    assert len(warnings) == 1
    assert warnings[0]["pointer"] == "/new_rows/1"
    resolve(body, warnings[0]["pointer"])


def test_aliased_model_from_data_matches_model(client, aliased_model):
    rows = [[1.0, 1.0, 3.0], [1.0, 1.0, 4.0]]
    from_data = post(client, "/v1/predict", {**ALIASED, "new_rows": rows}).get_json()
    from_model = post(client, "/v1/predict", {"model": aliased_model, "new_rows": rows}).get_json()
    assert from_data["predictions"] == from_model["predictions"]
    assert from_data["predictions"][1]["mean"] is None
    assert [w["code"] for w in from_data["warnings"]] == ["not_estimable"]


def test_aliased_model_new_table_warning_pointer_resolves(client, aliased_model):
    body = {"model": aliased_model,
            "new_table": {"x1": [1.0, 1.0], "x2": [1.0, 1.0], "x3": [3.0, 4.0]}}
    resp = post(client, "/v1/predict", body)
    assert resp.status_code == 200
    doc = resp.get_json()
    assert doc["predictions"][0]["mean"] is not None
    assert doc["predictions"][1]["mean"] is None
    warnings = [w for w in doc["warnings"] if w["code"] == "not_estimable"]
    assert len(warnings) == 1
    # new_table is column-wise: "/new_table/1" names no member of it.
    assert warnings[0]["pointer"] is None or resolve(body, warnings[0]["pointer"]) is not None


def test_hypothesis_on_aliased_coefficient_is_refused(client, aliased_model):
    body = {"model": aliased_model, "hypotheses": [{"restrictions": [
        {"coefficients": {"x1": 1}}, {"coefficients": {"x3": 1}}]}]}
    check(post(client, "/v1/test", body), body, "/hypotheses/0/restrictions/1/coefficients/x3",
          "aliased")


def test_new_weights_length_mismatch(client, model):
    body = {"model": model, "new_rows": [[1.0, 2.0]], "kind": "observation",
            "new_weights": [1.0, 2.0]}
    check(post(client, "/v1/predict", body), body, "/new_weights", "2")


# --------------------------------------- the service accepts its own model summaries

N = 12
_LEVERAGE_ONE = {  # x2 is an indicator of row 0: that row has leverage 1
    "design_matrix": [[0.1 * i * i - i, 1.0 if i == 0 else 0.0] for i in range(N)],
    "response": [1.0 + 0.3 * i + (0.5 if i % 3 else -0.7) for i in range(N)],
}
OWN_MODELS = {
    "no-residual-df": {"design_matrix": [[1.0], [2.0]], "response": [1.0, 3.0]},
    "no-residual-df-hc3": {"design_matrix": [[1.0], [2.0]], "response": [1.0, 3.0],
                           "covariance": "hc3"},
    "leverage-one-hc2": {**_LEVERAGE_ONE, "covariance": "hc2"},
    "leverage-one-hc3": {**_LEVERAGE_ONE, "covariance": "hc3"},
    "perfect-fit": {"design_matrix": [[1.0], [2.0], [3.0], [4.0]],
                    "response": [3.0, 5.0, 7.0, 9.0]},
    "aliased-hc3": {**ALIASED, "covariance": "hc3"},
}


@pytest.mark.parametrize("name", list(OWN_MODELS))
def test_every_returned_model_is_accepted_back(client, name):
    """A model /v1/fit returns with return_model must be a valid /v1/predict and /v1/test input."""
    fitted = post(client, "/v1/fit", {**OWN_MODELS[name], "return_model": True})
    assert fitted.status_code == 200, fitted.get_data(as_text=True)
    model = fitted.get_json()["model"]
    width = len(model["names"]) - int(model["intercept"])
    predictors = [n for n in model["names"] if n != "intercept" or not model["intercept"]]
    row = [1.0] * width
    if name.startswith("aliased"):
        row = [1.0, 1.0, 3.0]  # respects x3 = 2 x1 + x2
    resp = post(client, "/v1/predict", {"model": model, "new_rows": [row]})
    assert resp.status_code == 200, (name, resp.get_json())
    b = [v for v in model["estimates"]]
    x0 = ([1.0] if model["intercept"] else []) + row
    expected = sum(bi * xi for bi, xi in zip(b, x0) if bi is not None)
    assert resp.get_json()["predictions"][0]["mean"] == pytest.approx(expected, rel=1e-12)
    resp = post(client, "/v1/test", {"model": model, "hypotheses": [
        {"restrictions": [{"coefficients": {predictors[0]: 1.0}, "equals": 0.0}]}]})
    assert resp.status_code == 200, (name, resp.get_json())


NULL_FIGURES = {
    "leverage-one-hc3": {**_LEVERAGE_ONE, "covariance": "hc3"},
    "leverage-one-hc2": {**_LEVERAGE_ONE, "covariance": "hc2"},
    "leverage-one-influence": {**_LEVERAGE_ONE, "include": ["influence"]},
}


def _nulls(doc):
    out = [c["name"] for c in doc["coefficients"] if c["estimable"] and (
        c["standard_error"] is None or c["p_value"] is None)]
    for measure, values in (doc.get("rows") or {}).items():
        out += [f"rows/{measure}/{i}" for i, v in enumerate(values) if v is None]
    return out


@pytest.mark.parametrize("name", list(NULL_FIGURES))
def test_null_figures_come_with_a_warning(client, name):
    """Wire contract: an undefined figure is null, and a warning says why."""
    resp = post(client, "/v1/fit", NULL_FIGURES[name])
    assert resp.status_code == 200
    doc = resp.get_json()
    nulls = _nulls(doc)
    assert nulls, "the case is meant to produce undefined figures"
    assert doc["warnings"], f"null figures {nulls[:5]} without any warning"


def test_overflowed_prediction_comes_with_a_warning(client, model):
    resp = post(client, "/v1/predict", {"model": model, "new_rows": [[1e308, 1e308]]})
    assert resp.status_code == 200
    doc = resp.get_json()
    assert doc["predictions"][0]["standard_error"] is None
    assert doc["warnings"], "a null standard error without any warning"
