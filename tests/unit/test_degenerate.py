"""Degenerate input has a defined answer (DESIGN.md, section 3): one named test per case.

Through the stats core (``build_design`` + ``fit``) and, where the wire shape is the
point (nulls, status codes, pointers), through the API. Warnings fail the tests
(pyproject ``filterwarnings = ["error"]``), so a numpy RuntimeWarning on the way to
any of these answers is a failure too.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from service.stats.design import build_design
from service.stats.fit import FitOptions, TooFewObservations, fit
from service.stats.lstsq import RankDeficient

X1 = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0]
X2 = [2.0, 1.0, 4.0, 3.0, 6.0, 5.0, 9.0, 7.0]
Y = [3.1, 3.9, 7.2, 7.8, 11.3, 11.9, 16.4, 15.6]


def core_fit(x, y, names=None, *, intercept=True, weights=None, **options):
    x = np.asarray(x, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    names = tuple(names or (f"x{j + 1}" for j in range(x.shape[1])))
    w = None if weights is None else np.asarray(weights, dtype=float)
    design = build_design(x, np.asarray(y, dtype=float), names, intercept=intercept, weights=w)
    return fit(design, FitOptions(**options))


def codes(result):
    return [n.code for n in result.notices]


def post(client, body):
    resp = client.post("/v1/fit", data=json.dumps(body), content_type="application/json")
    return resp.status_code, json.loads(resp.get_data())


def by_name(doc):
    return {c["name"]: c for c in doc["coefficients"]}


def ols(x, y, intercept=True):
    x = np.asarray(x, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    if intercept:
        x = np.column_stack([np.ones(len(x)), x])
    b, *_ = np.linalg.lstsq(x, np.asarray(y, dtype=float), rcond=None)
    return b


# --- n = p ----------------------------------------------------------------------------

def test_n_equals_p_interpolates_with_no_residual_df():
    x = [[1.0, 2.0], [2.0, 1.0], [3.0, 5.0]]
    y = [1.0, 3.0, 2.0]
    r = core_fit(x, y)
    inf = r.inference
    assert inf.n_observations == 3 and inf.n_parameters == 3 and inf.residual_df == 0
    exact = np.linalg.solve(np.column_stack([np.ones(3), x]), y)
    np.testing.assert_allclose([c.estimate for c in inf.coefficients], exact, rtol=1e-12)
    for c in inf.coefficients:
        assert math.isnan(c.standard_error) and math.isnan(c.t_statistic)
        assert math.isnan(c.p_value)
        assert all(math.isnan(iv.lower) and math.isnan(iv.upper) for iv in c.intervals)
    assert math.isnan(inf.fit.residual_standard_deviation)
    assert math.isnan(inf.overall_f_test.statistic)
    assert "no_residual_df" in codes(r)


def test_n_equals_p_through_the_api_writes_nulls(client):
    status, doc = post(client, {"design_matrix": [[1.0, 2.0], [2.0, 1.0], [3.0, 5.0]],
                                "response": [1.0, 3.0, 2.0], "levels": [0.9, 0.99]})
    assert status == 200
    assert doc["residual_df"] == 0
    for c in doc["coefficients"]:
        assert c["estimate"] is not None
        assert c["standard_error"] is None and c["t_statistic"] is None
        assert c["p_value"] is None
        assert [iv["level"] for iv in c["intervals"]] == [0.9, 0.99]
        assert all(iv["lower"] is None and iv["upper"] is None for iv in c["intervals"])
    assert doc["fit"]["residual_standard_deviation"] is None
    assert doc["overall_f_test"]["statistic"] is None
    assert doc["overall_f_test"]["p_value"] is None
    assert "no_residual_df" in [w["code"] for w in doc["warnings"]]


# --- perfect fit ----------------------------------------------------------------------

def test_perfect_fit_has_zero_standard_errors_and_no_tests():
    y = [1.0 + 2.0 * a - b for a, b in zip(X1, X2)]
    r = core_fit(np.column_stack([X1, X2]), y)
    inf = r.inference
    assert inf.residual_df == 5
    np.testing.assert_allclose([c.estimate for c in inf.coefficients], [1.0, 2.0, -1.0],
                               rtol=1e-12, atol=1e-12)
    for c in inf.coefficients:
        assert c.standard_error == 0.0
        assert math.isnan(c.t_statistic) and math.isnan(c.p_value)
    assert math.isnan(inf.overall_f_test.statistic)
    assert math.isnan(inf.overall_f_test.p_value)
    assert "perfect_fit" in codes(r)


def test_perfect_fit_through_the_api(client):
    y = [1.0 + 2.0 * a - b for a, b in zip(X1, X2)]
    status, doc = post(client, {"design_matrix": [[a, b] for a, b in zip(X1, X2)],
                                "response": y})
    assert status == 200
    for c in doc["coefficients"]:
        assert c["standard_error"] == 0.0
        assert c["t_statistic"] is None and c["p_value"] is None
    assert doc["overall_f_test"]["statistic"] is None
    assert doc["overall_f_test"]["p_value"] is None
    assert doc["fit"]["r_squared"] == pytest.approx(1.0)
    assert "perfect_fit" in [w["code"] for w in doc["warnings"]]


# --- constant response ----------------------------------------------------------------

def test_constant_response_has_undefined_r_squared():
    r = core_fit(np.column_stack([X1, X2]), [3.0] * len(X1))
    inf = r.inference
    assert math.isnan(inf.fit.r_squared)
    assert math.isnan(inf.fit.adjusted_r_squared)
    assert inf.fit.total_sum_of_squares == 0.0
    np.testing.assert_allclose([c.estimate for c in inf.coefficients], [3.0, 0.0, 0.0],
                               atol=1e-12)
    assert "constant_response" in codes(r)


def test_constant_response_through_the_api(client):
    status, doc = post(client, {"design_matrix": [[a] for a in X1], "response": [-2.5] * 8})
    assert status == 200
    assert doc["fit"]["r_squared"] is None
    assert "constant_response" in [w["code"] for w in doc["warnings"]]


# --- constant, all-zero and duplicate predictors --------------------------------------

def test_constant_predictor_with_intercept_is_rank_deficient(client):
    with pytest.raises(RankDeficient) as info:
        core_fit(np.column_stack([X1, [4.0] * 8]), Y, ("x1", "depot"))
    (alias,) = info.value.aliases
    assert alias.column == 2
    assert [i for i, _ in alias.relation] == [0]
    assert alias.relation[0][1] == pytest.approx(4.0)

    status, doc = post(client, {"table": {"x1": X1, "depot": [4.0] * 8, "kwh": Y},
                                "response_column": "kwh"})
    assert status == 422
    assert doc["type"].endswith("/rank_deficient")
    assert [e["pointer"] for e in doc["errors"]] == ["/table/depot"]
    assert "depot = 4 * intercept" in doc["errors"][0]["message"]
    assert "depot = 4 * intercept" in doc["detail"]
    assert "rank 2 for 3 columns" in doc["detail"]


def test_all_zero_predictor_is_named_all_zero(client):
    with pytest.raises(RankDeficient) as info:
        core_fit(np.column_stack([X1, [0.0] * 8]), Y)
    (alias,) = info.value.aliases
    assert alias.column == 2 and alias.relation == ()

    status, doc = post(client, {"design_matrix": [[a, 0.0] for a in X1], "response": Y,
                                "column_names": ["x1", "spare"]})
    assert status == 422
    assert [e["pointer"] for e in doc["errors"]] == ["/column_names/1"]
    assert "spare is all zero" in doc["errors"][0]["message"]


def test_all_zero_predictor_without_intercept_is_named_all_zero(client):
    status, doc = post(client, {"design_matrix": [[a, 0.0] for a in X1], "response": Y,
                                "intercept": False})
    assert status == 422
    assert "x2 is all zero" in doc["detail"]


def test_duplicate_columns_give_the_relation(client):
    status, doc = post(client, {"design_matrix": [[a, a] for a in X1], "response": Y})
    assert status == 422
    assert doc["type"].endswith("/rank_deficient")
    assert len(doc["errors"]) == 1
    assert "x2 = 1 * x1" in doc["errors"][0]["message"]
    assert doc["errors"][0]["pointer"] == "/design_matrix/0/1"


def test_collinear_three_columns_drop_aliased(client):
    x3 = [a + 2.0 * b for a, b in zip(X1, X2)]
    full = {"table": {"x1": X1, "x2": X2, "x3": x3, "y": Y}, "response_column": "y",
            "rank_deficiency": "drop_aliased"}
    status, doc = post(client, full)
    assert status == 200, doc
    coef = by_name(doc)
    assert [c["name"] for c in doc["coefficients"]] == ["intercept", "x1", "x2", "x3"]
    assert coef["x3"]["estimable"] is False
    assert coef["x3"]["estimate"] is None and coef["x3"]["standard_error"] is None
    assert all(coef[n]["estimable"] for n in ("intercept", "x1", "x2"))
    cond = doc["conditioning"]
    assert cond["status"] == "rank_deficient"
    assert cond["rank"] == 3 and cond["n_columns"] == 4
    (aliased,) = cond["aliased"]
    assert aliased["column"] == "x3"
    rel = {r["column"]: r["multiplier"] for r in aliased["relation"]}
    assert rel == pytest.approx({"x1": 1.0, "x2": 2.0})
    assert "aliased_column" in [w["code"] for w in doc["warnings"]]
    assert [w["pointer"] for w in doc["warnings"] if w["code"] == "aliased_column"] == ["/table/x3"]

    status, reduced = post(client, {"table": {"x1": X1, "x2": X2, "y": Y},
                                    "response_column": "y"})
    assert status == 200
    assert doc["n_parameters"] == reduced["n_parameters"] == 3
    assert doc["residual_df"] == reduced["residual_df"] == 5
    red = by_name(reduced)
    for name in ("intercept", "x1", "x2"):
        for key in ("estimate", "standard_error", "t_statistic", "p_value"):
            assert coef[name][key] == pytest.approx(red[name][key], rel=1e-9), (name, key)
        assert coef[name]["intervals"][0]["lower"] == pytest.approx(
            red[name]["intervals"][0]["lower"], rel=1e-9)
    for key in ("r_squared", "adjusted_r_squared", "residual_standard_deviation",
                "residual_sum_of_squares", "log_likelihood", "aic", "bic"):
        assert doc["fit"][key] == pytest.approx(reduced["fit"][key], rel=1e-9), key
    for key in ("statistic", "numerator_df", "denominator_df", "p_value"):
        assert doc["overall_f_test"][key] == pytest.approx(reduced["overall_f_test"][key],
                                                           rel=1e-9), key


def test_collinear_three_columns_rejected_by_default(client):
    x3 = [a + 2.0 * b for a, b in zip(X1, X2)]
    status, doc = post(client, {"design_matrix": [list(r) for r in zip(X1, X2, x3)],
                                "response": Y})
    assert status == 422
    assert "x3 = 1 * x1 + 2 * x2" in doc["detail"]


# --- too few observations -------------------------------------------------------------

def test_fewer_observations_than_parameters_core():
    with pytest.raises(TooFewObservations) as info:
        core_fit([[1.0, 2.0], [2.0, 1.0]], [1.0, 3.0])
    assert (info.value.n, info.value.k) == (2, 3)


def test_fewer_observations_than_parameters_api(client):
    status, doc = post(client, {"design_matrix": [[1.0, 2.0], [2.0, 1.0]],
                                "response": [1.0, 3.0]})
    assert status == 422
    assert doc["errors"][0]["pointer"] == "/design_matrix"
    assert "2 observations for 3 design columns" in doc["errors"][0]["message"]


def test_too_few_after_dropping_rows_says_so(client):
    status, doc = post(client, {"design_matrix": [[1.0], [None], [2.0], [None]],
                                "response": [1.0, 2.0, 3.0, 4.0], "missing": "drop_rows"})
    assert status == 200  # two rows, two columns: n = p
    status, doc = post(client, {"design_matrix": [[1.0], [None], [None], [None]],
                                "response": [1.0, 2.0, 3.0, 4.0], "missing": "drop_rows"})
    assert status == 422
    assert "1 observations after 3 rows were dropped" in doc["detail"]


# --- zero weights ---------------------------------------------------------------------

def test_zero_weights_take_no_part():
    x = np.column_stack([X1, X2])
    w = np.array([1.0, 2.0, 0.0, 1.5, 0.0, 3.0, 1.0, 2.0])
    r = core_fit(x, Y, weights=w)
    keep = w > 0
    ref = core_fit(x[keep], np.asarray(Y)[keep], weights=w[keep])
    assert r.inference.n_observations == 6 == ref.inference.n_observations
    assert r.inference.residual_df == 3
    for a, b in zip(r.inference.coefficients, ref.inference.coefficients):
        assert a.estimate == pytest.approx(b.estimate, rel=1e-12)
        assert a.standard_error == pytest.approx(b.standard_error, rel=1e-12)
        assert a.p_value == pytest.approx(b.p_value, rel=1e-10)
    assert r.inference.fit.residual_sum_of_squares == pytest.approx(
        ref.inference.fit.residual_sum_of_squares, rel=1e-12)
    assert r.inference.fit.log_likelihood == pytest.approx(ref.inference.fit.log_likelihood,
                                                           rel=1e-12)
    assert "zero_weights" in codes(r)
    assert "zero_weights" not in codes(ref)
    assert r.design.rows_zero_weight == 2


def test_zero_weights_through_the_api(client):
    w = [1.0, 1.0, 0.0, 1.0, 1.0, 0.0, 1.0, 1.0]
    status, doc = post(client, {"design_matrix": [[a] for a in X1], "response": Y,
                                "weights": w})
    assert status == 200
    keep = [i for i, v in enumerate(w) if v > 0]
    status, ref = post(client, {"design_matrix": [[X1[i]] for i in keep],
                                "response": [Y[i] for i in keep]})
    assert doc["n_observations"] == 6
    for a, b in zip(doc["coefficients"], ref["coefficients"]):
        assert a["estimate"] == pytest.approx(b["estimate"], rel=1e-12)
        assert a["standard_error"] == pytest.approx(b["standard_error"], rel=1e-12)
    assert "zero_weights" in [x["code"] for x in doc["warnings"]]


# --- missing values dropped -----------------------------------------------------------

def test_missing_drop_rows_equals_fit_without_them(client):
    x = [[a, b] for a, b in zip(X1, X2)]
    x[1][0] = None
    y = list(Y)
    y[5] = None
    status, doc = post(client, {"design_matrix": x, "response": y, "missing": "drop_rows"})
    assert status == 200, doc
    assert doc["rows_dropped"] == 2
    assert doc["n_observations"] == 6
    keep = [i for i in range(8) if i not in (1, 5)]
    status, ref = post(client, {"design_matrix": [x[i] for i in keep],
                                "response": [Y[i] for i in keep]})
    assert ref["rows_dropped"] == 0
    for a, b in zip(doc["coefficients"], ref["coefficients"]):
        for key in ("estimate", "standard_error", "p_value"):
            assert a[key] == pytest.approx(b[key], rel=1e-12)
    assert doc["fit"]["r_squared"] == pytest.approx(ref["fit"]["r_squared"], rel=1e-12)
    assert "rows_dropped" in [w["code"] for w in doc["warnings"]]


def test_missing_weight_drops_the_row(client):
    w = [1.0, None, 2.0, 1.0, 1.0, 3.0, 1.0, 1.0]
    status, doc = post(client, {"design_matrix": [[a] for a in X1], "response": Y,
                                "weights": w, "missing": "drop_rows"})
    assert status == 200
    assert doc["rows_dropped"] == 1 and doc["n_observations"] == 7


# --- no intercept ---------------------------------------------------------------------

def test_no_intercept_is_uncentered():
    x = np.column_stack([X1, X2])
    r = core_fit(x, Y, intercept=False)
    f = r.inference.fit
    assert f.centered is False
    assert [c.name for c in r.inference.coefficients] == ["x1", "x2"]
    np.testing.assert_allclose([c.estimate for c in r.inference.coefficients],
                               ols(x, Y, intercept=False), rtol=1e-12)
    y = np.asarray(Y)
    assert f.total_sum_of_squares == pytest.approx(float(y @ y), rel=1e-12)
    assert f.r_squared == pytest.approx(1 - f.residual_sum_of_squares / float(y @ y), rel=1e-12)
    assert r.inference.overall_f_test.numerator_df == 2
    assert "uncentered" in codes(r)
    assert all(math.isnan(c.vif) for c in r.inference.coefficients)


def test_no_intercept_through_the_api(client):
    status, doc = post(client, {"design_matrix": [[a] for a in X1], "response": Y,
                                "intercept": False})
    assert status == 200
    assert doc["fit"]["centered"] is False
    assert [c["name"] for c in doc["coefficients"]] == ["x1"]
    assert "uncentered" in [w["code"] for w in doc["warnings"]]


def test_intercept_only_model_has_no_overall_f():
    r = core_fit(np.empty((8, 0)), Y, ())
    assert r.inference.n_parameters == 1
    assert r.inference.coefficients[0].estimate == pytest.approx(np.mean(Y), rel=1e-14)
    assert math.isnan(r.inference.overall_f_test.statistic)
    assert r.inference.fit.r_squared == pytest.approx(0.0, abs=1e-15)
    assert "intercept_only" in codes(r)


# --- weights as repetitions -----------------------------------------------------------

def test_integer_weights_equal_repeated_rows():
    x = np.column_stack([X1, X2])
    y = np.asarray(Y)
    w = np.array([1.0, 2.0, 1.0, 1.0, 3.0, 1.0, 1.0, 2.0])
    weighted = core_fit(x, y, weights=w)
    reps = w.astype(int)
    repeated = core_fit(np.repeat(x, reps, axis=0), np.repeat(y, reps))
    np.testing.assert_allclose([c.estimate for c in weighted.inference.coefficients],
                               [c.estimate for c in repeated.inference.coefficients],
                               rtol=1e-12)
    assert weighted.inference.fit.residual_sum_of_squares == pytest.approx(
        repeated.inference.fit.residual_sum_of_squares, rel=1e-12)
    assert weighted.inference.fit.r_squared == pytest.approx(
        repeated.inference.fit.r_squared, rel=1e-12)
    # Weights are precision weights, not frequencies: n counts rows, not their weights.
    assert weighted.inference.n_observations == 8
    assert repeated.inference.n_observations == 12


def test_weight_two_equals_a_duplicated_row(client):
    x = [[a] for a in X1]
    status, weighted = post(client, {"design_matrix": x, "response": Y,
                                     "weights": [1.0, 1.0, 2.0, 1.0, 1.0, 1.0, 1.0, 1.0]})
    status2, duplicated = post(client, {"design_matrix": x + [x[2]], "response": Y + [Y[2]]})
    assert status == status2 == 200
    for a, b in zip(weighted["coefficients"], duplicated["coefficients"]):
        assert a["estimate"] == pytest.approx(b["estimate"], rel=1e-12)
    assert weighted["fit"]["residual_sum_of_squares"] == pytest.approx(
        duplicated["fit"]["residual_sum_of_squares"], rel=1e-12)


def test_unit_weights_equal_no_weights():
    x = np.column_stack([X1, X2])
    a = core_fit(x, Y, weights=np.ones(8))
    b = core_fit(x, Y)
    for ca, cb in zip(a.inference.coefficients, b.inference.coefficients):
        assert ca.estimate == cb.estimate and ca.standard_error == cb.standard_error
    assert a.inference.fit.log_likelihood == b.inference.fit.log_likelihood
