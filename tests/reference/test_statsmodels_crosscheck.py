"""The follow-up inference of linfer against statsmodels, used here as a test-only cross-check.

Source of every expected value in this file: statsmodels (``statsmodels.api.OLS`` /
``WLS`` and their results, ``statsmodels.stats.diagnostic.het_breuschpagan``,
``statsmodels.stats.stattools.durbin_watson`` / ``jarque_bera``,
``statsmodels.stats.outliers_influence.OLSInfluence``), plus ``scipy.stats.f.ppf`` for
the Scheffe and Working-Hotelling multipliers. statsmodels is never imported by
``service``; it is a test dependency only.

Notes on matching conventions:

* statsmodels's HC p values and intervals use the normal distribution by default; the
  service refers them to Student t with the residual df, so robust results here are
  fitted with ``use_t=True``.
* The Breusch-Pagan statistic of the service is Koenker's studentized one
  (``het_breuschpagan(..., robust=True)``), on the weighted residuals ``sqrt(w) e``
  regressed on the design as posted.
* ``OLSInfluence`` on a WLS result mixes the unweighted design with the weighted
  pseudo-inverse, so for weighted fits the influence measures are taken from the
  equivalent OLS fit of ``sqrt(w) y`` on ``sqrt(w) X`` (which is what WLS is).

The data: seeded random designs (with heteroskedastic errors, so the HC estimators
differ from the classical one), and the demo data of
client_examples/data/warehouse_energy_table.json, each without and with weights.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import linalg
from scipy import stats as scipy_stats
from statsmodels.stats.diagnostic import het_breuschpagan
from statsmodels.stats.outliers_influence import OLSInfluence
from statsmodels.stats.stattools import durbin_watson, jarque_bera

from demo_data import demo_table
from service.app import create_app


RTOL = 1e-10          # standard errors, estimates, statistics
RTOL_P = 1e-9         # p values (scipy's t / F / chi-square tails in statsmodels)
LEVELS = [0.9, 0.95, 0.99]
HC = ["hc0", "hc1", "hc2", "hc3"]


# ----------------------------------------------------------------------------- cases


class Case:
    """One data set: the design as statsmodels sees it and the request body as linfer does."""

    def __init__(self, name, x, y, names, weights, body, new_rows, hypotheses):
        self.name = name
        self.x = np.asarray(x, dtype=float)                 # predictors, no intercept
        self.X = sm.add_constant(self.x, prepend=True, has_constant="add")
        self.y = np.asarray(y, dtype=float)
        self.names = ["intercept"] + list(names)
        self.weights = None if weights is None else np.asarray(weights, dtype=float)
        self.body = body
        self.new_rows = np.asarray(new_rows, dtype=float)
        self.new_X = sm.add_constant(self.new_rows, prepend=True, has_constant="add")
        self.hypotheses = hypotheses  # list of (label, [(dict multipliers, equals), ...])

    def model(self):
        if self.weights is None:
            return sm.OLS(self.y, self.X)
        return sm.WLS(self.y, self.X, weights=self.weights)

    def transformed_ols(self):
        """OLS on sqrt(w) y and sqrt(w) X: the weighted fit as an unweighted one."""
        sw = np.ones_like(self.y) if self.weights is None else np.sqrt(self.weights)
        return sm.OLS(self.y * sw, self.X * sw[:, None])

    def restriction(self, restrictions):
        r = np.zeros((len(restrictions), len(self.names)))
        q = np.zeros(len(restrictions))
        for i, (coefs, equals) in enumerate(restrictions):
            for name, mult in coefs.items():
                r[i, self.names.index(name)] += mult
            q[i] = equals
        return r, q


def _hypotheses_json(hypotheses):
    return [{"label": label, "restrictions": [{"coefficients": c, "equals": q} for c, q in rs]}
            for label, rs in hypotheses]


def _random_case(weighted):
    rng = np.random.default_rng(20240611)
    n = 45
    x1 = rng.normal(5.0, 2.0, n)
    x2 = rng.uniform(0.0, 10.0, n)
    x3 = rng.normal(0.0, 1.0, n) + 0.3 * x1
    noise = rng.normal(0.0, 1.0, n) * (0.3 + 0.25 * x2)   # heteroskedastic
    y = 2.0 + 1.5 * x1 - 0.3 * x2 + 0.8 * x3 + noise
    x = np.column_stack([x1, x2, x3])
    w = rng.uniform(0.3, 3.0, n) if weighted else None
    body = {"design_matrix": x.tolist(), "response": y.tolist(),
            "column_names": ["x1", "x2", "x3"]}
    if weighted:
        body["weights"] = w.tolist()
    hyps = [("x1 and x3", [({"x1": 1}, 0.0), ({"x3": 1}, 0.0)]),
            ("contrast", [({"x1": 1, "x3": -2}, 0.5)]),
            ("pinned", [({"x2": 1, "x3": 1}, 1.0), ({"intercept": 1}, 2.0)])]
    new_rows = [[5.0, 5.0, 1.5], [1.0, 9.5, -1.0], [9.0, 0.5, 3.0]]
    return Case("random_wls" if weighted else "random_ols", x, y, ["x1", "x2", "x3"], w,
                body, new_rows, hyps)


def _demo_case(weighted):
    demo = demo_table(weight_seed=7 if weighted else None)
    body, names, x, y, w = demo.body, demo.names, demo.x, demo.y, demo.w
    hyps = [("doors and pallets", [({"door_openings": 1}, 0.0), ({"pallets_received": 1}, 0.0)]),
            ("equal effects", [({"door_openings": 1, "pallets_received": -1}, 0.0)]),
            ("temperature 37", [({"temp_c": 1}, 37.0)])]
    new_rows = [[10.0, 200.0, 60.0], [-5.0, 100.0, 20.0], [30.0, 400.0, 120.0]]
    return Case("demo_wls" if weighted else "demo_ols", x, y, names, w, body, new_rows, hyps)


CASES = {c.name: c for c in (_random_case(False), _random_case(True),
                             _demo_case(False), _demo_case(True))}


@pytest.fixture(scope="module")
def client():
    return create_app().test_client()


def post(client, path, body):
    resp = client.post(path, data=json.dumps(body), content_type="application/json")
    assert resp.status_code == 200, resp.get_data(as_text=True)
    return resp.get_json()


_CACHE: dict = {}


def service_fit(client, case, covariance="classical", **options):
    key = (case.name, covariance, json.dumps(options, sort_keys=True))
    if key not in _CACHE:
        body = {**case.body, "covariance": covariance, "levels": LEVELS,
                "include": ["residuals", "influence"], "return_model": True,
                "hypotheses": _hypotheses_json(case.hypotheses), **options}
        _CACHE[key] = post(client, "/v1/fit", body)
    return _CACHE[key]


def sm_fit(case, covariance="classical"):
    if covariance == "classical":
        return case.model().fit()
    return case.model().fit(cov_type=covariance.upper(), use_t=True)


def close(actual, expected, rtol=RTOL, atol=0.0, what=""):
    np.testing.assert_allclose(np.asarray(actual, dtype=float), np.asarray(expected, dtype=float),
                               rtol=rtol, atol=atol, err_msg=what)


case_ids = list(CASES)


# ---------------------------------------------------------------- coefficient table


@pytest.mark.parametrize("name", case_ids)
@pytest.mark.parametrize("covariance", ["classical"] + HC)
def test_standard_errors(client, name, covariance):
    case = CASES[name]
    doc = service_fit(client, case, covariance)
    res = sm_fit(case, covariance)
    coefs = doc["coefficients"]
    assert [c["name"] for c in coefs] == case.names
    assert doc["covariance"]["kind"] == covariance
    close([c["estimate"] for c in coefs], res.params, what="estimates")
    close([c["standard_error"] for c in coefs], res.bse, what=f"{covariance} standard errors")
    close([c["t_statistic"] for c in coefs], res.tvalues, what="t statistics")
    # statsmodels with use_t=True refers robust t statistics to t(df_resid), as the service does.
    close([c["p_value"] for c in coefs], res.pvalues, rtol=RTOL_P, what="p values")
    for i, level in enumerate(LEVELS):
        ci = res.conf_int(alpha=1 - level)
        close([c["intervals"][i]["lower"] for c in coefs], ci[:, 0], what=f"lower {level}")
        close([c["intervals"][i]["upper"] for c in coefs], ci[:, 1], what=f"upper {level}")
    # The covariance of the model summary is statsmodels's cov_params.
    cov = np.array(doc["model"]["covariance"], dtype=float)
    scale = np.sqrt(np.outer(res.bse, res.bse))
    close(cov / scale, res.cov_params() / scale, rtol=0, atol=1e-10, what="covariance")


@pytest.mark.parametrize("name", case_ids)
def test_classical_fit_statistics(client, name):
    case = CASES[name]
    doc = service_fit(client, case)
    res = sm_fit(case)
    fit = doc["fit"]
    close(fit["residual_sum_of_squares"], res.ssr)
    close(fit["r_squared"], res.rsquared)
    close(fit["residual_standard_deviation"], np.sqrt(res.mse_resid))
    close(doc["overall_f_test"]["statistic"], res.fvalue)
    close(doc["overall_f_test"]["p_value"], res.f_pvalue, rtol=RTOL_P)
    assert doc["residual_df"] == res.df_resid


@pytest.mark.parametrize("name", case_ids)
@pytest.mark.parametrize("covariance", HC)
def test_robust_overall_test_is_the_wald_test_of_all_slopes(client, name, covariance):
    case = CASES[name]
    doc = service_fit(client, case, covariance)
    res = sm_fit(case, covariance)
    r = np.eye(len(case.names))[1:]
    ft = res.f_test(r)
    close(doc["overall_f_test"]["statistic"], np.squeeze(ft.fvalue))
    close(doc["overall_f_test"]["p_value"], np.squeeze(ft.pvalue), rtol=RTOL_P)
    assert doc["overall_f_test"]["numerator_df"] == len(case.names) - 1
    assert doc["overall_f_test"]["denominator_df"] == res.df_resid


# ------------------------------------------------------------------ simultaneous


@pytest.mark.parametrize("name", case_ids)
@pytest.mark.parametrize("covariance", ["classical", "hc3"])
def test_bonferroni_intervals(client, name, covariance):
    case = CASES[name]
    doc = service_fit(client, case, covariance, simultaneous="bonferroni")
    res = sm_fit(case, covariance)
    m = len(case.names)
    assert doc["simultaneous"] == {"method": "bonferroni", "family_size": m}
    coefs = doc["coefficients"]
    for i, level in enumerate(LEVELS):
        ci = res.conf_int(alpha=(1 - level) / m)
        assert [c["simultaneous_intervals"][i]["level"] for c in coefs] == [level] * m
        close([c["simultaneous_intervals"][i]["lower"] for c in coefs], ci[:, 0])
        close([c["simultaneous_intervals"][i]["upper"] for c in coefs], ci[:, 1])


@pytest.mark.parametrize("name", case_ids)
@pytest.mark.parametrize("covariance", ["classical", "hc3"])
def test_scheffe_intervals(client, name, covariance):
    case = CASES[name]
    doc = service_fit(client, case, covariance, simultaneous="scheffe")
    res = sm_fit(case, covariance)
    p = len(case.names)
    assert doc["simultaneous"] == {"method": "scheffe", "family_size": p}
    coefs = doc["coefficients"]
    for i, level in enumerate(LEVELS):
        mult = np.sqrt(p * scipy_stats.f.ppf(level, p, res.df_resid))
        close([c["simultaneous_intervals"][i]["lower"] for c in coefs],
              res.params - mult * res.bse)
        close([c["simultaneous_intervals"][i]["upper"] for c in coefs],
              res.params + mult * res.bse)


# -------------------------------------------------------------------- residual checks


@pytest.mark.parametrize("name", case_ids)
def test_residual_checks(client, name):
    case = CASES[name]
    doc = service_fit(client, case)
    res = sm_fit(case)
    checks = doc["residual_checks"]
    e = np.asarray(res.wresid)
    lm, lm_p, _, _ = het_breuschpagan(e, case.X, robust=True)
    close(checks["breusch_pagan"]["statistic"], lm, what="Breusch-Pagan (Koenker) LM")
    close(checks["breusch_pagan"]["p_value"], lm_p, rtol=RTOL_P, what="Breusch-Pagan p")
    assert checks["breusch_pagan"]["df"] == case.X.shape[1] - 1
    close(checks["durbin_watson"], durbin_watson(e), what="Durbin-Watson")
    jb, jb_p, skew, kurt = jarque_bera(e)
    close(checks["jarque_bera"]["statistic"], jb, what="Jarque-Bera")
    close(checks["jarque_bera"]["p_value"], jb_p, rtol=RTOL_P, what="Jarque-Bera p")
    assert checks["jarque_bera"]["df"] == 2
    close(checks["skewness"], skew, what="skewness")
    close(checks["kurtosis"], kurt, what="kurtosis")
    close([q["value"] for q in checks["quantiles"]], np.quantile(e, [0, 0.25, 0.5, 0.75, 1]))


@pytest.mark.parametrize("name", case_ids)
def test_residual_checks_do_not_depend_on_covariance(client, name):
    case = CASES[name]
    assert (service_fit(client, case)["residual_checks"]
            == service_fit(client, case, "hc3")["residual_checks"])


# -------------------------------------------------------------------------- influence


@pytest.mark.parametrize("name", case_ids)
@pytest.mark.parametrize("covariance", ["classical", "hc1"])
def test_influence_measures(client, name, covariance):
    case = CASES[name]
    doc = service_fit(client, case, covariance)
    res = case.transformed_ols().fit()
    infl = OLSInfluence(res)
    rows = doc["rows"]
    n = case.y.size
    assert rows["row"] == list(range(n))
    fitted_sm = case.X @ res.params
    close(rows["fitted"], fitted_sm, what="fitted")
    resid = case.y - fitted_sm
    close(rows["residual"], resid, rtol=1e-9, atol=1e-9 * np.max(np.abs(resid)), what="residual")
    close(rows["leverage"], infl.hat_matrix_diag, what="leverage")
    close(rows["studentized_residual"], infl.resid_studentized_internal,
          rtol=1e-9, atol=1e-12, what="internally studentized")
    close(rows["externally_studentized_residual"], infl.resid_studentized_external,
          rtol=1e-9, atol=1e-12, what="externally studentized")
    close(rows["cooks_distance"], infl.cooks_distance[0], rtol=1e-9, atol=1e-15,
          what="Cook's distance")


# ------------------------------------------------------------------------ predictions


def _sm_prediction(case, res, weights=None):
    pred = res.get_prediction(case.new_X, weights=weights)
    return {level: pred.summary_frame(alpha=1 - level) for level in LEVELS}


@pytest.mark.parametrize("name", case_ids)
@pytest.mark.parametrize("covariance", ["classical", "hc3"])
@pytest.mark.parametrize("source", ["model", "data"])
def test_prediction_intervals(client, name, covariance, source):
    case = CASES[name]
    res = sm_fit(case, covariance)
    if source == "model":
        base = {"model": service_fit(client, case, covariance)["model"]}
    else:
        base = {**case.body, "covariance": covariance}
    new_w = [0.5, 2.0, 1.0]
    frames = _sm_prediction(case, res)
    frames_w = _sm_prediction(case, res, weights=np.array(new_w))
    p = len(case.names)
    for kind in ("mean", "observation", "band"):
        body = {**base, "new_rows": case.new_rows.tolist(), "levels": LEVELS, "kind": kind}
        doc = post(client, "/v1/predict", body)
        assert doc["kind"] == kind and doc["covariance_kind"] == covariance
        assert doc["residual_df"] == res.df_resid
        preds = doc["predictions"]
        f0 = frames[LEVELS[0]]
        close([q["mean"] for q in preds], f0["mean"], what="mean")
        close([q["standard_error"] for q in preds], f0["mean_se"], what="mean_se")
        for i, level in enumerate(LEVELS):
            fr = frames[level]
            lower = [q["intervals"][i]["lower"] for q in preds]
            upper = [q["intervals"][i]["upper"] for q in preds]
            assert [q["intervals"][i]["level"] for q in preds] == [level] * 3
            if kind == "mean":
                close(lower, fr["mean_ci_lower"], what=f"mean_ci {level}")
                close(upper, fr["mean_ci_upper"], what=f"mean_ci {level}")
            elif kind == "observation":
                close(lower, fr["obs_ci_lower"], what=f"obs_ci {level}")
                close(upper, fr["obs_ci_upper"], what=f"obs_ci {level}")
            else:
                mult = np.sqrt(p * scipy_stats.f.ppf(level, p, res.df_resid))
                close(lower, fr["mean"] - mult * fr["mean_se"], what=f"band {level}")
                close(upper, fr["mean"] + mult * fr["mean_se"], what=f"band {level}")
    body = {**base, "new_rows": case.new_rows.tolist(), "levels": LEVELS, "kind": "observation",
            "new_weights": new_w}
    preds = post(client, "/v1/predict", body)["predictions"]
    for i, level in enumerate(LEVELS):
        fr = frames_w[level]
        close([q["intervals"][i]["lower"] for q in preds], fr["obs_ci_lower"],
              what=f"weighted obs_ci {level}")
        close([q["intervals"][i]["upper"] for q in preds], fr["obs_ci_upper"],
              what=f"weighted obs_ci {level}")


def test_prediction_at_the_data_is_the_fitted_value(client):
    case = CASES["demo_ols"]
    doc = service_fit(client, case)
    body = {"model": doc["model"], "new_rows": case.x[:5].tolist()}
    preds = post(client, "/v1/predict", body)["predictions"]
    close([q["mean"] for q in preds], doc["rows"]["fitted"][:5])


# --------------------------------------------------------------------- hypotheses


def _restricted_rss(case, r, q):
    """RSS of the restricted model, fitted directly: beta = beta0 + N gamma with R beta0 = q."""
    beta0 = np.linalg.lstsq(r, q, rcond=None)[0]
    basis = linalg.null_space(r)
    y0 = case.y - case.X @ beta0
    z = case.X @ basis
    if case.weights is None:
        return sm.OLS(y0, z).fit().ssr
    return sm.WLS(y0, z, weights=case.weights).fit().ssr


@pytest.mark.parametrize("name", case_ids)
def test_classical_f_tests_of_restrictions(client, name):
    case = CASES[name]
    doc = service_fit(client, case)
    res = sm_fit(case)
    assert [h["label"] for h in doc["hypotheses"]] == [h[0] for h in case.hypotheses]
    for h, (label, restrictions) in zip(doc["hypotheses"], case.hypotheses):
        r, q = case.restriction(restrictions)
        ft = res.f_test((r, q))
        close(h["statistic"], np.squeeze(ft.fvalue), what=f"F {label}")
        close(h["p_value"], np.squeeze(ft.pvalue), rtol=RTOL_P, what=f"p {label}")
        assert h["numerator_df"] == r.shape[0] == ft.df_num
        assert h["denominator_df"] == res.df_resid == ft.df_denom
        rss_r = _restricted_rss(case, r, q)
        close(h["unrestricted_residual_sum_of_squares"], res.ssr, what=f"RSS {label}")
        close(h["restricted_residual_sum_of_squares"], rss_r, rtol=1e-9, what=f"RSS_r {label}")
        # and the partial F from the two fits
        partial = (rss_r - res.ssr) / r.shape[0] / res.mse_resid
        close(h["statistic"], partial, rtol=1e-8, what=f"partial F {label}")


def test_restricted_rss_by_dropping_columns_on_the_demo(client):
    case = CASES["demo_ols"]
    doc = service_fit(client, case)
    by_label = {h["label"]: h for h in doc["hypotheses"]}
    x = case.X
    dropped = sm.OLS(case.y, x[:, :2]).fit().ssr
    close(by_label["doors and pallets"]["restricted_residual_sum_of_squares"], dropped, rtol=1e-9)
    combined = sm.OLS(case.y, np.column_stack([x[:, :2], x[:, 2] + x[:, 3]])).fit().ssr
    close(by_label["equal effects"]["restricted_residual_sum_of_squares"], combined, rtol=1e-9)
    offset = sm.OLS(case.y - 37.0 * x[:, 1], x[:, [0, 2, 3]]).fit().ssr
    close(by_label["temperature 37"]["restricted_residual_sum_of_squares"], offset, rtol=1e-9)


@pytest.mark.parametrize("name", case_ids)
@pytest.mark.parametrize("covariance", HC)
def test_robust_wald_tests_of_restrictions(client, name, covariance):
    case = CASES[name]
    doc = service_fit(client, case, covariance)
    res = sm_fit(case, covariance)
    for h, (label, restrictions) in zip(doc["hypotheses"], case.hypotheses):
        r, q = case.restriction(restrictions)
        ft = res.f_test((r, q))
        wt = res.wald_test((r, q), use_f=True, scalar=True)
        close(h["statistic"], np.squeeze(ft.fvalue), what=f"{covariance} F {label}")
        close(h["statistic"], np.squeeze(wt.statistic), what=f"{covariance} Wald {label}")
        close(h["p_value"], np.squeeze(ft.pvalue), rtol=RTOL_P, what=f"{covariance} p {label}")
        assert h["numerator_df"] == r.shape[0]
        assert h["denominator_df"] == res.df_resid
        assert h["restricted_residual_sum_of_squares"] is None
        assert h["unrestricted_residual_sum_of_squares"] is None


@pytest.mark.parametrize("name", case_ids)
@pytest.mark.parametrize("covariance", ["classical", "hc3"])
@pytest.mark.parametrize("source", ["model", "data"])
def test_v1_test_endpoint(client, name, covariance, source):
    case = CASES[name]
    fitted = service_fit(client, case, covariance)
    if source == "model":
        body = {"model": fitted["model"]}
    else:
        body = {**case.body, "covariance": covariance}
    body["hypotheses"] = _hypotheses_json(case.hypotheses)
    doc = post(client, "/v1/test", body)
    assert doc["covariance_kind"] == covariance
    res = sm_fit(case, covariance)
    for h, (label, restrictions) in zip(doc["hypotheses"], case.hypotheses):
        r, q = case.restriction(restrictions)
        ft = res.f_test((r, q))
        assert h["label"] == label
        close(h["statistic"], np.squeeze(ft.fvalue), what=f"F {label}")
        close(h["p_value"], np.squeeze(ft.pvalue), rtol=RTOL_P, what=f"p {label}")
        if covariance == "classical":
            close(h["restricted_residual_sum_of_squares"], _restricted_rss(case, r, q),
                  rtol=1e-9, what=f"RSS_r {label}")
            close(h["unrestricted_residual_sum_of_squares"], res.ssr, rtol=1e-9)


# --------------------------------------------- no intercept, and rows of weight zero


@pytest.mark.parametrize("intercept", [True, False])
@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("covariance", ["classical"] + HC)
def test_without_intercept_and_with_zero_weights(client, intercept, weighted, covariance):
    """Rows of weight 0 take no part: statsmodels sees only the rows of positive weight."""
    rng = np.random.default_rng(3)
    n = 30
    x = np.column_stack([rng.normal(5, 2, n), rng.uniform(0, 10, n)])
    y = 1.5 * x[:, 0] - 0.3 * x[:, 1] + rng.normal(0, 1, n) * (0.3 + 0.2 * x[:, 1])
    w = rng.uniform(0.3, 3, n)
    w[[3, 7]] = 0.0
    keep = w > 0 if weighted else np.ones(n, dtype=bool)
    X = sm.add_constant(x) if intercept else x
    body = {"design_matrix": x.tolist(), "response": y.tolist(), "intercept": intercept,
            "covariance": covariance, "include": ["influence"], "levels": LEVELS}
    if weighted:
        body["weights"] = w.tolist()
    doc = post(client, "/v1/fit", body)
    model = (sm.WLS(y[keep], X[keep], weights=w[keep]) if weighted
             else sm.OLS(y[keep], X[keep]))
    res = (model.fit() if covariance == "classical"
           else model.fit(cov_type=covariance.upper(), use_t=True))
    coefs = doc["coefficients"]
    close([c["standard_error"] for c in coefs], res.bse)
    close([c["p_value"] for c in coefs], res.pvalues, rtol=RTOL_P)
    slopes = np.eye(X.shape[1])[1 if intercept else 0:]
    ft = res.f_test(slopes)
    close(doc["overall_f_test"]["statistic"], np.squeeze(ft.fvalue))
    close(doc["overall_f_test"]["p_value"], np.squeeze(ft.pvalue), rtol=RTOL_P)
    lm, lm_p, _, _ = het_breuschpagan(res.wresid, sm.add_constant(x[keep]), robust=True)
    close(doc["residual_checks"]["breusch_pagan"]["statistic"], lm)
    close(doc["residual_checks"]["breusch_pagan"]["p_value"], lm_p, rtol=RTOL_P)
    close(doc["residual_checks"]["durbin_watson"], durbin_watson(res.wresid))
    assert doc["rows"]["row"] == np.flatnonzero(keep).tolist()
    sw = np.sqrt(w[keep]) if weighted else np.ones(keep.sum())
    infl = OLSInfluence(sm.OLS(y[keep] * sw, X[keep] * sw[:, None]).fit())
    close(doc["rows"]["leverage"], infl.hat_matrix_diag)
    close(doc["rows"]["externally_studentized_residual"], infl.resid_studentized_external,
          rtol=1e-9, atol=1e-12)
    close(doc["rows"]["cooks_distance"], infl.cooks_distance[0], rtol=1e-9, atol=1e-15)
