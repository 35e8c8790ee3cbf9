"""Prediction intervals and partial F tests against an independent 50-digit mpmath reference.

Source of every expected value in this file: the reference written below, in mpmath at
``mp.dps = 50``, from the exact float64 inputs the test posts. It shares no code with
``service``:

* least squares by the normal equations ``X'WX b = X'Wy`` on the column-equilibrated
  design (their rounding, about 1e-50 times the squared condition number, is far below
  double precision here), the inverse ``(X'WX)^-1`` by mpmath, ``s^2 = RSS / (n - p)``
  with the RSS summed from the 50-digit residuals;
* Student t quantiles: ``q`` with ``P(|T| >= q) = 1 - L``, where
  ``P(|T| >= q) = I_{df/(df+q^2)}(df/2, 1/2)`` (Abramowitz and Stegun 26.7.1), solved by
  ``mpmath.findroot`` on mpmath's regularized incomplete beta;
* F quantiles likewise: ``f`` with ``P(F >= f) = 1 - L``, where
  ``P(F >= f) = I_{dfd/(dfd+dfn f)}(dfd/2, dfn/2)`` (A&S 26.6.2);
* predictions for a new row x: ``mean = x'b``, ``se = s sqrt(x'(X'WX)^-1 x)``; per level
  ``mean +- t se`` (kind mean), ``mean +- t sqrt(s^2/w + se^2)`` (kind observation, new
  weight w, 1 by default), ``mean +- sqrt(p F_L(p, n-p)) se`` (kind band,
  Working-Hotelling);
* partial F tests: ``F = d'(R (X'WX)^-1 R')^-1 d / (m s^2)`` with ``d = R b - q``, checked
  within the reference against the restricted least-squares fit solved directly (the
  KKT system ``[[X'WX, R'], [R, 0]]``), ``F = (RSS_r - RSS) / (m s^2)``; its p value
  ``I_{dfd/(dfd+m F)}(dfd/2, m/2)``.

Agreement is measured in significant decimal digits,
``-log10(|service - reference| / scale)`` (capped at 17), with ``scale`` the magnitude of
the reference figure (for an interval bound: the larger of the bound and the interval's
half-width, so that a bound near zero is judged by the error in what it is made of).
Every problem here is well conditioned; 12 digits are required.
"""

from __future__ import annotations

import json
import math
from functools import lru_cache

import mpmath
import numpy as np
import pytest
from scipy import stats as scipy_stats

from demo_data import demo_table
from service.app import create_app

DPS = 50
MIN_DIGITS = 12.0
LEVELS = [0.9, 0.99]


# --------------------------------------------------------------------------- reference


def _t_two_sided_p(q, df):
    return mpmath.betainc(mpmath.mpf(df) / 2, mpmath.mpf(1) / 2, 0, df / (df + q * q),
                          regularized=True)


def _f_upper_p(f, dfn, dfd):
    dfn, dfd = mpmath.mpf(dfn), mpmath.mpf(dfd)
    return mpmath.betainc(dfd / 2, dfn / 2, 0, dfd / (dfd + dfn * f), regularized=True)


@lru_cache(maxsize=None)
def t_quantile(level, df):
    """``q > 0`` with ``P(|T| >= q) = 1 - level`` (scipy gives only the starting point)."""
    with mpmath.workdps(DPS):
        alpha = 1 - mpmath.mpf(level)
        start = mpmath.mpf(float(scipy_stats.t.isf((1 - level) / 2, df)))
        q = mpmath.findroot(lambda s: _t_two_sided_p(s, df) - alpha, start,
                            tol=mpmath.mpf(10) ** -45)
        assert abs(_t_two_sided_p(q, df) - alpha) < mpmath.mpf(10) ** -40
        return q


@lru_cache(maxsize=None)
def f_quantile(level, dfn, dfd):
    """``f`` with ``P(F >= f) = 1 - level``."""
    with mpmath.workdps(DPS):
        alpha = 1 - mpmath.mpf(level)
        start = mpmath.mpf(float(scipy_stats.f.ppf(level, dfn, dfd)))
        f = mpmath.findroot(lambda s: _f_upper_p(s, dfn, dfd) - alpha, start,
                            tol=mpmath.mpf(10) ** -45)
        assert abs(_f_upper_p(f, dfn, dfd) - alpha) < mpmath.mpf(10) ** -40
        return f


class Reference:
    """The weighted least-squares fit in 50-digit arithmetic (intercept first when asked)."""

    def __init__(self, x, y, weights=None, intercept=True):
        x = np.asarray(x, dtype=float)
        with mpmath.workdps(DPS):
            mpf = mpmath.mpf
            rows = [[mpf(float(v)) for v in r] for r in x]
            if intercept:
                rows = [[mpf(1)] + r for r in rows]
            self.intercept = intercept
            self.ys = [mpf(float(v)) for v in y]
            self.ws = ([mpf(1)] * len(self.ys) if weights is None
                       else [mpf(float(v)) for v in weights])
            self.rows = rows
            n, k = len(rows), len(rows[0])
            self.n, self.k, self.df = n, k, n - k
            s = [mpmath.sqrt(mpmath.fsum(self.ws[i] * rows[i][j] ** 2 for i in range(n)))
                 for j in range(k)]
            g = mpmath.matrix(k, k)
            c = mpmath.matrix(k, 1)
            for a in range(k):
                c[a] = mpmath.fsum(self.ws[i] * rows[i][a] * self.ys[i] for i in range(n)) / s[a]
                for b in range(a, k):
                    g[a, b] = g[b, a] = mpmath.fsum(
                        self.ws[i] * rows[i][a] * rows[i][b] for i in range(n)) / (s[a] * s[b])
            ginv_scaled = mpmath.inverse(g)
            bs = ginv_scaled * c
            self.b = [bs[j] / s[j] for j in range(k)]
            self.ginv = mpmath.matrix(k, k)
            for a in range(k):
                for b in range(k):
                    self.ginv[a, b] = ginv_scaled[a, b] / (s[a] * s[b])
            self.rss = self._rss(self.b)
            self.s2 = self.rss / self.df

    def _rss(self, beta):
        r = [self.ys[i] - mpmath.fdot(self.rows[i], beta) for i in range(self.n)]
        return mpmath.fsum(self.ws[i] * r[i] * r[i] for i in range(self.n))

    def _row(self, new):
        vals = [mpmath.mpf(float(v)) for v in new]
        return [mpmath.mpf(1)] + vals if self.intercept else vals

    def predict(self, new_rows, kind, levels, new_weights=None):
        out = []
        with mpmath.workdps(DPS):
            for i, new in enumerate(new_rows):
                x0 = self._row(new)
                mean = mpmath.fdot(x0, self.b)
                quad = mpmath.fsum(x0[a] * self.ginv[a, b] * x0[b]
                                   for a in range(self.k) for b in range(self.k))
                se = mpmath.sqrt(self.s2 * quad)
                if kind == "observation":
                    w = 1 if new_weights is None else mpmath.mpf(float(new_weights[i]))
                    spread = mpmath.sqrt(self.s2 / w + se * se)
                else:
                    spread = se
                intervals = []
                for lv in levels:
                    if kind == "band":
                        mult = mpmath.sqrt(self.k * f_quantile(lv, self.k, self.df))
                    else:
                        mult = t_quantile(lv, self.df)
                    intervals.append((lv, mean - mult * spread, mean + mult * spread,
                                      mult * spread))
                out.append((mean, se, intervals))
        return out

    def index(self, name, names):
        return names.index(name)

    def partial_f(self, restrictions, names):
        """(F, p, RSS_r) for ``restrictions``: list of ({name: multiplier}, equals)."""
        with mpmath.workdps(DPS):
            m = len(restrictions)
            r = mpmath.matrix(m, self.k)
            q = mpmath.matrix(m, 1)
            for i, (coefs, equals) in enumerate(restrictions):
                for name, mult in coefs.items():
                    r[i, names.index(name)] += mpmath.mpf(float(mult))
                q[i] = mpmath.mpf(float(equals))
            b = mpmath.matrix(self.b)
            d = r * b - q
            middle = r * self.ginv * r.T
            f = (d.T * mpmath.inverse(middle) * d)[0] / (m * self.s2)
            # The restricted fit, solved directly from its KKT system.
            g = mpmath.inverse(self.ginv)
            kkt = mpmath.matrix(self.k + m, self.k + m)
            rhs = mpmath.matrix(self.k + m, 1)
            for a in range(self.k):
                for c in range(self.k):
                    kkt[a, c] = g[a, c]
                rhs[a] = mpmath.fsum(self.ws[i] * self.rows[i][a] * self.ys[i]
                                     for i in range(self.n))
            for i in range(m):
                for a in range(self.k):
                    kkt[self.k + i, a] = kkt[a, self.k + i] = r[i, a]
                rhs[self.k + i] = q[i]
            sol = mpmath.lu_solve(kkt, rhs)
            rss_r = self._rss([sol[a] for a in range(self.k)])
            f_direct = (rss_r - self.rss) / (m * self.s2)
            assert abs(f_direct - f) <= mpmath.mpf(10) ** -30 * max(abs(f), 1)
            p = _f_upper_p(f, m, self.df)
            return f, p, rss_r


def digits(actual, expected, scale=None):
    if actual is None:
        return -math.inf
    scale = abs(expected) if scale is None else abs(scale)
    err = abs(mpmath.mpf(actual) - expected)
    if err == 0:
        return 17.0
    if scale == 0:
        return -math.inf
    return min(17.0, float(-mpmath.log10(err / scale)))


# ------------------------------------------------------------------------------ cases


def _random(weighted):
    rng = np.random.default_rng(515)
    n = 30
    x = np.column_stack([rng.normal(0.0, 1.0, n), rng.uniform(-2.0, 2.0, n),
                         rng.normal(1.0, 0.5, n)])
    y = 3.0 + 0.5 * x[:, 0] - 1.2 * x[:, 1] + 0.7 * x[:, 2] + rng.normal(0.0, 0.4, n)
    w = rng.uniform(0.5, 2.0, n) if weighted else None
    body = {"design_matrix": x.tolist(), "response": y.tolist(),
            "column_names": ["u", "v", "z"]}
    if weighted:
        body["weights"] = w.tolist()
    new = [[0.0, 0.0, 1.0], [1.5, -1.0, 0.2], [-2.0, 1.8, 2.1], [0.3, 0.1, -0.4]]
    hyps = [("u and z", [({"u": 1}, 0.0), ({"z": 1}, 0.0)]),
            ("u = v + 1", [({"u": 1, "v": -1}, 1.0)]),
            ("three", [({"intercept": 1}, 3.0), ({"u": 2, "z": 1}, 1.5), ({"v": 1}, -1.0)])]
    return dict(x=x, y=y, w=w, body=body, names=["intercept", "u", "v", "z"], new=new,
                hyps=hyps)


def _demo(weighted):
    demo = demo_table(weight_seed=99 if weighted else None)
    body, cols, x, y, w = demo.body, demo.names, demo.x, demo.y, demo.w
    new = [[10.0, 200.0, 60.0], [-5.0, 100.0, 20.0], [30.0, 400.0, 120.0]]
    hyps = [("doors and pallets", [({"door_openings": 1}, 0.0), ({"pallets_received": 1}, 0.0)]),
            ("equal effects", [({"door_openings": 1, "pallets_received": -1}, 0.0)]),
            # 35, not 37: the estimate is 36.93, and a value next to it would test the
            # cancellation in R b - q rather than the service.
            ("temperature 35", [({"temp_c": 1}, 35.0)])]
    return dict(x=x, y=y, w=w, body=body, names=["intercept"] + cols, new=new, hyps=hyps)


CASES = {"random": _random(False), "random_weighted": _random(True),
         "demo": _demo(False), "demo_weighted": _demo(True)}
_REFS: dict = {}


def reference(name):
    if name not in _REFS:
        c = CASES[name]
        _REFS[name] = Reference(c["x"], c["y"], c["w"])
    return _REFS[name]


@pytest.fixture(scope="module")
def client():
    return create_app().test_client()


def post(client, path, body):
    resp = client.post(path, data=json.dumps(body), content_type="application/json")
    assert resp.status_code == 200, resp.get_data(as_text=True)
    return resp.get_json()


def _hyp_json(hyps):
    return [{"label": label, "restrictions": [{"coefficients": c, "equals": q} for c, q in rs]}
            for label, rs in hyps]


_MODELS: dict = {}


def fitted_model(client, name):
    if name not in _MODELS:
        _MODELS[name] = post(client, "/v1/fit", {**CASES[name]["body"], "return_model": True})
    return _MODELS[name]


# ------------------------------------------------------------------------------ tests


def test_reference_quantiles_are_consistent_with_scipy():
    """A sanity check on the reference itself (to scipy's double precision)."""
    for lv in LEVELS:
        assert float(t_quantile(lv, 17)) == pytest.approx(scipy_stats.t.isf((1 - lv) / 2, 17),
                                                          rel=1e-12)
        assert float(f_quantile(lv, 4, 17)) == pytest.approx(scipy_stats.f.ppf(lv, 4, 17),
                                                             rel=1e-12)


def test_model_summary_matches_the_reference(client):
    for name in CASES:
        ref = reference(name)
        model = fitted_model(client, name)["model"]
        worst = 17.0
        for j in range(ref.k):
            worst = min(worst, digits(model["estimates"][j], ref.b[j]))
            for i in range(ref.k):
                scale = mpmath.sqrt(ref.s2 * ref.ginv[i, i] * ref.s2 * ref.ginv[j, j])
                worst = min(worst, digits(model["covariance"][i][j], ref.s2 * ref.ginv[i, j],
                                          scale))
        worst = min(worst, digits(model["residual_variance"], ref.s2))
        assert model["residual_df"] == ref.df
        assert worst >= MIN_DIGITS, (name, worst)


@pytest.mark.parametrize("name", list(CASES))
@pytest.mark.parametrize("kind, new_weights", [("mean", False), ("observation", False),
                                               ("observation", True), ("band", False)])
@pytest.mark.parametrize("source", ["data", "model"])
def test_prediction_intervals(client, name, kind, source, new_weights):
    case = CASES[name]
    ref = reference(name)
    weights = [0.25, 4.0, 1.0, 2.5][:len(case["new"])] if new_weights else None
    base = ({"model": fitted_model(client, name)["model"]} if source == "model"
            else dict(case["body"]))
    body = {**base, "new_rows": case["new"], "levels": LEVELS, "kind": kind}
    if weights is not None:
        body["new_weights"] = weights
    doc = post(client, "/v1/predict", body)
    assert doc["kind"] == kind and doc["residual_df"] == ref.df
    assert doc["warnings"] == []
    expected = ref.predict(case["new"], kind, LEVELS, weights)
    report = []
    for got, (mean, se, intervals) in zip(doc["predictions"], expected):
        report.append(("mean", digits(got["mean"], mean)))
        report.append(("se", digits(got["standard_error"], se)))
        assert [iv["level"] for iv in got["intervals"]] == LEVELS
        for iv, (lv, lower, upper, half) in zip(got["intervals"], intervals):
            report.append((f"lower {lv}", digits(iv["lower"], lower, max(abs(lower), half))))
            report.append((f"upper {lv}", digits(iv["upper"], upper, max(abs(upper), half))))
            report.append((f"half-width {lv}",
                           digits((iv["upper"] - iv["lower"]) / 2, half)
                           if abs(mean) < 1e3 * half else 17.0))
    worst = min(report, key=lambda r: r[1])
    assert worst[1] >= MIN_DIGITS, (name, kind, source, worst)


def test_observation_with_unit_new_weights_equals_no_new_weights(client):
    case = CASES["random_weighted"]
    base = {"model": fitted_model(client, "random_weighted")["model"], "new_rows": case["new"],
            "levels": LEVELS, "kind": "observation"}
    plain = post(client, "/v1/predict", base)
    unit = post(client, "/v1/predict", {**base, "new_weights": [1.0] * len(case["new"])})
    assert plain["predictions"] == unit["predictions"]


@pytest.mark.parametrize("name", list(CASES))
@pytest.mark.parametrize("where", ["fit", "test-data", "test-model"])
def test_partial_f_tests(client, name, where):
    case = CASES[name]
    ref = reference(name)
    hyps = _hyp_json(case["hyps"])
    if where == "fit":
        doc = post(client, "/v1/fit", {**case["body"], "hypotheses": hyps})
    elif where == "test-data":
        doc = post(client, "/v1/test", {**case["body"], "hypotheses": hyps})
    else:
        doc = post(client, "/v1/test", {"model": fitted_model(client, name)["model"],
                                        "hypotheses": hyps})
    assert len(doc["hypotheses"]) == len(case["hyps"])
    for got, (label, restrictions) in zip(doc["hypotheses"], case["hyps"]):
        f, p, rss_r = ref.partial_f(restrictions, case["names"])
        assert got["label"] == label
        assert got["numerator_df"] == len(restrictions)
        assert got["denominator_df"] == ref.df
        results = {"statistic": digits(got["statistic"], f),
                   "p_value": digits(got["p_value"], p),
                   "restricted_rss": digits(got["restricted_residual_sum_of_squares"], rss_r),
                   "unrestricted_rss": digits(got["unrestricted_residual_sum_of_squares"],
                                              ref.rss)}
        worst = min(results.items(), key=lambda kv: kv[1])
        assert worst[1] >= MIN_DIGITS, (name, where, label, results)
