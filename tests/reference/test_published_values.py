"""The service against outside sources: scipy.stats and published statistical tables.

Sources, named again beside each check:

* ``scipy.stats.linregress`` (SciPy's simple linear regression) for slope, intercept,
  their standard errors, R squared and the slope's p value;
* the standard Student t table (critical values ``t_{p, df}``), values from memory,
  3-4 decimals, checked through the service's interval widths: with the coefficient's
  standard error ``se``, ``(upper - lower) / 2 / se`` is the t quantile;
* the standard F table (``F_{0.95}(dfn, dfd)``), values from memory, 2 decimals;
* ``scipy.stats.t`` and ``scipy.stats.f`` (``sf``, ``ppf``) for the module
  ``service.stats.distributions`` at many points, to 1e-12 relative.
"""

from __future__ import annotations

import mpmath
import numpy as np
import pytest
from scipy import stats as scipy_stats

from service.app import create_app
from service.stats import distributions


@pytest.fixture(scope="module")
def client():
    return create_app().test_client()


def post(client, x, y, levels=(0.95,)):
    body = {"design_matrix": [[float(v)] for v in x], "response": [float(v) for v in y],
            "column_names": ["x"], "levels": list(levels)}
    r = client.post("/v1/fit", json=body)
    assert r.status_code == 200, r.get_json()
    return r.get_json()


# --------------------------------------------------------------------------- scipy.stats.linregress


@pytest.mark.parametrize("seed", [101, 102])
def test_simple_regression_matches_scipy_linregress(client, seed):
    # Source: scipy.stats.linregress (slope, intercept, stderr, intercept_stderr,
    # rvalue**2, pvalue of the two-sided test of slope = 0). linregress works from
    # moments in double precision, so agreement is asked to 1e-10 relative.
    rng = np.random.default_rng(seed)
    n = 50
    x = rng.uniform(-5.0, 15.0, size=n)
    y = 4.0 - 0.8 * x + rng.normal(scale=3.0, size=n)
    ref = scipy_stats.linregress(x, y)
    got = post(client, x, y)
    intercept, slope = got["coefficients"]
    assert intercept["name"] == "intercept" and slope["name"] == "x"
    rel = 1e-10
    assert slope["estimate"] == pytest.approx(ref.slope, rel=rel)
    assert intercept["estimate"] == pytest.approx(ref.intercept, rel=rel)
    assert slope["standard_error"] == pytest.approx(ref.stderr, rel=rel)
    assert intercept["standard_error"] == pytest.approx(ref.intercept_stderr, rel=rel)
    assert got["fit"]["r_squared"] == pytest.approx(ref.rvalue ** 2, rel=rel)
    assert slope["p_value"] == pytest.approx(ref.pvalue, rel=1e-9)
    # In simple regression the overall F test is the slope's t test squared.
    assert got["overall_f_test"]["p_value"] == pytest.approx(ref.pvalue, rel=1e-9)


# --------------------------------------------------------------------------- t table


# Source: the standard Student t table, values from memory, 3-4 decimals.
# (one-sided probability p, df, tabulated t_{p, df}); the interval level is 2p - 1.
T_TABLE = [
    (0.975, 10, 2.228),
    (0.975, 5, 2.571),
    (0.995, 20, 2.845),
    (0.95, 30, 1.697),
]


@pytest.mark.parametrize("p, df, tabulated", T_TABLE)
def test_interval_width_is_the_tabulated_t_quantile(client, p, df, tabulated):
    # Source: the standard Student t table (values from memory, 3 decimals): the
    # service's half-width / standard error must round to the tabulated value.
    level = round(2 * p - 1, 10)
    rng = np.random.default_rng(df)
    n = df + 2  # intercept and slope: residual_df = n - 2
    x = np.arange(n, dtype=float)
    y = 1.0 + 0.5 * x + rng.normal(size=n)
    got = post(client, x, y, levels=(level,))
    assert got["residual_df"] == df
    for coef in got["coefficients"]:
        (iv,) = coef["intervals"]
        assert iv["level"] == level
        ratio = (iv["upper"] - iv["lower"]) / 2 / coef["standard_error"]
        assert abs(ratio - tabulated) <= 0.0005 + 1e-12, (coef["name"], ratio)
        centre = (iv["upper"] + iv["lower"]) / 2
        assert centre == pytest.approx(coef["estimate"], rel=1e-12, abs=1e-12)


@pytest.mark.parametrize("p, df, tabulated", T_TABLE)
def test_t_quantile_function_rounds_to_the_table(p, df, tabulated):
    # Source: the standard Student t table (values from memory, 3 decimals).
    assert round(float(distributions.t_quantile(p, df)), 3) == tabulated


# --------------------------------------------------------------------------- F table


# Source: the standard F table at the 5% level, values from memory, 2 decimals.
F_TABLE = [(3, 10, 3.71), (2, 20, 3.49)]


@pytest.mark.parametrize("dfn, dfd, tabulated", F_TABLE)
def test_f_quantile_rounds_to_the_table(dfn, dfd, tabulated):
    # Source: the standard F table, F_{0.95}(dfn, dfd), values from memory, 2 decimals.
    q = float(distributions.f_quantile(0.95, dfn, dfd))
    assert round(q, 2) == tabulated
    # And the tabulated value sits at an upper tail of about 5% (a 2-decimal value
    # moves the tail by well under 0.1 percentage point).
    assert abs(float(distributions.f_upper_p(tabulated, dfn, dfd)) - 0.05) < 1e-3


# --------------------------------------------------------------------------- scipy.stats t and F


# Degrees of freedom up to about 1e6 (the default row limit is 1e6 observations), and
# statistics from 1e-6 (a coefficient estimated near zero) to far into the tail.
DFS = [1, 2, 3, 4.5, 5, 10, 30, 100, 1000, 1e4, 1e5, 999998]
T_POINTS = [0.0, 1e-6, 1e-3, 0.1, 0.5, 1.0, 1.96, 2.5, 5.0, 10.0, 50.0, 1e3, 1e6]
PROBABILITIES = [1e-12, 1e-6, 1e-3, 0.005, 0.025, 0.05, 0.1, 0.3, 0.7, 0.9, 0.95, 0.975,
                 0.995, 0.999, 1 - 1e-6]
F_POINTS = [1e-6, 0.01, 0.2, 0.5, 1.0, 2.0, 3.7, 10.0, 100.0, 1e4]
F_DFS = [(1, 1), (1, 10), (2, 20), (3, 10), (5, 2), (10, 50), (4.5, 7.5), (30, 1000),
         (100, 3), (1, 1e5), (3, 1e5), (5, 999994)]
REL = 1e-12


def _mismatches(pairs):
    """``[(point, got, ref, relative error)]`` for the pairs outside REL."""
    bad = []
    for point, got, ref in pairs:
        err = abs(got - ref) / abs(ref) if ref != 0 else abs(got)
        if not err <= REL:
            bad.append((point, got, ref, f"{err:.1e}"))
    return bad


def _t_reference(t: float, df: float) -> float:
    # Source: scipy.stats.t.sf, P(|T| >= |t|) = 2 sf(|t|); for df = 1 (the Cauchy
    # distribution) the closed form 1 - (2/pi) atan|t| in mpmath at 40 digits, since
    # scipy's t.sf loses digits there for tiny t (2.8e-11 at t = 1e-6, checked
    # against mpmath).
    if df == 1:
        with mpmath.workdps(40):
            return float(1 - 2 / mpmath.pi * mpmath.atan(abs(mpmath.mpf(t))))
    return 2.0 * float(scipy_stats.t.sf(abs(t), df))


def test_t_two_sided_p_matches_scipy_t_sf():
    pairs = [((df, sign * t), float(distributions.t_two_sided_p(sign * t, df)),
              _t_reference(t, df))
             for df in DFS for t in T_POINTS for sign in (1.0, -1.0)]
    bad = _mismatches(pairs)
    assert not bad, f"{len(bad)} of {len(pairs)} points off by more than {REL}: {bad[:12]}"


def test_t_quantile_matches_scipy_t_ppf():
    # Source: scipy.stats.t.ppf.
    pairs = [((df, p), float(distributions.t_quantile(p, df)), float(scipy_stats.t.ppf(p, df)))
             for df in DFS for p in PROBABILITIES]
    bad = _mismatches(pairs)
    assert not bad, f"{len(bad)} of {len(pairs)} points off by more than {REL}: {bad[:12]}"
    assert float(distributions.t_quantile(0.5, 7)) == 0.0  # Source: symmetry of t.


def test_f_upper_p_matches_scipy_f_sf():
    # Source: scipy.stats.f.sf.
    pairs = [((dfn, dfd, f), float(distributions.f_upper_p(f, dfn, dfd)),
              float(scipy_stats.f.sf(f, dfn, dfd)))
             for dfn, dfd in F_DFS for f in F_POINTS]
    bad = _mismatches(pairs)
    assert not bad, f"{len(bad)} of {len(pairs)} points off by more than {REL}: {bad[:12]}"


def test_f_quantile_matches_scipy_f_ppf():
    # Source: scipy.stats.f.ppf.
    pairs = [((dfn, dfd, p), float(distributions.f_quantile(p, dfn, dfd)),
              float(scipy_stats.f.ppf(p, dfn, dfd)))
             for dfn, dfd in F_DFS for p in PROBABILITIES]
    bad = _mismatches(pairs)
    assert not bad, f"{len(bad)} of {len(pairs)} points off by more than {REL}: {bad[:12]}"


def test_t_and_f_far_tails_match_scipy_in_the_range_that_matters():
    # Source: scipy.stats.t.sf and scipy.stats.f.sf: moderate and far-tail statistics
    # at small and moderate df, where p values like 1e-250 must stay positive numbers.
    for df in [5, 38, 100]:
        for t in [3.0, 30.0, 300.0, 3e3]:
            ref = 2.0 * float(scipy_stats.t.sf(t, df))
            if ref > 1e-300:
                assert float(distributions.t_two_sided_p(t, df)) == pytest.approx(ref, rel=REL)
    assert 0 < float(distributions.t_two_sided_p(1e6, 38))  # about 1e-216


def test_vectorised_calls_match_scalar_calls():
    # Source: the service's own scalar calls (the inference code passes arrays).
    t = np.array(T_POINTS)
    vec = distributions.t_two_sided_p(t, 12)
    assert [float(v) for v in vec] == [float(distributions.t_two_sided_p(v, 12)) for v in t]
    f = np.array(F_POINTS)
    vec = distributions.f_upper_p(f, 3, 17)
    assert [float(v) for v in vec] == [float(distributions.f_upper_p(v, 3, 17)) for v in f]
