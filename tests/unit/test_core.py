"""Unit tests of the numerical core (service.stats) against independent computations.

References: numpy.linalg (lstsq, svd) for least squares and singular values, and
scipy.stats (``t.sf``, ``t.ppf``, ``f.sf``, ``f.ppf``; SciPy 1.x, Virtanen et al. 2020,
Nature Methods 17, 261-272) for the t and F distributions.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from service.stats import distributions as dist
from service.stats.conditioning import CONDITION_INDEX_LIMIT, PROPORTION_LIMIT, assess
from service.stats.design import build_design
from service.stats.fit import FitOptions, fit
from service.stats.lstsq import solve


def problem(seed, n, k, *, intercept=True, noise=1.0, correlated=0.0):
    """A random design (n x k, intercept column first when asked) and response."""
    rng = np.random.default_rng(seed)
    m = k - 1 if intercept else k
    base = rng.standard_normal((n, m))
    if correlated and m > 1:
        base[:, 1:] += correlated * base[:, :1]
    x = base * rng.uniform(0.5, 3.0, m) + rng.uniform(-2.0, 2.0, m)
    if intercept:
        x = np.column_stack([np.ones(n), x])
    beta = rng.uniform(-3.0, 3.0, k)
    y = x @ beta + noise * rng.standard_normal(n)
    return x, y


def core_fit(x, y, *, intercept=True, weights=None, names=None):
    names = tuple(names or (f"x{j + 1}" for j in range(x.shape[1])))
    design = build_design(x, y, names, intercept=intercept, weights=weights)
    return fit(design, FitOptions())


def table(result, attr):
    return np.array([getattr(c, attr) for c in result.inference.coefficients])


# --- lstsq.solve against numpy.linalg.lstsq ------------------------------------------

SHAPES = [(0, 40, 2), (1, 50, 3), (2, 200, 6), (3, 30, 10), (4, 1000, 4), (5, 12, 12)]


@pytest.mark.parametrize("seed, n, k", SHAPES)
def test_solve_matches_numpy_lstsq(seed, n, k):
    x, y = problem(seed, n, k)
    got = solve(x, y, centered=True)
    b, *_ = np.linalg.lstsq(x, y, rcond=None)
    assert got.rank == k and got.estimable.all() and got.aliases == ()
    np.testing.assert_allclose(got.coefficients, b, rtol=1e-10, atol=1e-12 * np.abs(b).max())
    r = y - x @ b
    scale = np.linalg.norm(y)
    np.testing.assert_allclose(got.residuals, r, atol=1e-12 * scale)
    np.testing.assert_allclose(got.fitted + got.residuals, y, rtol=1e-14, atol=1e-14 * scale)
    assert got.residual_norm == pytest.approx(np.linalg.norm(r), rel=1e-9, abs=1e-12 * scale)
    np.testing.assert_allclose(got.root_diagonal, np.sqrt(np.diag(np.linalg.inv(x.T @ x))),
                               rtol=1e-9)
    assert got.total_norm == pytest.approx(np.linalg.norm(y - y.mean()), rel=1e-12)
    assert got.regression_norm == pytest.approx(np.linalg.norm(x @ b - y.mean()), rel=1e-9)
    assert got.response_norm == pytest.approx(np.linalg.norm(y), rel=1e-12)


@pytest.mark.parametrize("seed", [10, 11])
def test_solve_uncentered_norms(seed):
    x, y = problem(seed, 60, 3, intercept=False)
    got = solve(x, y, centered=False)
    b, *_ = np.linalg.lstsq(x, y, rcond=None)
    np.testing.assert_allclose(got.coefficients, b, rtol=1e-10)
    assert got.total_norm == pytest.approx(np.linalg.norm(y), rel=1e-12)
    assert got.regression_norm == pytest.approx(np.linalg.norm(x @ b), rel=1e-10)


def test_solve_with_widely_scaled_columns():
    x, y = problem(20, 80, 4)
    scales = np.array([1.0, 1e-150, 1e150, 3.0])
    got = solve(x * scales, y, centered=True)
    b, *_ = np.linalg.lstsq(x, y, rcond=None)
    np.testing.assert_allclose(got.coefficients * scales, b, rtol=1e-10)


def test_solve_drop_aliased_equals_the_reduced_problem():
    x, y = problem(21, 50, 4)
    x = np.column_stack([x[:, :2], 2.0 * x[:, 1] - 3.0 * x[:, 0], x[:, 2:]])  # col 2 aliased
    got = solve(x, y, centered=True, drop_aliased=True)
    assert got.rank == 4
    assert list(got.estimable) == [True, True, False, True, True]
    (alias,) = got.aliases
    assert alias.column == 2
    assert dict(alias.relation) == pytest.approx({0: -3.0, 1: 2.0})
    keep = [0, 1, 3, 4]
    b, *_ = np.linalg.lstsq(x[:, keep], y, rcond=None)
    np.testing.assert_allclose(got.coefficients[keep], b, rtol=1e-10)
    assert math.isnan(got.coefficients[2]) and math.isnan(got.root_diagonal[2])


# --- invariance of t and p ------------------------------------------------------------

def _tp(result):
    return table(result, "t_statistic"), table(result, "p_value")


@pytest.mark.parametrize("seed", [30, 31, 32])
def test_t_and_p_invariant_to_rescaling_a_column(seed):
    x, y = problem(seed, 60, 4, intercept=False, noise=2.0)
    base = core_fit(x, y)
    for j in range(x.shape[1]):
        for factor in (1e6, 1e-6):
            xs = x.copy()
            xs[:, j] *= factor
            scaled = core_fit(xs, y)
            t0, p0 = _tp(base)
            t1, p1 = _tp(scaled)
            np.testing.assert_allclose(t1, t0, rtol=1e-9)
            np.testing.assert_allclose(p1, p0, rtol=1e-8)
            est0, est1 = table(base, "estimate"), table(scaled, "estimate")
            assert est1[j + 1] == pytest.approx(est0[j + 1] / factor, rel=1e-9)
            np.testing.assert_allclose(table(scaled, "vif")[1:], table(base, "vif")[1:],
                                       rtol=1e-8)
            assert scaled.inference.fit.r_squared == pytest.approx(
                base.inference.fit.r_squared, rel=1e-12)


def test_t_and_p_invariant_to_rescaling_the_response():
    x, y = problem(33, 60, 4, intercept=False, noise=2.0)
    base, scaled = core_fit(x, y), core_fit(x, y * 1e6)
    np.testing.assert_allclose(_tp(scaled)[0], _tp(base)[0], rtol=1e-9)
    np.testing.assert_allclose(_tp(scaled)[1], _tp(base)[1], rtol=1e-8)
    np.testing.assert_allclose(table(scaled, "estimate"), table(base, "estimate") * 1e6,
                               rtol=1e-9)


@pytest.mark.parametrize("seed", [40, 41])
def test_t_and_p_invariant_to_reordering_columns(seed):
    x, y = problem(seed, 60, 5, intercept=False, noise=2.0)
    names = ("a", "b", "c", "d", "e")
    base = core_fit(x, y, names=names)
    order = [3, 0, 4, 2, 1]
    moved = core_fit(x[:, order], y, names=tuple(names[i] for i in order))
    assert [c.name for c in moved.inference.coefficients] == (
        ["intercept"] + [names[i] for i in order])
    b = {c.name: c for c in base.inference.coefficients}
    for c in moved.inference.coefficients:
        ref = b[c.name]
        assert c.estimate == pytest.approx(ref.estimate, rel=1e-10)
        assert c.standard_error == pytest.approx(ref.standard_error, rel=1e-10)
        assert c.t_statistic == pytest.approx(ref.t_statistic, rel=1e-10)
        assert c.p_value == pytest.approx(ref.p_value, rel=1e-9)
    assert moved.inference.overall_f_test.statistic == pytest.approx(
        base.inference.overall_f_test.statistic, rel=1e-10)


# --- weighted least squares -----------------------------------------------------------

@pytest.mark.parametrize("seed", [50, 51, 52])
def test_weighted_equals_ordinary_on_sqrt_w_scaled_rows(seed):
    x, y = problem(seed, 70, 4)
    w = np.random.default_rng(seed).uniform(0.1, 10.0, x.shape[0])
    sw = np.sqrt(w)
    weighted = solve(x, y, w, centered=False)
    scaled = solve(x * sw[:, None], y * sw, centered=False)
    np.testing.assert_allclose(weighted.coefficients, scaled.coefficients, rtol=1e-10)
    np.testing.assert_allclose(weighted.root_diagonal, scaled.root_diagonal, rtol=1e-10)
    assert weighted.residual_norm == pytest.approx(scaled.residual_norm, rel=1e-10)
    np.testing.assert_allclose(weighted.residuals * sw, scaled.residuals,
                               atol=1e-12 * np.linalg.norm(y * sw))
    b, *_ = np.linalg.lstsq(x * sw[:, None], y * sw, rcond=None)
    np.testing.assert_allclose(weighted.coefficients, b, rtol=1e-10)


def test_weighted_fit_inference_equals_ols_on_scaled_rows():
    x, y = problem(53, 70, 4)
    w = np.random.default_rng(53).uniform(0.1, 10.0, x.shape[0])
    sw = np.sqrt(w)
    weighted = core_fit(x[:, 1:], y, weights=w)
    # The intercept becomes the column sqrt(w): an ordinary, uncentered fit.
    scaled = core_fit(x * sw[:, None], y * sw, intercept=False)
    for key in ("estimate", "standard_error", "t_statistic", "p_value"):
        np.testing.assert_allclose(table(weighted, key), table(scaled, key), rtol=1e-9)
    assert weighted.inference.fit.residual_sum_of_squares == pytest.approx(
        scaled.inference.fit.residual_sum_of_squares, rel=1e-10)
    assert weighted.inference.residual_df == scaled.inference.residual_df == 66


# --- distributions against scipy.stats ------------------------------------------------

T_VALUES = [0.0, 0.1, 0.674, 1.0, 1.96, 2.5, 5.0, 12.0, 40.0, 1e3]
DFS = [1, 2, 3, 7.5, 30, 120, 1000]
# scipy.stats agrees with a 40-digit mpmath evaluation of I_x(a, b) to about 1e-15 on
# every point here; 1e-12 leaves room for an honest implementation, not for lost digits.
RTOL_P = 1e-12


@pytest.mark.parametrize("df", DFS)
def test_t_two_sided_p_matches_scipy(df):
    t = np.array(T_VALUES)
    got = dist.t_two_sided_p(t, df)
    ref = np.minimum(2.0 * stats.t.sf(t, df), 1.0)
    tiny = ref > 1e-300
    np.testing.assert_allclose(got[tiny], ref[tiny], rtol=RTOL_P)
    np.testing.assert_allclose(dist.t_two_sided_p(-t, df), got, rtol=0)  # symmetric


def test_t_two_sided_p_far_tail_is_not_zero():
    got = float(dist.t_two_sided_p(1e3, 30.0))
    ref = 2.0 * float(stats.t.sf(1e3, 30.0))
    assert 0.0 < got < 1e-60
    assert got == pytest.approx(ref, rel=RTOL_P)
    got = float(dist.f_upper_p(1e6, 2.0, 50.0))
    assert 0.0 < got == pytest.approx(float(stats.f.sf(1e6, 2.0, 50.0)), rel=RTOL_P)


@pytest.mark.parametrize("df", [1e4, 1e5, 1e6, 1e7])
def test_p_values_keep_their_digits_at_large_df(df):
    """Many rows mean a large residual df; the p values must not lose digits to it."""
    t = np.array([0.1, 0.674, 1.0, 1.96, 3.0, 5.0])
    np.testing.assert_allclose(dist.t_two_sided_p(t, df), 2.0 * stats.t.sf(t, df),
                               rtol=RTOL_P)
    f = np.array([0.01, 0.5, 1.0, 4.0])
    for dfn in (1, 3):
        np.testing.assert_allclose(dist.f_upper_p(f, dfn, df), stats.f.sf(f, dfn, df),
                                   rtol=RTOL_P)


@pytest.mark.parametrize("df", DFS + [1e4, 1e7])
def test_t_quantile_matches_scipy(df):
    probs = np.array([1e-12, 1e-6, 0.0005, 0.005, 0.025, 0.05, 0.25, 0.5, 0.9, 0.975])
    got = dist.t_quantile(probs, df)
    np.testing.assert_allclose(got, stats.t.ppf(probs, df), rtol=1e-12, atol=1e-14)


@pytest.mark.parametrize("dfn, dfd", [(1, 1), (1, 10), (2, 17), (5, 3), (10, 100),
                                      (3, 1000), (40, 7.5)])
def test_f_upper_p_matches_scipy(dfn, dfd):
    f = np.array([0.0, 0.01, 0.5, 1.0, 2.5, 4.0, 10.0, 100.0, 1e4])
    got = dist.f_upper_p(f, dfn, dfd)
    ref = stats.f.sf(f, dfn, dfd)
    tiny = ref > 1e-300
    np.testing.assert_allclose(got[tiny], ref[tiny], rtol=RTOL_P)
    assert got[0] == 1.0


@pytest.mark.parametrize("dfn, dfd", [(1, 1), (1, 10), (2, 17), (5, 3), (10, 100), (3, 1e5)])
def test_f_quantile_matches_scipy(dfn, dfd):
    probs = np.array([0.01, 0.05, 0.5, 0.9, 0.95, 0.99, 0.999])
    np.testing.assert_allclose(dist.f_quantile(probs, dfn, dfd),
                               stats.f.ppf(probs, dfn, dfd), rtol=1e-12)


def test_quantiles_invert_tails():
    for df in (3.0, 25.0):
        q = float(-dist.t_quantile(0.025, df))
        assert float(dist.t_two_sided_p(q, df)) == pytest.approx(0.05, rel=1e-12)
    q = float(dist.f_quantile(0.95, 4, 20))
    assert float(dist.f_upper_p(q, 4, 20)) == pytest.approx(0.05, rel=1e-12)


# --- conditioning ---------------------------------------------------------------------

def _unit_columns(a):
    return a / np.linalg.norm(a, axis=0)


def _bkw(a):
    """Condition indexes and variance proportions (BKW 1980, ch. 3) from numpy's SVD."""
    _, mu, vt = np.linalg.svd(_unit_columns(a), full_matrices=False)
    phi = vt.T ** 2 / mu[None, :] ** 2
    return mu[0] / mu, phi / phi.sum(axis=1, keepdims=True)


@pytest.mark.parametrize("seed, correlated", [(60, 0.0), (61, 3.0), (62, 30.0)])
def test_condition_indexes_match_svd_of_unit_columns(seed, correlated):
    x, y = problem(seed, 80, 5, correlated=correlated)
    sol = solve(x, y, centered=True)
    cond = assess(sol, ("intercept", "a", "b", "c", "d"))
    eta, _ = _bkw(x)
    np.testing.assert_allclose(cond.condition_indexes, eta, rtol=1e-9)
    assert cond.condition_number == pytest.approx(eta[-1], rel=1e-9)
    expected = "ill_conditioned" if eta[-1] > CONDITION_INDEX_LIMIT else "ok"
    assert cond.status == expected
    assert cond.rank == 5 and cond.n_columns == 5


def test_condition_indexes_of_weighted_design():
    x, y = problem(63, 50, 3, correlated=5.0)
    w = np.random.default_rng(63).uniform(0.2, 5.0, 50)
    cond = assess(solve(x, y, w, centered=True), ("intercept", "a", "b"))
    eta, _ = _bkw(x * np.sqrt(w)[:, None])
    np.testing.assert_allclose(cond.condition_indexes, eta, rtol=1e-9)


def test_near_dependency_forms_a_collinear_set_with_bkw_proportions():
    rng = np.random.default_rng(64)
    n = 60
    a, b, c = rng.standard_normal((3, n)) + 5.0
    d = a + b + 1e-3 * rng.standard_normal(n)  # d ~ a + b
    x = np.column_stack([np.ones(n), a, b, c, d])
    names = ("intercept", "a", "b", "c", "d")
    cond = assess(solve(x, rng.standard_normal(n), centered=True), names)
    eta, props = _bkw(x)
    assert cond.status == "ill_conditioned"
    strong = [k for k in range(len(eta)) if eta[k] > CONDITION_INDEX_LIMIT]
    assert len(cond.collinear_sets) >= 1
    worst = max(cond.collinear_sets, key=lambda s: s.condition_index)
    assert worst.condition_index == pytest.approx(eta[-1], rel=1e-6)
    kdx = strong[-1]
    involved = [names[j] for j in range(5) if props[j, kdx] > PROPORTION_LIMIT]
    assert set(worst.columns) == set(involved)
    assert {"a", "b", "d"} <= set(worst.columns)
    assert "c" not in worst.columns
    ref = {names[j]: props[j, kdx] for j in range(5)}
    for name, p in zip(worst.columns, worst.proportions):
        assert p == pytest.approx(ref[name], rel=1e-6)


# --- VIF ------------------------------------------------------------------------------

def _vif_by_regression(preds, w=None):
    """1 / (1 - R_j^2), R_j^2 from the (weighted) regression of column j on the others."""
    n, m = preds.shape
    w = np.ones(n) if w is None else w
    sw = np.sqrt(w)
    out = []
    for j in range(m):
        others = np.column_stack([np.ones(n), np.delete(preds, j, axis=1)])
        target = preds[:, j]
        coef, *_ = np.linalg.lstsq(others * sw[:, None], target * sw, rcond=None)
        rss = np.sum(w * (target - others @ coef) ** 2)
        mean = np.sum(w * target) / np.sum(w)
        tss = np.sum(w * (target - mean) ** 2)
        out.append(1.0 / (rss / tss))  # 1 / (1 - R^2) = TSS / RSS
    return np.array(out)


@pytest.mark.parametrize("seed, correlated", [(70, 0.0), (71, 2.0), (72, 10.0)])
def test_vif_equals_one_over_one_minus_r_squared(seed, correlated):
    x, y = problem(seed, 90, 5, correlated=correlated)
    preds = x[:, 1:]
    r = core_fit(preds, y)
    vif = table(r, "vif")
    assert math.isnan(vif[0])  # the intercept has none
    np.testing.assert_allclose(vif[1:], _vif_by_regression(preds), rtol=1e-9)
    if correlated >= 2.0:
        assert vif[1:].max() > 5.0


def test_weighted_vif_equals_one_over_one_minus_weighted_r_squared():
    x, y = problem(73, 60, 4, correlated=2.0)
    w = np.random.default_rng(73).uniform(0.1, 4.0, 60)
    r = core_fit(x[:, 1:], y, weights=w)
    np.testing.assert_allclose(table(r, "vif")[1:], _vif_by_regression(x[:, 1:], w),
                               rtol=1e-9)


def test_vif_of_two_predictors_is_one_over_one_minus_correlation_squared():
    x, y = problem(74, 40, 3, correlated=1.0)
    rho = np.corrcoef(x[:, 1], x[:, 2])[0, 1]
    vif = table(core_fit(x[:, 1:], y), "vif")[1:]
    np.testing.assert_allclose(vif, [1.0 / (1.0 - rho ** 2)] * 2, rtol=1e-10)
