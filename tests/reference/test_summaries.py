"""Fits from a summary (``triangular`` R of [X y], or ``cross_products``) against fits from rows.

What is checked, for seeded random designs (with and without intercept, near-collinear,
exactly rank-deficient with ``rank_deficiency: drop_aliased`` and with the default
``reject``) and for the demo data of client_examples/data/:

* The triangular summary (``numpy.linalg.qr(np.column_stack([X, y]), mode="r")``), the
  same R with some rows negated (QR leaves row signs arbitrary), and the TSQR merge of
  five partitions (each factored, the R factors stacked and factored again) give the
  coefficient table, fit statistics, overall F, hypotheses, conditioning verdict and
  model summary of the rows fit, to ``1e-12`` relative. The one exception is intrinsic:
  R formed in double precision carries a backward error of a few ulps of [X y], which
  moves the ill-conditioned figures (estimates, standard errors, condition number) by
  about ``eps * kappa``; the tolerance is ``1e-12 + 4 eps kappa`` (1e-12 for every
  well-conditioned case, about 2e-9 for the near-collinear one at kappa 2.4e6).
* The F statistics of the hypotheses, from rows and from summaries, against the same
  F in 60-digit arithmetic on the rows (mpmath), to the same tolerance.
* The cross-products summary (``X'X``, ``X'y``, ``y'y``) matches to the accuracy it
  allows: within ``10^-(estimated_correct_digits - 1)``, the service's own claim.
* /v1/predict from the model summary a summary fit returns answers as it does from the
  rows fit's model; /v1/test on it answers as the summary fit's own hypotheses did.
* A summary of more rows than LINFER_MAX_ROWS is fitted (a summary carries no rows).
* Validation: every malformed summary is a 422 whose RFC 6901 pointer resolves in the
  request and names the fault.
* Cross-check, test-only: statsmodels (``statsmodels.api.OLS(...).fit()``: params, bse,
  tvalues, pvalues, conf_int, rsquared, rsquared_adj, ssr, ess, centered_tss /
  uncentered_tss, llf, aic, bic, fvalue, f_pvalue, f_test) on the same rows. statsmodels
  is never imported by ``service``.

p values are compared with a tolerance widened by their sensitivity to the statistic:
a relative error ``r`` in ``t`` moves the tail area by about ``r t^2`` relative (``r F q``
for an F with q numerator df), so tiny p values are compared as precisely as the
statistic they come from allows, not more.
"""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np
import pytest

from demo_data import demo_table
from pointers import resolve
import statsmodels.api as sm
from scipy import linalg

from service.app import create_app
from service.client import merge_summaries, summary_from_arrays


EPS = np.finfo(float).eps
RTOL = 1e-12
RTOL_SM = 1e-10       # statsmodels (pinv, scipy tails): the cross-check's tolerance
LEVELS = [0.9, 0.95, 0.99]
NEW_ROWS_SEED = 99


# ----------------------------------------------------------------------------- cases


class Case:
    """One data set: predictors x (no ones column), response y, and the request options."""

    def __init__(self, name: str, x: np.ndarray, y: np.ndarray, names: list[str],
                 intercept: bool = True, hypotheses: list | None = None,
                 rank_deficiency: str | None = None, simultaneous: str | None = None):
        self.name = name
        self.x = np.asarray(x, dtype=float)
        self.y = np.asarray(y, dtype=float)
        self.names = list(names)
        self.intercept = intercept
        self.hypotheses = hypotheses or []
        self.rank_deficiency = rank_deficiency
        self.simultaneous = simultaneous

    @property
    def n(self) -> int:
        return self.y.shape[0]

    @property
    def summary_names(self) -> list[str]:
        return (["intercept"] if self.intercept else []) + self.names

    @property
    def design(self) -> np.ndarray:
        """X as the summary sees it: the ones column first when there is an intercept."""
        ones = [np.ones((self.n, 1))] if self.intercept else []
        return np.hstack(ones + [self.x])

    def options(self) -> dict[str, Any]:
        out: dict[str, Any] = {"levels": LEVELS, "return_model": True}
        if self.hypotheses:
            out["hypotheses"] = self.hypotheses
        if self.rank_deficiency:
            out["rank_deficiency"] = self.rank_deficiency
        if self.simultaneous:
            out["simultaneous"] = self.simultaneous
        return out

    def rows_body(self) -> dict[str, Any]:
        return {"design_matrix": self.x.tolist(), "response": self.y.tolist(),
                "column_names": self.names, "intercept": self.intercept, **self.options()}

    def new_rows(self) -> list[list[float]]:
        rng = np.random.default_rng(NEW_ROWS_SEED)
        lo, hi = self.x.min(axis=0), self.x.max(axis=0)
        rows = lo + (hi - lo) * rng.uniform(-0.1, 1.1, (4, self.x.shape[1]))
        return rows.tolist()


def _hyp(label: str, *restrictions: tuple[dict[str, float], float]) -> dict[str, Any]:
    return {"label": label, "restrictions": [{"coefficients": c, "equals": q}
                                             for c, q in restrictions]}


def _intercept_case() -> Case:
    rng = np.random.default_rng(20261202)
    n = 120
    x1 = rng.normal(10.0, 2.0, n)
    x2 = rng.uniform(0.0, 100.0, n)
    x3 = rng.normal(0.0, 1.0, n) + 0.3 * x1
    y = 4.0 + 1.5 * x1 - 0.02 * x2 + 0.8 * x3 + rng.normal(0.0, 1.5, n)
    return Case("intercept", np.column_stack([x1, x2, x3]), y, ["x1", "x2", "x3"],
                hypotheses=[_hyp("x2 and x3", ({"x2": 1}, 0.0), ({"x3": 1}, 0.0)),
                            _hyp("contrast", ({"x1": 1, "x3": -2}, 0.5)),
                            _hyp("pinned", ({"intercept": 1}, 4.0))],
                simultaneous="scheffe")


def _no_intercept_case() -> Case:
    rng = np.random.default_rng(7)
    n = 90
    x1 = rng.uniform(1.0, 5.0, n)
    x2 = rng.normal(3.0, 1.0, n)
    y = 2.0 * x1 + 0.5 * x2 + rng.normal(0.0, 1.0, n)
    return Case("no_intercept", np.column_stack([x1, x2]), y, ["x1", "x2"], intercept=False,
                hypotheses=[_hyp("equal", ({"x1": 1, "x2": -1}, 0.0))],
                simultaneous="bonferroni")


def _near_collinear_case() -> Case:
    rng = np.random.default_rng(31)
    n = 150
    x1 = rng.normal(10.0, 2.0, n)
    x2 = rng.normal(0.0, 1.0, n)
    x3 = x1 - 2.0 * x2 + 1e-5 * rng.normal(0.0, 1.0, n)
    y = 1.0 + x1 + 2.0 * x2 + 3.0 * x3 + rng.normal(0.0, 1.0, n)
    return Case("near_collinear", np.column_stack([x1, x2, x3]), y, ["x1", "x2", "x3"],
                hypotheses=[_hyp("x1 + x3", ({"x1": 1, "x3": 1}, 4.0))])


def _rank_deficient_x() -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(53)
    n = 70
    x1 = rng.integers(0, 50, n).astype(float)
    x2 = rng.integers(-20, 20, n).astype(float)
    x3 = 2.0 * x1 - x2 + 3.0            # exactly x3 = 2 x1 - x2 + 3 intercept
    x4 = rng.integers(0, 9, n).astype(float)
    y = 5.0 + 0.5 * x1 - 0.25 * x2 + 1.5 * x4 + rng.normal(0.0, 2.0, n)
    return np.column_stack([x1, x2, x3, x4]), y


def _rank_deficient_case(mode: str) -> Case:
    x, y = _rank_deficient_x()
    return Case(f"rank_deficient_{mode}", x, y, ["x1", "x2", "x3", "x4"],
                hypotheses=[_hyp("x4", ({"x4": 1}, 0.0))] if mode == "drop_aliased" else [],
                rank_deficiency=mode if mode == "drop_aliased" else None)


def _demo_case(file: str, name: str) -> Case:
    demo = demo_table(file)
    return Case(name, demo.x, demo.y, demo.names,
                hypotheses=[_hyp("doors and pallets", ({"door_openings": 1}, 0.0),
                                 ({"pallets_received": 1}, 0.0))])


CASES = {c.name: c for c in (
    _intercept_case(), _no_intercept_case(), _near_collinear_case(),
    _rank_deficient_case("drop_aliased"),
    _demo_case("warehouse_energy_table.json", "demo"),
    _demo_case("warehouse_collinear_table.json", "demo_collinear"))}
REJECTED = _rank_deficient_case("reject")
FORMS = ["triangular", "triangular_negated", "tsqr", "cross_products"]


# ----------------------------------------------------------------------------- summaries


def triangular(case: Case) -> np.ndarray:
    return np.linalg.qr(np.column_stack([case.design, case.y]), mode="r")


def summary_of(case: Case, form: str) -> dict[str, Any]:
    """The summary of ``case`` in one of :data:`FORMS`, computed here with numpy."""
    head = {"n_observations": case.n, "column_names": case.summary_names}
    if form == "cross_products":
        x = case.design
        return {"kind": "cross_products", **head, "xtx": (x.T @ x).tolist(),
                "xty": (x.T @ case.y).tolist(), "yty": float(case.y @ case.y)}
    if form == "triangular":
        r = triangular(case)
    elif form == "triangular_negated":
        r = triangular(case)
        flip = np.ones(r.shape[0])
        flip[[0, 2, -1]] = -1.0         # the intercept row, a middle row and the corner
        r = flip[:, None] * r
    elif form == "tsqr":
        r = tsqr(np.column_stack([case.design, case.y]), parts=5, seed=len(case.name))
    else:
        raise ValueError(form)
    return {"kind": "triangular", **head, "r_factor": r.tolist()}


def tsqr(a: np.ndarray, parts: int, seed: int) -> np.ndarray:
    """R of ``a`` from ``parts`` row partitions of uneven sizes: QR each, stack, QR again."""
    rng = np.random.default_rng(seed)
    cuts = np.sort(rng.choice(np.arange(1, a.shape[0]), parts - 1, replace=False))
    factors = [np.linalg.qr(block, mode="r") for block in np.split(a, cuts)]
    return np.linalg.qr(np.vstack(factors), mode="r")


# ----------------------------------------------------------------------------- service


@pytest.fixture(scope="module")
def linfer_app():
    """The app with the shipped default settings (no test overlay: the limits are real)."""
    return create_app()


@pytest.fixture
def api(linfer_app, contract_checked_clients):
    """A test client whose every answer is checked against openapi/linfer.yaml."""
    return linfer_app.test_client()


def post(api, path: str, body: Any, status: int = 200) -> dict[str, Any]:
    resp = api.post(path, data=json.dumps(body), content_type="application/json")
    assert resp.status_code == status, resp.get_data(as_text=True)[:2000]
    return resp.get_json()


_CACHE: dict[tuple[str, str], dict[str, Any]] = {}


def rows_fit(api, case: Case) -> dict[str, Any]:
    key = (case.name, "rows")
    if key not in _CACHE:
        _CACHE[key] = post(api, "/v1/fit", case.rows_body())
    return _CACHE[key]


def summary_fit(api, case: Case, form: str) -> dict[str, Any]:
    key = (case.name, form)
    if key not in _CACHE:
        _CACHE[key] = post(api, "/v1/fit", {"summary": summary_of(case, form),
                                            **case.options()})
    return _CACHE[key]


# ----------------------------------------------------------------------------- comparison


def kappa(case: Case) -> float:
    """The 2-norm condition number of the estimable, column-equilibrated design."""
    x = case.design
    keep = np.linalg.matrix_rank(x)
    _, _, piv = linalg.qr(x, pivoting=True, mode="economic")
    kept = x[:, np.sort(piv[:keep])]
    kept = kept / np.linalg.norm(kept, axis=0)
    return float(np.linalg.cond(kept))


def tolerance(api, case: Case, form: str) -> float:
    if form == "cross_products":
        digits = summary_fit(api, case, form)["numerics"]["estimated_correct_digits"]
        return 10.0 ** -(digits - 1)
    return RTOL + 4 * EPS * kappa(case)


class Compare:
    """Relative comparison with a stated floor: ``|a - b| <= rtol (|b| + scale)``."""

    def __init__(self, rtol: float, where: str):
        self.rtol = rtol
        self.where = where

    def num(self, actual, expected, what: str, scale: float = 0.0, rtol: float | None = None):
        rtol = self.rtol if rtol is None else rtol
        if expected is None or actual is None:
            assert actual is None and expected is None, (
                f"{self.where}: {what}: {actual!r} vs {expected!r}")
            return
        bound = rtol * (abs(expected) + scale)
        assert abs(actual - expected) <= bound, (
            f"{self.where}: {what}: {actual!r} vs {expected!r} (differ by "
            f"{abs(actual - expected):.3g}, allowed {bound:.3g}; rtol {rtol:.3g})")

    def p_value(self, actual, expected, statistic, what: str, q: float = 1.0):
        """A tail area: its relative sensitivity to the statistic is about t^2 (or F q)."""
        if expected is None or actual is None or statistic is None:
            return self.num(actual, expected, what)
        sensitivity = statistic * statistic if q is None else abs(statistic) * q
        self.num(actual, expected, what, rtol=self.rtol * (1.0 + sensitivity))

    def equal(self, actual, expected, what: str):
        assert actual == expected, f"{self.where}: {what}: {actual!r} != {expected!r}"


def compare_coefficients(c: Compare, got: list, want: list) -> None:
    c.equal([k["name"] for k in got], [k["name"] for k in want], "coefficient names")
    for a, b in zip(got, want):
        name = b["name"]
        c.equal(a["estimable"], b["estimable"], f"{name} estimable")
        se = b["standard_error"] or 0.0
        c.num(a["estimate"], b["estimate"], f"{name} estimate", scale=se)
        c.num(a["standard_error"], b["standard_error"], f"{name} standard_error")
        c.num(a["t_statistic"], b["t_statistic"], f"{name} t_statistic", scale=1.0)
        c.p_value(a["p_value"], b["p_value"], b["t_statistic"], f"{name} p_value", q=None)
        for key in ("intervals", "simultaneous_intervals"):
            c.equal([iv["level"] for iv in a[key]], [iv["level"] for iv in b[key]],
                    f"{name} {key} levels")
            for ia, ib in zip(a[key], b[key]):
                for end in ("lower", "upper"):
                    c.num(ia[end], ib[end], f"{name} {key} {ib['level']} {end}", scale=se)


def compare_fit(c: Compare, got: dict, want: dict, n: int) -> None:
    c.equal(got["centered"], want["centered"], "fit centered")
    tss = want["total_sum_of_squares"]
    for key in ("residual_sum_of_squares", "regression_sum_of_squares",
                "total_sum_of_squares"):
        c.num(got[key], want[key], f"fit {key}", scale=1e-3 * tss)
    for key in ("r_squared", "adjusted_r_squared"):
        c.num(got[key], want[key], f"fit {key}", scale=1.0)
    c.num(got["residual_standard_deviation"], want["residual_standard_deviation"],
          "fit residual_standard_deviation")
    for key in ("log_likelihood", "aic", "bic"):
        c.num(got[key], want[key], f"fit {key}", scale=float(n))


def compare_f(c: Compare, got: dict | None, want: dict | None, what: str) -> None:
    if want is None:
        c.equal(got, want, what)
        return
    for key in ("numerator_df", "denominator_df"):
        c.equal(got[key], want[key], f"{what} {key}")
    c.num(got["statistic"], want["statistic"], f"{what} statistic", scale=1.0)
    c.p_value(got["p_value"], want["p_value"], want["statistic"], f"{what} p_value",
              q=want["numerator_df"])


def compare_hypotheses(c: Compare, got: list, want: list, tss: float) -> None:
    c.equal([h["label"] for h in got], [h["label"] for h in want], "hypothesis labels")
    for a, b in zip(got, want):
        compare_f(c, a, b, f"hypothesis {b['label']!r}")
        for key in ("restricted_residual_sum_of_squares",
                    "unrestricted_residual_sum_of_squares"):
            c.num(a.get(key), b.get(key), f"hypothesis {b['label']!r} {key}",
                  scale=1e-3 * tss)


def compare_conditioning(c: Compare, got: dict, want: dict) -> None:
    for key in ("status", "rank", "n_columns"):
        c.equal(got[key], want[key], f"conditioning {key}")
    c.num(got["condition_number"], want["condition_number"], "condition_number")
    c.equal(len(got["condition_indexes"]), len(want["condition_indexes"]),
            "number of condition indexes")
    for i, (a, b) in enumerate(zip(got["condition_indexes"], want["condition_indexes"])):
        c.num(a, b, f"condition_indexes[{i}]")
    c.equal([s["columns"] for s in got["collinear_sets"]],
            [s["columns"] for s in want["collinear_sets"]], "collinear_sets columns")
    for a, b in zip(got["collinear_sets"], want["collinear_sets"]):
        c.num(a["condition_index"], b["condition_index"], "collinear set condition_index")
        for va, vb in zip(a["variance_proportions"], b["variance_proportions"]):
            c.num(va, vb, "collinear set variance proportion", scale=1.0)
    c.equal([a["column"] for a in got["aliased"]], [a["column"] for a in want["aliased"]],
            "aliased columns")
    for a, b in zip(got["aliased"], want["aliased"]):
        c.equal([t["column"] for t in a["relation"]], [t["column"] for t in b["relation"]],
                f"relation of {b['column']}")
        for ta, tb in zip(a["relation"], b["relation"]):
            c.num(ta["multiplier"], tb["multiplier"], f"relation of {b['column']}", scale=1.0)


def compare_model(c: Compare, got: dict, want: dict) -> None:
    for key in ("version", "names", "intercept", "covariance_kind", "residual_df",
                "n_observations"):
        c.equal(got[key], want[key], f"model {key}")
    c.equal([a["column"] for a in got["aliased"]], [a["column"] for a in want["aliased"]],
            "model aliased")
    c.num(got["residual_variance"], want["residual_variance"], "model residual_variance")
    cov_a = np.array(got["covariance"], dtype=float)
    cov_b = np.array(want["covariance"], dtype=float)
    sd = np.sqrt(np.where(np.isnan(np.diag(cov_b)), 1.0, np.diag(cov_b)))
    for i, (ea, eb) in enumerate(zip(got["estimates"], want["estimates"])):
        c.num(ea, eb, f"model estimates[{i}]", scale=sd[i])
    scale = np.outer(sd, sd)
    np.testing.assert_allclose(cov_a / scale, cov_b / scale, rtol=0, atol=c.rtol * 2,
                               err_msg=f"{c.where}: model covariance (in SE units)")


def compare_warnings(c: Compare, got: dict, want: dict, form: str) -> None:
    assert got["residual_checks"] is None, f"{c.where}: residual_checks must be null"
    codes_got = [w["code"] for w in got["warnings"]]
    codes_want = [w["code"] for w in want["warnings"]]
    extra = {"no_rows"} | ({"cross_products_precision", "few_correct_digits"}
                           if form == "cross_products" else set())
    assert "no_rows" in codes_got, f"{c.where}: warnings {codes_got} lack no_rows"
    assert set(codes_want) <= set(codes_got), f"{c.where}: {codes_got} vs rows {codes_want}"
    assert set(codes_got) - set(codes_want) <= extra, f"{c.where}: {codes_got} vs {codes_want}"


def compare_counts(c: Compare, got: dict, want: dict) -> None:
    for key in ("n_observations", "n_parameters", "residual_df", "rows_dropped",
                "simultaneous", "covariance"):
        c.equal(got[key], want[key], key)


SECTIONS = {
    "counts": lambda c, got, want, case, form: compare_counts(c, got, want),
    "coefficients": lambda c, got, want, case, form: compare_coefficients(
        c, got["coefficients"], want["coefficients"]),
    "fit": lambda c, got, want, case, form: compare_fit(c, got["fit"], want["fit"], case.n),
    "overall_f_test": lambda c, got, want, case, form: compare_f(
        c, got["overall_f_test"], want["overall_f_test"], "overall_f_test"),
    "hypotheses": lambda c, got, want, case, form: compare_hypotheses(
        c, got["hypotheses"], want["hypotheses"], want["fit"]["total_sum_of_squares"]),
    "conditioning": lambda c, got, want, case, form: compare_conditioning(
        c, got["conditioning"], want["conditioning"]),
    "model": lambda c, got, want, case, form: compare_model(c, got["model"], want["model"]),
    "warnings": lambda c, got, want, case, form: compare_warnings(c, got, want, form),
}


def compare_documents(c: Compare, got: dict, want: dict, case: Case, form: str) -> None:
    for check in SECTIONS.values():
        check(c, got, want, case, form)


# ----------------------------------------------------------------------------- the fits


@pytest.mark.parametrize("section", list(SECTIONS))
@pytest.mark.parametrize("form", FORMS)
@pytest.mark.parametrize("name", list(CASES))
def test_summary_fit_is_the_rows_fit(api, name, form, section):
    case = CASES[name]
    want = rows_fit(api, case)
    got = summary_fit(api, case, form)
    rtol = tolerance(api, case, form)
    SECTIONS[section](Compare(rtol, f"{name}/{form} {section} (rtol {rtol:.3g})"), got, want,
                      case, form)


def exact_f_statistics(case: Case, keep: list[int]) -> list[float]:
    """The F statistic of each hypothesis set, from the rows in 60-digit arithmetic (mpmath).

    On the estimable columns ``keep``: F = (Lb - q)' (L G^-1 L')^-1 (Lb - q) / (m s^2),
    with G = X'X, b = G^-1 X'y and s^2 = RSS / (n - p), all in mpmath.
    """
    import mpmath as mp

    names = [case.summary_names[j] for j in keep]
    with mp.workdps(60):
        x = mp.matrix(case.design[:, keep].tolist())
        y = mp.matrix(case.y.tolist())
        g = x.T * x
        b = mp.lu_solve(g, x.T * y)
        r = y - x * b
        s2 = (r.T * r)[0] / (case.n - len(keep))
        gi = mp.inverse(g)
        out = []
        for h in case.hypotheses:
            m = len(h["restrictions"])
            lm = mp.matrix(m, len(keep))
            q = mp.matrix(m, 1)
            for i, rs in enumerate(h["restrictions"]):
                q[i] = rs["equals"]
                for coef, mult in rs["coefficients"].items():
                    lm[i, names.index(coef)] = mult
            d = lm * b - q
            out.append(float((d.T * mp.inverse(lm * gi * lm.T) * d)[0] / (m * s2)))
        return out


@pytest.mark.parametrize("source", ["rows", "triangular", "tsqr"])
@pytest.mark.parametrize("name", [n for n in CASES if CASES[n].hypotheses])
def test_hypotheses_match_the_exact_f_statistics(api, name, source):
    """Against 60-digit arithmetic on the rows, to 1e-12 + 4 eps kappa (the rows fit too).

    A restriction on a well-determined combination of ill-determined coefficients (the
    near-collinear case's x1 + x3) has an F known to about eps kappa; computed from the
    rounded covariance matrix (v11 + v33 + 2 v13), it loses far more.
    """
    case = CASES[name]
    doc = rows_fit(api, case) if source == "rows" else summary_fit(api, case, source)
    keep = [j for j, c in enumerate(doc["coefficients"]) if c["estimable"]]
    exact = exact_f_statistics(case, keep)
    c = Compare(tolerance(api, case, "triangular"), f"{name}/{source} vs exact")
    for h, want in zip(doc["hypotheses"], exact, strict=True):
        c.num(h["statistic"], want, f"hypothesis {h['label']!r} statistic", scale=1.0)


@pytest.mark.parametrize("name", list(CASES))
def test_negated_rows_and_tsqr_are_the_plain_triangular_fit(api, name):
    """Row signs and partitioning change nothing beyond rounding (1e-12 + 4 eps kappa)."""
    case = CASES[name]
    plain = summary_fit(api, case, "triangular")
    for form in ("triangular_negated", "tsqr"):
        rtol = tolerance(api, case, form)
        compare_documents(Compare(rtol, f"{name}/{form} vs triangular"),
                          summary_fit(api, case, form), plain, case, "triangular")


def test_near_collinear_case_is_ill_conditioned_and_the_rank_case_drops_x3(api):
    """The cases test what they say: a verdict and an alias to compare, not just numbers."""
    assert rows_fit(api, CASES["near_collinear"])["conditioning"]["status"] == "ill_conditioned"
    assert kappa(CASES["near_collinear"]) > 1e6
    doc = rows_fit(api, CASES["rank_deficient_drop_aliased"])
    assert doc["conditioning"]["status"] == "rank_deficient"
    assert [a["column"] for a in doc["conditioning"]["aliased"]] == ["x3"]
    assert not rows_fit(api, CASES["no_intercept"])["fit"]["centered"]


@pytest.mark.parametrize("name", list(CASES))
def test_summary_warnings(api, name):
    case = CASES[name]
    tri = summary_fit(api, case, "triangular")
    assert "cross_products_precision" not in [w["code"] for w in tri["warnings"]]
    cp = summary_fit(api, case, "cross_products")
    notes = {w["code"]: w for w in cp["warnings"]}
    assert {"no_rows", "cross_products_precision"} <= set(notes)
    # The message says how many digits were lost: at least 2 log10 of the condition
    # number of X (the service counts that of the augmented [X y], which is larger).
    digits = cp["numerics"]["estimated_correct_digits"]
    assert f"{15.95 - digits:.1f}" in notes["cross_products_precision"]["message"]
    lost = 2 * math.log10(cp["conditioning"]["condition_number"])
    assert digits <= max(0.0, 15.95 - lost) + 0.05
    assert cp["residual_checks"] is None


@pytest.mark.parametrize("form", ["triangular", "cross_products"])
def test_rank_deficient_reject_is_the_rows_answer(api, form):
    rows = post(api, "/v1/fit", REJECTED.rows_body(), status=422)
    body = {"summary": summary_of(REJECTED, form), **REJECTED.options()}
    got = post(api, "/v1/fit", body, status=422)
    assert got["type"] == rows["type"] and got["title"] == rows["title"]
    assert [e["message"] for e in got["errors"]] == [e["message"] for e in rows["errors"]]
    # Rows point at /column_names/2 (x3); the summary's names have the intercept first.
    assert [e["pointer"] for e in rows["errors"]] == ["/column_names/2"]
    assert [e["pointer"] for e in got["errors"]] == ["/summary/column_names/3"]
    assert resolve(body, "/summary/column_names/3") == "x3"


@pytest.mark.parametrize("form", ["triangular", "cross_products"])
@pytest.mark.parametrize("kind", ["mean", "observation", "band"])
@pytest.mark.parametrize("name", list(CASES))
def test_predict_from_the_summary_fits_model(api, name, kind, form):
    """/v1/predict from the model a summary fit returns is /v1/predict from the rows' model."""
    case = CASES[name]
    request = {"new_rows": case.new_rows(), "levels": LEVELS, "kind": kind}
    want = post(api, "/v1/predict", {"model": rows_fit(api, case)["model"], **request})
    got = post(api, "/v1/predict", {"model": summary_fit(api, case, form)["model"], **request})
    c = Compare(tolerance(api, case, form), f"{name}/{form} predict {kind}")
    c.equal(got["kind"], want["kind"], "kind")
    c.equal(got["residual_df"], want["residual_df"], "residual_df")
    for i, (a, b) in enumerate(zip(got["predictions"], want["predictions"], strict=True)):
        se = b["standard_error"]
        c.num(a["mean"], b["mean"], f"row {i} mean", scale=se)
        c.num(a["standard_error"], b["standard_error"], f"row {i} standard_error")
        for ia, ib in zip(a["intervals"], b["intervals"], strict=True):
            for end in ("lower", "upper"):
                c.num(ia[end], ib[end], f"row {i} {ib['level']} {end}", scale=se)


@pytest.mark.parametrize("form", ["triangular", "cross_products"])
@pytest.mark.parametrize("name", [n for n in CASES if CASES[n].hypotheses])
def test_v1_test_from_the_summary_fits_model(api, name, form):
    """/v1/test on the returned model answers as the summary fit's own hypotheses did.

    (How those compare with the rows fit is test_summary_fit_is_the_rows_fit[...-hypotheses].)
    """
    case = CASES[name]
    fitted = summary_fit(api, case, form)
    doc = post(api, "/v1/test", {"model": fitted["model"], "hypotheses": case.hypotheses})
    strip = lambda hs: [{k: v for k, v in h.items()  # noqa: E731
                         if "residual_sum_of_squares" not in k} for h in hs]
    compare_hypotheses(Compare(RTOL, f"{name}/{form} /v1/test"), strip(doc["hypotheses"]),
                       strip(fitted["hypotheses"]), fitted["fit"]["total_sum_of_squares"])


# ----------------------------------------------------------------------------- client helpers


@pytest.mark.parametrize("name", ["intercept", "no_intercept", "near_collinear"])
def test_client_helpers_make_these_summaries(api, name):
    """service.client.summary_from_arrays and merge_summaries give the fits above."""
    case = CASES[name]
    whole = summary_from_arrays(case.x, case.y, case.names, intercept=case.intercept)
    assert whole["column_names"] == case.summary_names
    assert whole["n_observations"] == case.n
    parts = np.array_split(np.arange(case.n), 5)
    merged = merge_summaries([summary_from_arrays(case.x[i], case.y[i], case.names,
                                                  intercept=case.intercept) for i in parts])
    cross = merge_summaries([summary_from_arrays(case.x[i], case.y[i], case.names,
                                                 intercept=case.intercept,
                                                 kind="cross_products") for i in parts])
    assert merged["n_observations"] == cross["n_observations"] == case.n
    plain = summary_fit(api, case, "triangular")
    for label, summary in (("summary_from_arrays", whole), ("merge_summaries", merged)):
        got = post(api, "/v1/fit", {"summary": summary, **case.options()})
        compare_documents(Compare(tolerance(api, case, "triangular"), f"{name}/{label}"),
                          got, plain, case, "triangular")
    got = post(api, "/v1/fit", {"summary": cross, **case.options()})
    compare_documents(Compare(10.0 ** -(got["numerics"]["estimated_correct_digits"] - 1),
                              f"{name}/merged cross products"),
                      got, rows_fit(api, case), case, "cross_products")


def test_client_helpers_pad_a_partition_shorter_than_wide():
    case = CASES["intercept"]
    small = summary_from_arrays(case.x[:2], case.y[:2], case.names)
    assert np.array(small["r_factor"]).shape == (5, 5)
    with pytest.raises(ValueError, match="not finite"):
        summary_from_arrays(np.array([[1.0], [np.nan], [2.0]]), [1.0, 2.0, 3.0])
    with pytest.raises(ValueError, match="'intercept' names the column of ones"):
        summary_from_arrays(case.x, case.y, ["intercept", "a", "b"])


# ----------------------------------------------------------------------------- statsmodels


def _sm_cases() -> list[str]:
    # Well-conditioned cases (statsmodels solves by pinv and forms inv(X'X) for its
    # standard errors: its own error grows as eps kappa^2), plus the rank-deficient
    # one with its aliased column (x3) removed, which is what drop_aliased fits.
    return ["intercept", "no_intercept", "demo", "rank_deficient_drop_aliased"]


@pytest.mark.parametrize("form", ["triangular", "tsqr"])
@pytest.mark.parametrize("name", _sm_cases())
def test_statsmodels_crosscheck(api, name, form):
    case = CASES[name]
    doc = summary_fit(api, case, form)
    keep = [j for j, c in enumerate(doc["coefficients"]) if c["estimable"]]
    exog = case.design[:, keep]
    res = sm.OLS(case.y, exog).fit()
    coefs = [doc["coefficients"][j] for j in keep]
    close = lambda a, b, what, rtol=RTOL_SM: np.testing.assert_allclose(  # noqa: E731
        np.asarray(a, dtype=float), np.asarray(b, dtype=float), rtol=rtol, err_msg=what)
    close([c["estimate"] for c in coefs], res.params, "estimates")
    close([c["standard_error"] for c in coefs], res.bse, "standard errors")
    close([c["t_statistic"] for c in coefs], res.tvalues, "t statistics")
    t = np.abs(res.tvalues)
    np.testing.assert_allclose([c["p_value"] for c in coefs], res.pvalues,
                               rtol=RTOL_SM * (1 + t.max() ** 2), err_msg="p values")
    for i, level in enumerate(LEVELS):
        ci = res.conf_int(alpha=1 - level)
        close([c["intervals"][i]["lower"] for c in coefs], ci[:, 0], f"lower {level}")
        close([c["intervals"][i]["upper"] for c in coefs], ci[:, 1], f"upper {level}")
    fit = doc["fit"]
    centered = case.intercept
    close(fit["r_squared"], res.rsquared, "R squared")
    close(fit["adjusted_r_squared"], res.rsquared_adj, "adjusted R squared")
    close(fit["residual_sum_of_squares"], res.ssr, "RSS")
    close(fit["regression_sum_of_squares"], res.ess, "regression SS")
    close(fit["total_sum_of_squares"], res.centered_tss if centered else res.uncentered_tss,
          "total SS")
    close(fit["residual_standard_deviation"], math.sqrt(res.scale), "residual SD")
    close(fit["log_likelihood"], res.llf, "log-likelihood")
    # linfer counts the error variance as a parameter (openapi: aic = -2 L + 2 (p + 1));
    # statsmodels's aic and bic count the coefficients only.
    close(fit["aic"], res.aic + 2, "AIC")
    close(fit["bic"], res.bic + math.log(case.n), "BIC")
    f = doc["overall_f_test"]
    close(f["statistic"], res.fvalue, "overall F")
    close(f["p_value"], res.f_pvalue, "overall F p value",
          rtol=RTOL_SM * (1 + res.fvalue * f["numerator_df"]))
    names = [case.summary_names[j] for j in keep]
    for h, result in zip(case.hypotheses, doc["hypotheses"], strict=True):
        r = np.zeros((len(h["restrictions"]), len(names)))
        q = np.array([rs["equals"] for rs in h["restrictions"]], dtype=float)
        for i, rs in enumerate(h["restrictions"]):
            for coef, mult in rs["coefficients"].items():
                r[i, names.index(coef)] = mult
        ft = res.f_test((r, q))
        close(result["statistic"], float(np.squeeze(ft.fvalue)), f"{h['label']} F")
        close(result["p_value"], float(np.squeeze(ft.pvalue)), f"{h['label']} p",
              rtol=RTOL_SM * (1 + float(np.squeeze(ft.fvalue)) * len(q)))


# ----------------------------------------------------------------------------- validation


SMALL = CASES["intercept"]


def tri_body(**options) -> dict[str, Any]:
    return {"summary": summary_of(SMALL, "triangular"), **options}


def cp_body(**options) -> dict[str, Any]:
    return {"summary": summary_of(SMALL, "cross_products"), **options}


def _set(path: tuple, value):
    """A mutation: set the member at ``path`` (a tuple of keys and indexes) to ``value``."""
    def mutate(body):
        node = body
        for key in path[:-1]:
            node = node[key]
        node[path[-1]] = value
    return mutate


def _delete(path: tuple):
    def mutate(body):
        node = body
        for key in path[:-1]:
            node = node[key]
        del node[path[-1]]
    return mutate


def _apply(*mutations):
    def mutate(body):
        for m in mutations:
            m(body)
    return mutate


def _r(change):
    """A mutation of the triangular r_factor as a numpy array."""
    def mutate(body):
        r = np.array(body["summary"]["r_factor"], dtype=float)
        body["summary"]["r_factor"] = change(r).tolist()
    return mutate


def _xtx(change):
    def mutate(body):
        a = np.array(body["summary"]["xtx"], dtype=float)
        body["summary"]["xtx"] = change(a).tolist()
    return mutate


def _drop_last_row_and_column(a):
    return a[:-1, :-1]


def _lower(a):
    a = a.copy()
    a[3, 1] = 0.5 * abs(a[0, 0])
    return a


def _asymmetric(a):
    a = a.copy()
    a[1, 2] *= 1.0 + 1e-6
    return a


def _negative_diagonal(a):
    a = a.copy()
    a[2, 2] = -1.0
    return a


def _indefinite(a):
    a = a.copy()
    a[1, 2] = a[2, 1] = 2.0 * math.sqrt(a[1, 1] * a[2, 2])   # |corr| = 2
    return a


NAMES = ("summary", "column_names")
# (id, body maker, mutation, expected pointer, a phrase of the expected message)
INVALID = [
    # -- shape and triangularity
    ("r_factor too small", tri_body, _r(_drop_last_row_and_column), "/summary/r_factor",
     "must be 5 x 5"),
    ("r_factor not square", tri_body, _r(lambda r: r[:, :-1]), "/summary/r_factor", "5 x 5"),
    ("r_factor too many names", tri_body,
     _set(NAMES, SMALL.summary_names + ["x4"]), "/summary/r_factor", "6 x 6"),
    ("r_factor ragged", tri_body, _set(("summary", "r_factor", 2), [1.0, 2.0]),
     "/summary/r_factor/2", "row 0 has 5"),
    ("r_factor not a list", tri_body, _set(("summary", "r_factor"), "R"),
     "/summary/r_factor", ""),
    ("r_factor empty", tri_body, _set(("summary", "r_factor"), []), "/summary/r_factor", ""),
    ("r_factor lower triangle", tri_body, _r(_lower), "/summary/r_factor/3/1",
     "upper triangular"),
    ("r_factor null entry", tri_body, _set(("summary", "r_factor", 1, 2), None),
     "/summary/r_factor/1/2", "number"),
    ("r_factor string entry", tri_body, _set(("summary", "r_factor", 0, 1), "1.5"),
     "/summary/r_factor/0/1", "number"),
    ("r_factor boolean entry", tri_body, _set(("summary", "r_factor", 0, 1), True),
     "/summary/r_factor/0/1", "number"),
    ("r_factor intercept row is not sqrt(n)", tri_body,
     _set(("summary", "n_observations"), 4 * SMALL.n), "/summary/r_factor/0/0", "sqrt"),
    # -- the members of each kind
    ("triangular with xtx", tri_body, _set(("summary", "xtx"), [[1.0]]), "/summary/xtx",
     "does not belong"),
    ("triangular with yty", tri_body, _set(("summary", "yty"), 1.0), "/summary/yty",
     "does not belong"),
    ("triangular without r_factor", tri_body, _delete(("summary", "r_factor")), "/summary",
     "r_factor"),
    ("cross products with r_factor", cp_body, _set(("summary", "r_factor"), [[1.0]]),
     "/summary/r_factor", "does not belong"),
    ("cross products without yty", cp_body, _delete(("summary", "yty")), "/summary", "yty"),
    ("cross products without xty", cp_body, _delete(("summary", "xty")), "/summary", "xty"),
    ("unknown member", tri_body, _set(("summary", "weights"), [1.0]), "/summary/weights", ""),
    ("unknown member 2", cp_body, _set(("summary", "mean"), 1.0), "/summary/mean", ""),
    ("kind unknown", tri_body, _set(("summary", "kind"), "qr"), "/summary/kind", ""),
    # A missing member is pointed at through the object that lacks it (the README's rule).
    ("kind missing", tri_body, _delete(("summary", "kind")), "/summary", "kind"),
    ("summary not an object", tri_body, _set(("summary",), [1, 2]), "/summary", ""),
    # -- cross products
    ("xtx too small", cp_body, _xtx(_drop_last_row_and_column), "/summary/xtx", "4 x 4"),
    ("xty too short", cp_body, _set(("summary", "xty"), [1.0, 2.0, 3.0]), "/summary/xty",
     "3 values for 4"),
    ("xtx asymmetric", cp_body, _xtx(_asymmetric), ("/summary/xtx/1/2", "/summary/xtx/2/1"),
     "symmetry"),
    ("xtx negative diagonal", cp_body, _xtx(_negative_diagonal), "/summary/xtx/2/2",
     "negative"),
    ("yty negative", cp_body, _set(("summary", "yty"), -1.0), "/summary/yty", "negative"),
    ("xtx indefinite", cp_body, _xtx(_indefinite), "/summary/xtx", "positive semi-definite"),
    ("yty below the fit", cp_body, _set(("summary", "yty"), 1.0), "/summary/xtx",
     "positive semi-definite"),
    ("xtx[0][0] is not n", cp_body, _set(("summary", "n_observations"), SMALL.n + 1),
     "/summary/xtx/0/0", "n_observations"),
    ("xtx null entry", cp_body, _set(("summary", "xtx", 1, 1), None), "/summary/xtx/1/1",
     "number"),
    ("xtx boolean entry", cp_body, _set(("summary", "xtx", 1, 1), True), "/summary/xtx/1/1",
     "number"),
    ("xty null entry", cp_body, _set(("summary", "xty", 2), None), "/summary/xty/2",
     "number"),
    ("yty null", cp_body, _set(("summary", "yty"), None), "/summary/yty", ""),
    ("yty string", cp_body, _set(("summary", "yty"), "12"), "/summary/yty", "number"),
    # -- n_observations and names
    ("n below p", tri_body, _set(("summary", "n_observations"), 3), "/summary/n_observations",
     "more observations than columns"),
    ("n equals p", tri_body, _set(("summary", "n_observations"), 4),
     "/summary/n_observations", "more observations than columns"),
    ("n below p, cross products", cp_body, _apply(
        _set(("summary", "n_observations"), 2), _set(("summary", "xtx", 0, 0), 2.0)),
     "/summary/n_observations", "more observations than columns"),
    ("n negative", tri_body, _set(("summary", "n_observations"), -5),
     "/summary/n_observations", ""),
    ("n fractional", tri_body, _set(("summary", "n_observations"), 120.5),
     "/summary/n_observations", ""),
    ("n boolean", tri_body, _set(("summary", "n_observations"), True),
     "/summary/n_observations", ""),
    ("n missing", tri_body, _delete(("summary", "n_observations")), "/summary",
     "n_observations"),
    ("intercept not first", tri_body, _set(NAMES, ["x1", "intercept", "x2", "x3"]),
     "/summary/column_names/1", "first"),
    ("duplicate names", tri_body, _set(NAMES, ["intercept", "x1", "x2", "x1"]),
     "/summary/column_names/3", "repeats"),
    ("duplicate names, cross products", cp_body, _set(NAMES, ["intercept", "x1", "x1", "x3"]),
     "/summary/column_names/2", "repeats"),
    ("empty name", tri_body, _set(("summary", "column_names", 2), ""),
     "/summary/column_names/2", ""),
    ("name not a string", tri_body, _set(("summary", "column_names", 2), 7),
     "/summary/column_names/2", ""),
    ("no names", tri_body, _set(NAMES, []), "/summary/column_names", ""),
    ("names missing", tri_body, _delete(NAMES), "/summary", "column_names"),
    # -- what needs the rows, and the row layouts
    ("with table", lambda: tri_body(table={"a": [1.0]}), None, "/table", "summary"),
    ("with design_matrix", lambda: tri_body(design_matrix=[[1.0]], response=[1.0]), None,
     "/design_matrix", "summary"),
    ("with weights", lambda: tri_body(weights=[1.0] * SMALL.n), None, "/weights", ""),
    ("with include residuals", lambda: tri_body(include=["residuals"]), None, "/include",
     "rows"),
    ("with include influence", lambda: cp_body(include=["influence"]), None, "/include",
     "rows"),
    ("with covariance hc3", lambda: tri_body(covariance="hc3"), None, "/covariance",
     "classical"),
    ("with covariance hc0, cross products", lambda: cp_body(covariance="hc0"), None,
     "/covariance", "classical"),
    ("with intercept", lambda: tri_body(intercept=False), None, "/intercept", "summary"),
    ("with missing", lambda: tri_body(missing="drop_rows"), None, "/missing", "summary"),
    ("with column_names", lambda: tri_body(column_names=["a"]), None, "/column_names",
     "summary"),
    ("with a model", lambda: tri_body(model={"version": 1}), None, "/model", ""),
    # -- options as strict as for rows
    ("hypothesis on an unknown name", lambda: tri_body(hypotheses=[_hyp("h", ({"x9": 1}, 0))]),
     None, "/hypotheses/0/restrictions/0/coefficients/x9", ""),
    ("bad level", lambda: tri_body(levels=[1.5]), None, "/levels/0", ""),
]


@pytest.mark.parametrize("label, make, mutate, where, phrase", INVALID,
                         ids=[row[0] for row in INVALID])
def test_invalid_summary_is_a_422_with_a_resolving_pointer(api, label, make, mutate, where,
                                                           phrase):
    body = make()
    if mutate is not None:
        mutate(body)
    doc = post(api, "/v1/fit", body, status=422)
    pointers = [e["pointer"] for e in doc["errors"]]
    assert pointers, f"{label}: no pointer in {doc}"
    for p in pointers:
        resolve(body, p)   # raises when the pointer names nothing in the request
    wanted = (where,) if isinstance(where, str) else where
    hits = [e for e in doc["errors"] if e["pointer"] in wanted]
    assert hits, f"{label}: pointers {pointers}, expected {wanted}: {doc['errors']}"
    if phrase:
        assert any(phrase in e["message"] for e in hits), f"{label}: {hits}"


def test_a_hypothesis_error_points_where_it_does_for_rows(api):
    hyp = [_hyp("h", ({"x2": 1}, 0.0)), _hyp("bad", ({"x1": 1, "nope": 2}, 0.0))]
    rows = post(api, "/v1/fit", {**SMALL.rows_body(), "hypotheses": hyp}, status=422)
    got = post(api, "/v1/fit", tri_body(hypotheses=hyp), status=422)
    assert [(e["pointer"], e["message"]) for e in got["errors"]] == [
        (e["pointer"], e["message"]) for e in rows["errors"]]


@pytest.mark.parametrize("literal", ["NaN", "Infinity", "1e999"])
def test_a_non_finite_literal_is_refused_as_it_is_in_rows(api, literal):
    rows_text = json.dumps(SMALL.rows_body()).replace(
        json.dumps(SMALL.x.tolist()[0][1]), literal, 1)
    body = tri_body()
    text = json.dumps(body).replace(json.dumps(body["summary"]["r_factor"][0][1]), literal, 1)
    assert literal in rows_text and literal in text
    rows = api.post("/v1/fit", data=rows_text, content_type="application/json")
    got = api.post("/v1/fit", data=text, content_type="application/json")
    assert rows.status_code in (400, 422)
    assert got.status_code == rows.status_code, got.get_data(as_text=True)
    if got.status_code == 422:
        assert [e["pointer"] for e in got.get_json()["errors"]] == ["/summary/r_factor/0/1"]


def test_column_limit_applies_to_summaries(api):
    p = 201  # the default LINFER_MAX_COLUMNS is 200
    body = {"summary": {"kind": "triangular", "n_observations": 1000,
                        "column_names": [f"c{j}" for j in range(p)],
                        "r_factor": np.eye(p + 1).tolist()}}
    doc = post(api, "/v1/fit", body, status=422)
    assert any("LINFER_MAX_COLUMNS" in e["message"] for e in doc["errors"])
    for e in doc["errors"]:
        resolve(body, e["pointer"])


@pytest.mark.parametrize("form", ["triangular", "cross_products"])
def test_a_summary_of_more_rows_than_the_row_limit_is_fitted(api, form):
    """What summaries are for: n beyond LINFER_MAX_ROWS (1,000,000) and LINFER_MAX_CELLS.

    The summary of each row of the intercept case repeated 20,000 times (2,400,000 rows:
    R scaled by sqrt(20000), cross products by 20000) has the same estimates; only the
    counts change. The row limits bound the work of a fit from rows; a summary's work
    does not grow with n.
    """
    reps = 20_000
    case = SMALL
    base = summary_of(case, form)
    big = dict(base, n_observations=case.n * reps)
    if form == "triangular":
        big["r_factor"] = (np.array(base["r_factor"]) * math.sqrt(reps)).tolist()
    else:
        big["xtx"] = (np.array(base["xtx"]) * reps).tolist()
        big["xty"] = (np.array(base["xty"]) * reps).tolist()
        big["yty"] = base["yty"] * reps
    doc = post(api, "/v1/fit", {"summary": big})
    assert doc["n_observations"] == case.n * reps
    small = post(api, "/v1/fit", {"summary": base})
    np.testing.assert_allclose([c["estimate"] for c in doc["coefficients"]],
                               [c["estimate"] for c in small["coefficients"]], rtol=1e-9)
