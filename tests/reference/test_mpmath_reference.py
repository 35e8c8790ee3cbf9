"""The service against an independent 50-digit reference written here in mpmath.

Source of every expected value in this file: the reference implementation below
(``reference_fit``), which recomputes the whole fit in mpmath at ``mp.dps = 50``
from the exact float64 inputs the test posts. It shares no code with ``service``:

* least squares by the normal equations on the column-equilibrated (weighted)
  design, in 50-digit arithmetic (their rounding error, about 1e-50 times the
  squared condition number of the equilibrated design, is far below double
  precision for every problem here), with the scaling undone afterwards;
* t p values ``P(|T| >= |t|) = I_x(df/2, 1/2)`` with ``x = df / (df + t^2)`` and
  F p values ``P(F >= f) = I_x(dfd/2, dfn/2)`` with ``x = dfd / (dfd + dfn f)``
  (Abramowitz and Stegun 26.7.1 / 26.6.2), through mpmath's regularized incomplete
  beta ``mpmath.betainc(a, b, 0, x, regularized=True)``;
* t quantiles by root finding (``mpmath.findroot``) on that same incomplete beta.

Agreement is measured in significant decimal digits,
``-log10(|service - reference| / |reference|)`` (capped at 17).
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
from scipy import stats as scipy_stats

from service.app import create_app

DPS = 50
LEVELS = [0.9, 0.95, 0.99]
WELL_CONDITIONED_DIGITS = 13.0


# --------------------------------------------------------------------------- reference


def _mp_t_two_sided_p(t, df):
    """``P(|T| >= |t|)``, T ~ Student t(df): I_{df/(df+t^2)}(df/2, 1/2) (A&S 26.7.1)."""
    x = df / (df + t * t)
    return mpmath.betainc(df / 2, mpmath.mpf(1) / 2, 0, x, regularized=True)


def _mp_f_upper_p(f, dfn, dfd):
    """``P(F >= f)``, F ~ F(dfn, dfd): I_{dfd/(dfd+dfn f)}(dfd/2, dfn/2) (A&S 26.6.2)."""
    x = dfd / (dfd + dfn * f)
    return mpmath.betainc(mpmath.mpf(dfd) / 2, mpmath.mpf(dfn) / 2, 0, x, regularized=True)


def _mp_t_quantile_two_sided(level, df):
    """``q > 0`` with ``P(|T| >= q) = 1 - level``: root of the incomplete beta above.

    The starting point comes from scipy (double precision); findroot then polishes it in
    50-digit arithmetic, so the answer depends only on mpmath's betainc.
    """
    alpha = 1 - mpmath.mpf(level)
    start = mpmath.mpf(float(scipy_stats.t.isf((1 - level) / 2, df)))
    q = mpmath.findroot(lambda s: _mp_t_two_sided_p(s, df) - alpha, start, tol=mpmath.mpf(10) ** (-45))
    assert abs(_mp_t_two_sided_p(q, df) - alpha) < mpmath.mpf(10) ** (-40) * alpha
    return q


def reference_fit(x, y, *, intercept=True, weights=None, levels=LEVELS):
    """The whole fit in 50-digit mpmath from the float64 inputs (rows of weight 0 left out)."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    with mpmath.workdps(DPS):
        mpf = mpmath.mpf
        keep = list(range(len(y))) if weights is None else [i for i, w in enumerate(weights) if w > 0]
        n = len(keep)
        rows = [[mpf(float(v)) for v in x[i]] for i in keep]
        if intercept:
            rows = [[mpf(1)] + r for r in rows]
        ys = [mpf(float(y[i])) for i in keep]
        ws = [mpf(1)] * n if weights is None else [mpf(float(weights[i])) for i in keep]
        k = len(rows[0])
        # Equilibrate: column j of sqrt(W) X divided by its 2-norm s_j.
        s = [mpmath.sqrt(mpmath.fsum(ws[i] * rows[i][j] ** 2 for i in range(n))) for j in range(k)]
        a = [[rows[i][j] / s[j] for j in range(k)] for i in range(n)]
        g = mpmath.matrix(k, k)
        c = mpmath.matrix(k, 1)
        for p in range(k):
            c[p] = mpmath.fsum(ws[i] * a[i][p] * ys[i] for i in range(n))
            for q in range(p, k):
                g[p, q] = g[q, p] = mpmath.fsum(ws[i] * a[i][p] * a[i][q] for i in range(n))
        ginv = mpmath.inverse(g)
        bs = ginv * c
        b = [bs[j] / s[j] for j in range(k)]
        cdiag = [ginv[j, j] / s[j] ** 2 for j in range(k)]  # diag((X'WX)^-1)
        fitted = [mpmath.fsum(r[j] * b[j] for j in range(k)) for r in rows]
        resid = [yi - fi for yi, fi in zip(ys, fitted)]
        rss = mpmath.fsum(w * r * r for w, r in zip(ws, resid))
        if intercept:
            ybar = mpmath.fsum(w * v for w, v in zip(ws, ys)) / mpmath.fsum(ws)
        else:
            ybar = mpf(0)
        reg = mpmath.fsum(w * (f - ybar) ** 2 for w, f in zip(ws, fitted))
        tss = mpmath.fsum(w * (v - ybar) ** 2 for w, v in zip(ws, ys))
        df = n - k
        s2 = rss / df
        se = [mpmath.sqrt(s2 * cd) for cd in cdiag]
        t = [bj / sj for bj, sj in zip(b, se)]
        p = [_mp_t_two_sided_p(tj, df) for tj in t]
        quant = {lv: _mp_t_quantile_two_sided(lv, df) for lv in levels}
        intervals = [{lv: (bj - quant[lv] * sj, bj + quant[lv] * sj) for lv in levels}
                     for bj, sj in zip(b, se)]
        dfn = k - (1 if intercept else 0)
        f = (reg / dfn) / s2
        fp = _mp_f_upper_p(f, dfn, df)
        return {"n": n, "k": k, "df": df, "b": b, "se": se, "t": t, "p": p,
                "quantiles": quant, "intervals": intervals, "sigma": mpmath.sqrt(s2),
                "r2": reg / tss, "rss": rss, "f": f, "f_p": fp, "dfn": dfn}


# --------------------------------------------------------------------------- helpers


def digits(computed, reference):
    """Significant digits of agreement, capped at 17 (an exact match)."""
    assert computed is not None, "the service returned null where the reference has a number"
    ref = mpmath.mpf(reference)
    err = abs(mpmath.mpf(float(computed)) - ref)
    if err == 0:
        return 17.0
    scale = abs(ref)
    if scale == 0:
        return float(-mpmath.log10(err))
    return min(17.0, float(-mpmath.log10(err / scale)))


def digits_abs(computed, reference, scale):
    """Digits of agreement measured against ``scale`` (for values that may cancel to ~0)."""
    err = abs(mpmath.mpf(float(computed)) - mpmath.mpf(reference))
    if err == 0:
        return 17.0
    return min(17.0, float(-mpmath.log10(err / abs(mpmath.mpf(scale)))))


@pytest.fixture(scope="module")
def client():
    return create_app().test_client()


@pytest.fixture(scope="module")
def double_client():
    """The service with the extended-precision path switched off (double precision only)."""
    return create_app({"extended_max_work": 1}).test_client()


@pytest.fixture(scope="module")
def extended_client():
    """The service forced onto its extended-precision path for every problem."""
    return create_app({"extended_below_digits": 99.0}).test_client()


@pytest.fixture(scope="module")
def clients(client, double_client, extended_client):
    return {"default": client, "double_only": double_client, "extended": extended_client}


def post(client, x, y, *, intercept=True, weights=None, levels=LEVELS):
    body = {"design_matrix": np.asarray(x, dtype=float).tolist(),
            "response": np.asarray(y, dtype=float).tolist(),
            "intercept": intercept, "levels": list(levels)}
    if weights is not None:
        body["weights"] = np.asarray(weights, dtype=float).tolist()
    r = client.post("/v1/fit", json=body)
    assert r.status_code == 200, r.get_json()
    return r.get_json()


def agreement(got, ref):
    """Per-figure minimum digits of agreement between the service's JSON and the reference."""
    coefs = got["coefficients"]
    assert got["n_observations"] == ref["n"]
    assert got["n_parameters"] == ref["k"]
    assert got["residual_df"] == ref["df"]
    out = {
        "estimate": min(digits(c["estimate"], b) for c, b in zip(coefs, ref["b"])),
        "standard_error": min(digits(c["standard_error"], s) for c, s in zip(coefs, ref["se"])),
        "t_statistic": min(digits(c["t_statistic"], t) for c, t in zip(coefs, ref["t"])),
        "p_value": min(digits(c["p_value"], p) for c, p in zip(coefs, ref["p"])),
        "residual_sd": digits(got["fit"]["residual_standard_deviation"], ref["sigma"]),
        "r_squared": digits(got["fit"]["r_squared"], ref["r2"]),
        "f_statistic": digits(got["overall_f_test"]["statistic"], ref["f"]),
        "f_p_value": digits(got["overall_f_test"]["p_value"], ref["f_p"]),
    }
    # Interval endpoints b -+ q se: measured against max(|b|, q se), the size of the two
    # terms, because an endpoint near zero is a cancellation no double result avoids.
    # The quantile itself (half-width / se) is compared relatively.
    ends, quants = [], []
    for c, b, s, ivs in zip(coefs, ref["b"], ref["se"], ref["intervals"]):
        by_level = {iv["level"]: iv for iv in c["intervals"]}
        assert sorted(by_level) == sorted(ivs)
        for lv, (lo, hi) in ivs.items():
            iv = by_level[lv]
            scale = max(abs(b), ref["quantiles"][lv] * s)
            ends.append(digits_abs(iv["lower"], lo, scale))
            ends.append(digits_abs(iv["upper"], hi, scale))
            # Only where the half-width is not swamped by |b| (|t| <= 10 q): otherwise
            # the rounding of the endpoints themselves hides the quantile.
            if c["standard_error"] and abs(b) <= 10 * ref["quantiles"][lv] * s:
                half = (mpmath.mpf(iv["upper"]) - mpmath.mpf(iv["lower"])) / 2
                quants.append(digits(half / mpmath.mpf(c["standard_error"]),
                                     ref["quantiles"][lv]))
    out["interval_endpoint"] = min(ends)
    if quants:
        out["t_quantile"] = min(quants)
    return out


def assert_digits(table, minimum, label):
    bad = {k: round(v, 2) for k, v in table.items() if v < minimum}
    assert not bad, f"{label}: fewer than {minimum} digits of agreement with mpmath: {bad}"


# --------------------------------------------------------------------------- the reference itself


def test_reference_distributions_against_closed_forms():
    # Source: closed forms of Student's t for df = 1 (Cauchy: P(|T| >= t) =
    # (2/pi) atan(1/t), quantile tan(pi level / 2)) and df = 2 (P(|T| >= t) =
    # 1 - t / sqrt(2 + t^2)); and F(2, d): P(F >= f) = (1 + 2 f / d)^(-d/2).
    # They check the reference, not the service.
    with mpmath.workdps(DPS):
        tol = mpmath.mpf(10) ** (-40)
        for t in ["0.3", "1", "7.5", "1e5"]:
            t = mpmath.mpf(t)
            assert abs(_mp_t_two_sided_p(t, 1) / (2 / mpmath.pi * mpmath.atan(1 / t)) - 1) < tol
            assert abs(_mp_t_two_sided_p(t, 2) / (1 - t / mpmath.sqrt(2 + t * t)) - 1) < tol
        for level in LEVELS:
            q = _mp_t_quantile_two_sided(level, 1)
            assert abs(q / mpmath.tan(mpmath.pi * mpmath.mpf(level) / 2) - 1) < tol
        for f, d in [("0.5", 7), ("3", 20), ("400", 38)]:
            f = mpmath.mpf(f)
            assert abs(_mp_f_upper_p(f, 2, d) / (1 + 2 * f / d) ** (-mpmath.mpf(d) / 2) - 1) < tol


def test_reference_least_squares_is_a_solution():
    # Source: the normal equations X'W(y - Xb) = 0, checked to 40 digits relative to
    # |X'W| |y|, and an exactly representable fit recovered exactly.
    x, y = random_problem(3)
    ref = reference_fit(x, y, levels=[0.95])
    with mpmath.workdps(DPS):
        rows = [[mpmath.mpf(1)] + [mpmath.mpf(float(v)) for v in r] for r in x]
        resid = [mpmath.mpf(float(v)) - mpmath.fsum(a * b for a, b in zip(r, ref["b"]))
                 for r, v in zip(rows, y)]
        for j in range(ref["k"]):
            g = mpmath.fsum(r[j] * e for r, e in zip(rows, resid))
            size = mpmath.fsum(abs(r[j]) for r in rows) * max(abs(mpmath.mpf(float(v))) for v in y)
            assert abs(g) < mpmath.mpf(10) ** (-40) * size
    xs = np.arange(12.0).reshape(-1, 1)
    exact = reference_fit(xs, 2.0 + 0.5 * xs[:, 0] + np.tile([1.0, -1.0], 6), levels=[0.95])
    # Residuals +-1 alternate; the slope's shift is 6/143 (solve by hand: sum (x - 5.5) e
    # = -6 over sum (x - 5.5)^2 = 143).
    with mpmath.workdps(DPS):
        assert abs(exact["b"][1] - (mpmath.mpf(1) / 2 - mpmath.mpf(6) / 143)) < mpmath.mpf(10) ** (-45)


# --------------------------------------------------------------------------- problems


def random_problem(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(10, 201))
    m = int(rng.integers(1, 8))  # predictors; with the intercept 2 to 8 columns
    x = rng.normal(size=(n, m)) * rng.uniform(0.5, 20.0, size=m) + rng.normal(size=m)
    beta = rng.normal(size=m)
    y = 3.0 + x @ beta + rng.normal(scale=rng.uniform(0.1, 5.0), size=n)
    return x, y


@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5, 6])
def test_random_problems_agree_to_13_digits(client, seed):
    # Source: the 50-digit mpmath reference above.
    x, y = random_problem(seed)
    got = post(client, x, y)
    assert_digits(agreement(got, reference_fit(x, y)), WELL_CONDITIONED_DIGITS, f"seed {seed}")


@pytest.mark.parametrize("seed", [7, 8])
def test_random_problems_extended_path_agree_to_13_digits(extended_client, seed):
    # Source: the 50-digit mpmath reference above; the service's mpmath path, forced.
    x, y = random_problem(seed)
    got = post(extended_client, x, y)
    assert got["numerics"]["method"] == "extended_precision"
    assert_digits(agreement(got, reference_fit(x, y)), WELL_CONDITIONED_DIGITS, f"seed {seed}")


def test_random_problem_without_intercept(client):
    # Source: the 50-digit mpmath reference above (uncentered R squared and F).
    x, y = random_problem(11)
    got = post(client, x, y, intercept=False)
    assert got["fit"]["centered"] is False
    ref = reference_fit(x, y, intercept=False)
    assert_digits(agreement(got, ref), WELL_CONDITIONED_DIGITS, "no intercept")


@pytest.mark.parametrize("seed", [21, 22, 23])
def test_weighted_problems_agree_to_13_digits(client, seed):
    # Source: the 50-digit mpmath reference above, weighted normal equations.
    x, y = random_problem(seed)
    rng = np.random.default_rng(seed + 1000)
    w = rng.uniform(0.05, 20.0, size=len(y))
    got = post(client, x, y, weights=w)
    assert_digits(agreement(got, reference_fit(x, y, weights=w)), WELL_CONDITIONED_DIGITS,
                  f"weighted seed {seed}")


def test_weighted_problem_with_zero_weights(client):
    # Source: the 50-digit mpmath reference above, fitted to the rows of positive weight
    # only (DESIGN.md: rows of weight zero take no part in the fit).
    x, y = random_problem(31)
    rng = np.random.default_rng(31)
    w = rng.uniform(0.5, 2.0, size=len(y))
    w[::7] = 0.0
    got = post(client, x, y, weights=w)
    assert_digits(agreement(got, reference_fit(x, y, weights=w)), WELL_CONDITIONED_DIGITS,
                  "zero weights")


def _extreme_scale_problem():
    rng = np.random.default_rng(41)
    n = 60
    base = rng.normal(size=(n, 3))
    y = 2.0 + base @ np.array([1.5, -0.7, 0.3]) + rng.normal(scale=0.5, size=n)
    x = base.copy()
    x[:, 0] *= 1e200
    x[:, 1] *= 1e-200
    return x, y


@pytest.mark.parametrize("path", ["default", "double_only", "extended"])
@pytest.mark.parametrize("weighted", [False, True])
def test_extreme_column_scales(clients, path, weighted):
    # Source: the 50-digit mpmath reference above (mpf exponents do not overflow).
    # One column times 1e200, another times 1e-200: X'X would overflow and underflow in
    # double precision, so only an equilibrated solver gets this right.
    x, y = _extreme_scale_problem()
    w = np.random.default_rng(42).uniform(0.5, 3.0, size=len(y)) if weighted else None
    got = post(clients[path], x, y, weights=w)
    ref = reference_fit(x, y, weights=w)
    table = agreement(got, ref)
    assert_digits({k: table[k] for k in ("estimate", "standard_error")}, 12.0,
                  f"extreme scales ({path}, method {got['numerics']['method']})")
    assert_digits(table, WELL_CONDITIONED_DIGITS - 1, "extreme scales (all figures)")


def _near_collinear_problem(seed, delta):
    rng = np.random.default_rng(seed)
    n = 80
    x1 = rng.normal(size=n)
    x2 = x1 + delta * rng.normal(size=n)  # condition number about 1 / delta
    x3 = rng.normal(size=n)
    x = np.column_stack([x1, x2, x3])
    y = 1.0 + x1 + 2.0 * x2 - x3 + rng.normal(scale=0.1, size=n)
    return x, y


@pytest.mark.parametrize("path", ["default", "double_only"])
@pytest.mark.parametrize("seed", [51, 52])
def test_near_collinear_claimed_digits_hold(client, double_client, path, seed):
    # Source: the 50-digit mpmath reference above. numerics.estimated_correct_digits
    # is the service's claim for the estimates and standard errors; the true agreement
    # must not fall short of it by more than one digit.
    x, y = _near_collinear_problem(seed, 1e-8)
    got = post(client if path == "default" else double_client, x, y)
    kappa = got["conditioning"]["condition_number"]
    assert 1e7 < kappa < 1e10, kappa
    claimed = got["numerics"]["estimated_correct_digits"]
    ref = reference_fit(x, y)
    coefs = got["coefficients"]
    actual = {
        "estimate": min(digits(c["estimate"], b) for c, b in zip(coefs, ref["b"])),
        "standard_error": min(digits(c["standard_error"], s) for c, s in zip(coefs, ref["se"])),
    }
    assert_digits(actual, claimed - 1, f"{path} seed {seed}, kappa {kappa:.3g}, "
                  f"method {got['numerics']['method']}, claimed {claimed}")


def _huge_t_problem():
    rng = np.random.default_rng(61)
    n = 40
    x = np.linspace(-1.0, 1.0, n) + rng.normal(scale=0.05, size=n)
    y = 1.0 + 2.0 * x + rng.normal(scale=4e-7, size=n)
    return x.reshape(-1, 1), y


@pytest.mark.parametrize("path", ["default", "double_only"])
def test_huge_t_statistic_tiny_p_value(clients, path):
    # Source: the 50-digit mpmath reference above. A p value near 1e-250 is a normal
    # double (DESIGN.md section 3: p values from survival functions, never 1 - cdf), so
    # it must come back as that positive number, to 10 digits, not as 0.
    x, y = _huge_t_problem()
    ref = reference_fit(x, y)
    p_slope = ref["p"][1]
    assert mpmath.mpf("1e-280") < p_slope < mpmath.mpf("1e-220"), p_slope  # the premise
    got = post(clients[path], x, y)
    slope = got["coefficients"][1]
    assert slope["p_value"] is not None and slope["p_value"] > 0
    assert digits(slope["p_value"], p_slope) >= 10
    f_test = got["overall_f_test"]
    assert f_test["p_value"] is not None and f_test["p_value"] > 0
    assert digits(f_test["p_value"], ref["f_p"]) >= 10
    assert "p_value_underflow" not in [w["code"] for w in got["warnings"]]
    table = agreement(got, ref)
    assert_digits({k: v for k, v in table.items() if k not in ("p_value", "f_p_value")},
                  WELL_CONDITIONED_DIGITS, "huge t")


def _near_zero_coefficient_problem(t_target):
    """A problem whose last coefficient's t statistic is about ``t_target``.

    The response is shifted along the last column's component orthogonal to the others,
    which moves that coefficient alone and leaves the residuals as they were.
    """
    rng = np.random.default_rng(71)
    n = 33
    x = rng.normal(size=(n, 2))
    y = 1.0 + x @ np.array([0.5, 0.2]) + rng.normal(size=n)
    a = np.column_stack([np.ones(n), x])
    b, *_ = np.linalg.lstsq(a, y, rcond=None)
    others = a[:, :2]
    z = x[:, 1] - others @ np.linalg.lstsq(others, x[:, 1], rcond=None)[0]
    resid = y - a @ b
    se = math.sqrt(resid @ resid / (n - 3) / (z @ z))
    return x, y - (b[2] - t_target * se) * z


def test_p_value_of_a_coefficient_near_zero(client):
    # Source: the 50-digit mpmath reference above. A coefficient estimated near zero has
    # |t| ~ 1e-6 and p ~ 1 - 1e-6; p is then insensitive to the rounding of t, so a double
    # result can carry ~15 digits. The estimate itself cannot (it is a cancellation), so
    # only p is asked for here, to 13 digits, both against the reference p and against
    # mpmath's p at the service's own t (which isolates the distribution function).
    x, y = _near_zero_coefficient_problem(1e-6)
    ref = reference_fit(x, y)
    assert 1e-7 < abs(ref["t"][2]) < 1e-5  # the premise
    got = post(client, x, y)
    coef = got["coefficients"][2]
    with mpmath.workdps(DPS):
        at_service_t = _mp_t_two_sided_p(mpmath.mpf(coef["t_statistic"]), ref["df"])
    found = {"against reference p": digits(coef["p_value"], ref["p"][2]),
             "against mpmath p at the service's t": digits(coef["p_value"], at_service_t)}
    assert_digits(found, WELL_CONDITIONED_DIGITS, f"p value at t = {coef['t_statistic']:.3g}")
