"""The NIST StRD linear least squares suite through POST /v1/fit.

Source of every certified value: NIST StRD, Linear Least Squares Regression,
https://www.itl.nist.gov/div898/strd/lls/lls.shtml (public domain), parsed into
tests/reference/nist_strd.json by tests/reference/make_nist_fixture.py.

Accuracy is the log relative error (LRE) as NIST's StRD papers use it (McCullough,
"Assessing the reliability of statistical software", The American Statistician 1998):
``LRE = -log10(|computed - certified| / |certified|)``, or ``-log10(|computed|)`` when
the certified value is 0, capped at 15. A null (undefined) F where NIST certifies
Infinity (Wampler1 and Wampler2 fit exactly) counts as a match.

The design is formed by the test in float64 (columns x, x^2, ... for the polynomial
datasets; Longley's six columns as they are) and posted as a design_matrix. Forming x^k
in float64 already rounds away digits of Filip's problem, so no method can certify more
than about 7.6 digits on it from that input; its bar is 7.1, every other dataset's 13.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from service.app import create_app

FIXTURE = Path(__file__).resolve().parent / "nist_strd.json"
DATASETS = json.loads(FIXTURE.read_text(encoding="ascii"))["datasets"]
CAP = 15.0
# NIST StRD, Linear Least Squares Regression: required LRE per dataset (see docstring).
REQUIRED = {name: (7.1 if name == "Filip" else 13.0) for name in DATASETS}
FIGURES = ("estimates", "standard_errors", "residual_sd", "r_squared", "f_statistic")
LABELS = ("estimates", "std_errs", "resid_sd", "r_squared", "F")


def lre(computed, certified):
    """Log relative error against a NIST StRD certified value, capped at 15.

    ``certified`` None stands for NIST's "Infinity" (the exact-fit F of Wampler1/2): a
    null ``computed`` matches it, anything else scores 0. A null ``computed`` against a
    finite certified value scores 0.
    """
    if certified is None:
        return CAP if computed is None else 0.0
    if computed is None:
        return 0.0
    err = abs(computed - certified)
    if err == 0:
        return CAP
    if certified == 0:
        return min(CAP, -math.log10(err))
    return min(CAP, max(0.0, -math.log10(err / abs(certified))))


def design_for(entry) -> np.ndarray:
    """The float64 design as posted: x, x^2, ..., x^degree, or the multilinear columns."""
    x = np.array(entry["x"], dtype=np.float64)
    if entry["model"] == "polynomial":
        return np.column_stack([x[:, 0] ** k for k in range(1, entry["degree"] + 1)])
    return x


def _score(client, name, body):
    r = client.post("/v1/fit", data=json.dumps(body), content_type="application/json")
    assert r.status_code == 200, (name, r.get_json())
    got = r.get_json()
    cert = DATASETS[name]["certified"]
    coefs = got["coefficients"]
    assert len(coefs) == len(cert["estimates"]), name
    scores = {
        "estimates": min(lre(c["estimate"], b) for c, b in zip(coefs, cert["estimates"])),
        "standard_errors": min(lre(c["standard_error"], s)
                               for c, s in zip(coefs, cert["standard_errors"])),
        "residual_sd": lre(got["fit"]["residual_standard_deviation"], cert["residual_sd"]),
        "r_squared": lre(got["fit"]["r_squared"], cert["r_squared"]),
        "f_statistic": lre(got["overall_f_test"]["statistic"], cert["f_statistic"]),
    }
    return got, scores


@pytest.fixture(scope="module")
def results():
    """One /v1/fit per dataset, float64 design posted: {name: (response JSON, {figure: LRE})}."""
    client = create_app().test_client()
    return {name: _score(client, name, {"design_matrix": design_for(entry).tolist(),
                                        "response": entry["y"],
                                        "intercept": entry["intercept"]})
            for name, entry in DATASETS.items()}


def table_body(entry) -> dict:
    """The raw columns as a table; polynomial powers asked for as terms, formed inside."""
    x = np.array(entry["x"], dtype=np.float64)
    names = [f"x{j + 1}" for j in range(x.shape[1])] if x.shape[1] > 1 else ["x"]
    table = {name: x[:, j].tolist() for j, name in enumerate(names)}
    table["y"] = entry["y"]
    body = {"table": table, "response_column": "y", "intercept": entry["intercept"]}
    if entry["model"] == "polynomial" and entry["degree"] > 1:
        body["terms"] = ["x"] + [{"column": "x", "power": k}
                                 for k in range(2, entry["degree"] + 1)]
    return body


# NIST StRD through the raw columns: powers formed inside the service from the raw x.
# Wampler2's bar is 12.7: exact arithmetic on its float64 data reaches only about 13.2
# (its certified values are those of the decimal data, which doubles cannot hold).
TABLE_REQUIRED = {name: (12.7 if name == "Wampler2" else 13.0) for name in DATASETS}


@pytest.fixture(scope="module")
def table_results():
    client = create_app().test_client()
    return {name: _score(client, name, table_body(entry)) for name, entry in DATASETS.items()}


@pytest.mark.parametrize("figure", FIGURES)
@pytest.mark.parametrize("name", list(DATASETS))
def test_lre_through_raw_columns_meets_the_bar(table_results, name, figure):
    # NIST StRD, Linear Least Squares Regression: every figure, through the table layout
    # with powers as terms; LRE >= 13 on every dataset (Wampler2 >= 12.7), Filip included.
    _, scores = table_results[name]
    assert scores[figure] >= TABLE_REQUIRED[name], (
        f"{name} {figure}: LRE {scores[figure]:.2f} < {TABLE_REQUIRED[name]}")


@pytest.mark.parametrize("name", list(DATASETS))
def test_degrees_of_freedom_match_nist(results, name):
    # NIST StRD, Linear Least Squares Regression: certified ANOVA degrees of freedom.
    got, _ = results[name]
    cert = DATASETS[name]["certified"]
    assert got["residual_df"] == cert["residual_df"]
    assert got["overall_f_test"]["numerator_df"] == cert["regression_df"]
    assert got["n_observations"] == len(DATASETS[name]["y"])
    assert got["fit"]["centered"] is DATASETS[name]["intercept"]


@pytest.mark.parametrize("figure", FIGURES)
@pytest.mark.parametrize("name", list(DATASETS))
def test_lre_meets_the_bar(results, name, figure):
    # NIST StRD, Linear Least Squares Regression: certified estimates, standard errors,
    # residual standard deviation, R squared and ANOVA F; LRE >= 13 (Filip >= 7.1).
    _, scores = results[name]
    assert scores[figure] >= REQUIRED[name], (
        f"{name} {figure}: LRE {scores[figure]:.2f} < {REQUIRED[name]}")


def _table_lines(title, results):
    head = (f"{'dataset':9s} " + " ".join(f"{label:>9s}" for label in LABELS)
            + f" {'method':>19s} {'est.digits':>10s}")
    lines = ["", title, head]
    for name, (got, scores) in results.items():
        lines.append(f"{name:9s} " + " ".join(f"{scores[f]:9.2f}" for f in FIGURES)
                     + f" {got['numerics']['method']:>19s}"
                     + f" {got['numerics']['estimated_correct_digits']:10.2f}")
    return lines


def test_print_lre_table(results, table_results, capsys):
    """Print the LRE tables (NIST StRD, Linear Least Squares Regression) whatever -s says."""
    lines = _table_lines("NIST StRD linear least squares, float64 design posted: minimum "
                         "LRE per figure (cap 15)", results)
    lines += _table_lines("NIST StRD linear least squares, raw columns and power terms: "
                          "minimum LRE per figure (cap 15)", table_results)
    with capsys.disabled():
        print("\n".join(lines))
    assert len(lines) == 6 + 2 * len(DATASETS)
