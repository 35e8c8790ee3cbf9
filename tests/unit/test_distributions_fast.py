"""The float path of service.stats.distributions (scipy.special.cython_special).

It must give the array path's values bit for bit (the same compiled functions) and
scipy.stats' values to the tolerance of tests/unit/test_core.py, edge cases included.
"""

import math

import numpy as np
import pytest
from scipy import stats

from service.stats import distributions as dist

T_VALUES = [0.0, 1e-8, 0.1, 0.674, 1.0, 1.96, 2.5, 5.0, 12.0, 40.0, 1e3, 1e200]
F_VALUES = [0.0, 1e-10, 0.01, 0.5, 1.0, 2.5, 4.0, 10.0, 100.0, 1e4, 1e200]
DFS = [1, 2, 3, 7.5, 30, 36, 120, 1000, 1e5]


def _same(a, b):
    return a == b or (math.isnan(a) and math.isnan(b))


@pytest.mark.parametrize("df", DFS)
def test_float_t_p_is_the_array_p(df):
    array = dist.t_two_sided_p(np.array(T_VALUES + [-2.0, math.inf, math.nan]), df)
    for t, want in zip(T_VALUES + [-2.0, math.inf, math.nan], array.tolist()):
        got = dist.t_two_sided_p(t, df)
        assert isinstance(got, float)
        assert _same(got, want), (t, df)
        assert _same(dist.t_two_sided_p(np.float64(t), np.int64(df) if df == int(df)
                                        else df), want)


@pytest.mark.parametrize("df", DFS)
def test_float_t_p_matches_scipy(df):
    # t = 1e-8 is left out: there scipy.stats.t.sf itself is off in the ninth digit.
    for t in T_VALUES[:1] + T_VALUES[2:]:
        ref = min(2.0 * float(stats.t.sf(t, df)), 1.0)  # scipy.stats, survival function
        got = dist.t_two_sided_p(t, df)
        if ref > 1e-300:
            assert got == pytest.approx(ref, rel=1e-12), (t, df)
        else:
            assert got <= 1e-290


def test_float_edge_values():
    assert dist.t_two_sided_p(0.0, 5) == 1.0
    assert dist.t_two_sided_p(math.inf, 5) == 0.0
    assert math.isnan(dist.t_two_sided_p(math.nan, 5))
    assert dist.f_upper_p(0.0, 3, 10) == 1.0
    assert dist.f_upper_p(math.inf, 3, 10) == 0.0
    assert math.isnan(dist.f_upper_p(math.nan, 3, 10))
    # p values near 1e-300 stay numbers: 2 P(T >= 1e3) for t(30) per scipy.stats
    got = dist.t_two_sided_p(1e3, 30.0)
    assert 0.0 < got == pytest.approx(2.0 * float(stats.t.sf(1e3, 30.0)), rel=1e-12)


@pytest.mark.parametrize("dfn, dfd", [(1, 1), (1, 10), (2, 17), (3, 36), (5, 3),
                                      (10, 100), (3, 1000), (40, 7.5), (2, 1e5)])
def test_float_f_p_is_the_array_p_and_scipy(dfn, dfd):
    array = dist.f_upper_p(np.array(F_VALUES + [math.inf, math.nan]), dfn, dfd)
    for f, want in zip(F_VALUES + [math.inf, math.nan], array.tolist()):
        got = dist.f_upper_p(f, dfn, dfd)
        assert isinstance(got, float)
        assert _same(got, want), (f, dfn, dfd)
        ref = float(stats.f.sf(f, dfn, dfd))  # scipy.stats, survival function
        if ref > 1e-300:
            assert got == pytest.approx(ref, rel=1e-12), (f, dfn, dfd)


@pytest.mark.parametrize("df", DFS)
def test_float_quantiles_are_the_array_quantiles(df):
    probs = [1e-12, 1e-6, 0.0005, 0.005, 0.025, 0.05, 0.25, 0.5, 0.9, 0.975]
    for prob, want in zip(probs, dist.t_quantile(np.array(probs), df).tolist()):
        got = dist.t_quantile(prob, df)
        assert isinstance(got, float) and got == want
        assert got == pytest.approx(float(stats.t.ppf(prob, df)), rel=1e-12, abs=1e-14)
    for dfn in (1, 3, 10):
        levels = [0.5, 0.9, 0.95, 0.99]
        for lv, want in zip(levels, dist.f_quantile(np.array(levels), dfn, df).tolist()):
            got = dist.f_quantile(lv, dfn, df)
            assert isinstance(got, float) and got == want
            assert got == pytest.approx(float(stats.f.ppf(lv, dfn, df)), rel=1e-12)
