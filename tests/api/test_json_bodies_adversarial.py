"""Adversarial JSON bodies for /v1/fit, /v1/predict and /v1/test.

Each case here was once a 500, or a 200 with a wrong or unexplained figure. Every
answer must be a result or a 4xx problem whose pointers resolve in the request.
"""

from __future__ import annotations

import copy

import numpy as np
import pytest

from pointers import resolve

PROBLEM = "application/problem+json"
X = [[1.0, 2.0], [2.0, 3.0], [3.0, 5.0], [4.0, 1.0], [5.0, 4.0], [6.0, 2.5], [7.0, 1.0]]
Y = [1.0, 2.0, 3.0, 4.0, 6.0, 5.5, 7.0]


def problem(response, body, status=422):
    """The problem document of ``response``, its pointers checked against ``body``."""
    assert response.status_code == status, response.get_data(as_text=True)
    assert response.mimetype == PROBLEM
    doc = response.get_json()
    for error in doc["errors"]:
        resolve(body, error["pointer"])
    return doc


def fitted_model(client, **extra):
    body = {"design_matrix": X, "response": Y, "return_model": True, **extra}
    response = client.post("/v1/fit", json=body)
    assert response.status_code == 200
    return response.get_json()["model"]


# --- weights whose sum is beyond the double range (was a 500: fsum overflow) ---

@pytest.mark.parametrize("layout", ["matrix", "table"])
def test_weights_summing_beyond_double_range_are_a_422(client, layout):
    weights = [1e308] * len(Y)
    if layout == "matrix":
        body = {"design_matrix": X, "response": Y, "weights": weights}
        at = "/weights"
    else:
        body = {"table": {"a": [r[0] for r in X], "b": [r[1] for r in X], "y": Y,
                          "w": weights}, "response_column": "y", "weights": "w"}
        at = "/table/w"
    doc = problem(client.post("/v1/fit", json=body), body)
    assert doc["errors"][0]["pointer"] == at
    assert "1.8e308" in doc["errors"][0]["message"]


def test_weights_near_the_limit_give_the_unweighted_estimates(client):
    # Equal weights do not move the estimates: the same rows without weights.
    body = {"design_matrix": X, "response": Y}
    plain = client.post("/v1/fit", json=body).get_json()
    heavy = client.post("/v1/fit", json={**body, "weights": [1e306] * len(Y)}).get_json()
    for a, b in zip(plain["coefficients"], heavy["coefficients"]):
        assert b["estimate"] == pytest.approx(a["estimate"], rel=1e-12)
        assert b["standard_error"] == pytest.approx(a["standard_error"], rel=1e-12)


# --- a summary sent to /v1/predict or /v1/test (was a 500: KeyError) ---

@pytest.mark.parametrize("path, extra", [
    ("/v1/predict", {"new_rows": [[1.0, 2.0]]}),
    ("/v1/test", {"hypotheses": [{"restrictions": [{"coefficients": {"x1": 1}}]}]}),
])
def test_summary_on_predict_and_test_is_a_422(client, path, extra):
    a = np.column_stack([np.ones(len(Y)), np.array(X), np.array(Y)])
    xtx = a[:, :3].T @ a[:, :3]
    body = {"summary": {"kind": "cross_products", "n_observations": len(Y),
                        "column_names": ["intercept", "x1", "x2"], "xtx": xtx.tolist(),
                        "xty": (a[:, :3].T @ a[:, 3]).tolist(), "yty": float(a[:, 3] @ a[:, 3])},
            **extra}
    doc = problem(client.post(path, json=body), body)
    assert doc["errors"][0]["pointer"] == "/summary"
    assert "return_model" in doc["errors"][0]["message"]


# --- a covariance_root that does not belong to the covariance (was a 200 whose
#     standard errors came from the root while the covariance said otherwise) ---

@pytest.mark.parametrize("covariance", ["null", "zero"])
def test_model_root_must_match_the_covariance(client, covariance):
    model = fitted_model(client)
    k = len(model["names"])
    model["covariance"] = [[None if covariance == "null" else 0.0] * k for _ in range(k)]
    body = {"model": model, "new_rows": [[1.0, 2.0]]}
    doc = problem(client.post("/v1/predict", json=body), body)
    assert doc["errors"][0]["pointer"] == "/model/covariance_root"


def test_model_with_null_covariance_and_no_root_has_null_standard_errors(client):
    model = fitted_model(client)
    k = len(model["names"])
    model["covariance"] = [[None] * k for _ in range(k)]
    model["covariance_root"] = None
    doc = client.post("/v1/predict", json={"model": model, "new_rows": [[1.0, 2.0]]}).get_json()
    assert doc["predictions"][0]["standard_error"] is None
    assert [w["code"] for w in doc["warnings"]] == ["covariance_undefined"]


# --- a constant response sent as a summary (was R squared 0.505 from a triangular
#     summary, 1.0 from cross products, from rounding; the rows give null) ---

@pytest.mark.parametrize("value", [3.0, 0.1, 1e6 + 0.1])
@pytest.mark.parametrize("kind", ["triangular", "cross_products"])
def test_constant_response_from_a_summary_answers_as_the_rows_do(client, kind, value):
    x = np.array(X)
    y = np.full(len(Y), value)
    a = np.column_stack([np.ones(len(y)), x, y])
    names = ["intercept", "x1", "x2"]
    if kind == "triangular":
        summary = {"r_factor": np.linalg.qr(a, mode="r").tolist()}  # numpy's QR of [1 X y]
    else:
        summary = {"xtx": (a[:, :3].T @ a[:, :3]).tolist(), "xty": (a[:, :3].T @ y).tolist(),
                   "yty": float(y @ y)}
    body = {"summary": {"kind": kind, "n_observations": len(y), "column_names": names,
                        **summary}}
    doc = client.post("/v1/fit", json=body).get_json()
    rows = client.post("/v1/fit", json={"design_matrix": X, "response": y.tolist()}).get_json()
    # The rows of the same data: R squared null, the sums of squares 0.
    assert rows["fit"]["r_squared"] is None
    for name in ("r_squared", "residual_sum_of_squares", "regression_sum_of_squares",
                 "total_sum_of_squares"):
        assert doc["fit"][name] == rows["fit"][name]
    codes = [w["code"] for w in doc["warnings"]]
    assert "constant_response" in codes and "perfect_fit" in codes
    assert doc["coefficients"][0]["estimate"] == pytest.approx(value, rel=1e-12)


# --- a restriction far from the estimates (was statistic and p value null with no
#     warning: d' (R V R')^-1 d overflowed on the way) ---

def test_far_restriction_has_its_statistic_when_it_is_a_double(client):
    from scipy import stats
    model = fitted_model(client)
    scale = 1e12
    model["covariance"] = [[c * scale for c in row] for row in model["covariance"]]
    model["residual_variance"] *= scale
    model["covariance_root"] = None
    q = 1e155
    body = {"model": model, "hypotheses": [{"restrictions": [
        {"coefficients": {"x1": 1}, "equals": q}]}]}
    doc = client.post("/v1/test", json=body).get_json()
    h = doc["hypotheses"][0]
    # The F statistic of one restriction is (b1 - q)^2 / V11, formed here in scaled terms.
    b1, v11 = model["estimates"][1], model["covariance"][1][1]
    expected = ((b1 - q) / 1e150) ** 2 / v11 * 1e300
    assert h["statistic"] == pytest.approx(expected, rel=1e-12)
    assert h["p_value"] == pytest.approx(stats.f.sf(expected, 1, model["residual_df"]),
                                         rel=1e-9)  # scipy.stats


def test_restriction_beyond_the_double_range_has_a_p_value_and_a_warning(client):
    from scipy import stats
    # One residual df: P(F(1, 1) >= f) falls only as f^-1/2, so the p value of an F
    # statistic beyond 1e308 is still a double (about 1e-156).
    x = [[1.0], [2.0], [4.0]]
    y = [1.0, 2.5, 3.0]
    q = 1e160
    body = {"design_matrix": x, "response": y,
            "hypotheses": [{"restrictions": [{"coefficients": {"x1": 1}, "equals": q}]}]}
    doc = client.post("/v1/fit", json=body).get_json()
    h = doc["hypotheses"][0]
    assert h["statistic"] is None
    se = doc["coefficients"][1]["standard_error"]
    # scipy.stats: P(F(1, 1) >= t^2) is the two-sided t(1) tail at t = (q - b) / se.
    expected = 2 * stats.t.sf((q - doc["coefficients"][1]["estimate"]) / se, 1)
    assert h["p_value"] == pytest.approx(expected, rel=1e-9)
    warning = [w for w in doc["warnings"] if w["code"] == "overflow"]
    assert warning and warning[0]["pointer"] == "/hypotheses/0"
    resolve(body, warning[0]["pointer"])


# --- a restriction multiplier of the wrong type (was pointed at the coefficients
#     object, not at the multiplier) ---

@pytest.mark.parametrize("value", ["1", None, True, [1]])
def test_bad_multiplier_is_pointed_at(client, value):
    body = {"design_matrix": X, "response": Y, "hypotheses": [{"restrictions": [
        {"coefficients": {"x1": 1, "a/b": value}}]}]}
    doc = problem(client.post("/v1/fit", json=body), body)
    assert doc["errors"][0]["pointer"] == "/hypotheses/0/restrictions/0/coefficients/a~1b"
