"""Responses and weights near the ends of the double range.

Reference: weighted least squares is equivariant under scaling (common practice, an
algebraic identity): multiplying y by c multiplies the estimates, their standard
errors and the residual standard deviation by c and leaves t statistics, p values and
R squared alone; multiplying every weight by d leaves estimates, standard errors, t
and p alone and multiplies the residual standard deviation by sqrt(d). Each extreme
fit is checked against the same data at unit scale. Outside the range the weighted
sums of squares can be held in, the answer is a 422 that says so.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from service.app import create_app

rng = np.random.default_rng(17)
X = rng.normal(size=(20, 2))
Y = X @ [1.0, 2.0] + rng.normal(size=20)
W = [1.0] * 10 + [1 / 3] * 10


@pytest.fixture(scope="module")
def client():
    return create_app().test_client()


def _fit(client, y_scale, w_scale):
    body = {"design_matrix": X.tolist(), "response": (Y * y_scale).tolist()}
    if w_scale is not None:
        body["weights"] = [w * w_scale for w in W]
    return client.post("/v1/fit", json=body)


@pytest.mark.parametrize("y_scale, w_scale", [
    (1e154, 1e300), (1e300, 1e-300), (1e-200, 1e300), (1e-150, 1e-150), (1e305, None)])
def test_extreme_but_holdable_scales_fit_as_at_unit_scale(client, y_scale, w_scale):
    base = _fit(client, 1.0, None if w_scale is None else 1.0).get_json()
    got = _fit(client, y_scale, w_scale)
    assert got.status_code == 200, got.get_data(as_text=True)
    doc = got.get_json()
    for b, c in zip(base["coefficients"], doc["coefficients"]):
        assert c["estimate"] == pytest.approx(b["estimate"] * y_scale, rel=1e-12)
        assert c["standard_error"] == pytest.approx(b["standard_error"] * y_scale, rel=1e-12)
        assert c["t_statistic"] == pytest.approx(b["t_statistic"], rel=1e-12)
        assert c["p_value"] == pytest.approx(b["p_value"], rel=1e-10)
    sd = base["fit"]["residual_standard_deviation"] * y_scale * math.sqrt(w_scale or 1.0)
    assert doc["fit"]["residual_standard_deviation"] == pytest.approx(sd, rel=1e-12)
    assert doc["fit"]["r_squared"] == pytest.approx(base["fit"]["r_squared"], rel=1e-12)
    # Sums of squares beyond the double range are null, and a warning says so.
    beyond = doc["fit"]["residual_sum_of_squares"] is None
    assert beyond == (2 * math.log10(y_scale) + math.log10(w_scale or 1.0) > 300)
    assert [w["code"] for w in doc["warnings"]] == \
        [w["code"] for w in base["warnings"]] + (["overflow"] if beyond else [])


def test_estimates_beyond_double_precision_are_null_with_a_warning(client):
    got = client.post("/v1/fit", json={"design_matrix": (X * 1e-150).tolist(),
                                       "response": (Y * 1e280).tolist()}).get_json()
    slopes = got["coefficients"][1:]
    assert [c["estimate"] for c in slopes] == [None, None]
    flagged = [w for w in got["warnings"] if w["code"] == "overflow" and "x" in w["message"]]
    assert [w["pointer"] for w in flagged if "estimate" in w["message"]] == \
        ["/design_matrix/0/0", "/design_matrix/0/1"]


@pytest.mark.parametrize("y_scale, w_scale, where", [
    (1e250, 1e200, "/weights"), (1e300, 1e100, "/weights"), (1e-300, 1e-300, "/weights"),
    (1e-300, None, "/response")])
def test_scales_beyond_double_precision_are_refused(client, y_scale, w_scale, where):
    got = _fit(client, y_scale, w_scale)
    assert got.status_code == 422
    errors = got.get_json()["errors"]
    assert [e["pointer"] for e in errors] == [where]
    assert "power of ten" in errors[0]["message"]
