"""The classical covariance skips numpy's floating-point silencing when it provably can.

``service.stats.covariance._bounded`` decides that ``s^2 (X'WX)^-1``, ``s r`` and
``s G`` cannot overflow nor meet ``0 * inf``; these tests pin that the answer is then
the same as the one computed under ``np.errstate`` (the reference: the same numpy
expressions, silenced), and that the cases on the edge of the bound (a residual
standard deviation near 1e250 with covariance entries that underflow to zero) take
the silenced path without a warning.
"""

import warnings

import numpy as np
import pytest

from service.stats.covariance import _bounded, estimate_covariance
from service.stats.design import build_design
from service.stats.lstsq import solve


def _reference(sol, s):
    with np.errstate(over="ignore", invalid="ignore"):
        return s * s * sol.covariance_factor, s * sol.root_diagonal, s * sol.covariance_root


def _solution(x_scale, y_scale, weights_scale):
    rng = np.random.default_rng(5)
    x = rng.normal(size=(12, 2)) * x_scale
    y = (x @ [1.0, 2.0]) * (y_scale / x_scale) + rng.normal(size=12) * y_scale
    w = None if weights_scale is None else rng.random(12) * weights_scale
    d = build_design(x, y, ("a", "b"), weights=w)
    return solve(d.matrix, d.response, d.weights, centered=True)


@pytest.mark.parametrize("x_scale, y_scale, weights_scale", [
    (1.0, 1.0, None), (1e160, 1e150, 1e100), (1e160, 1.0, None), (1e-160, 1e-280, None),
    (1.0, 1e150, None)])
def test_same_as_silenced_and_no_warning(x_scale, y_scale, weights_scale):
    sol = _solution(x_scale, y_scale, weights_scale)
    s = sol.residual_norm / np.sqrt(12 - sol.rank)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        got = estimate_covariance(sol, "classical", 12, s, False)
    matrix, se, root = _reference(sol, s)
    np.testing.assert_array_equal(got.matrix, matrix)
    np.testing.assert_array_equal(got.standard_errors, se)
    np.testing.assert_array_equal(got.root, root)


def test_bound():
    r = np.array([1.0, 1e-10])
    assert _bounded(1.0, r)
    assert _bounded(float("nan"), r)  # NaN s: NaNs, no warning
    assert _bounded(0.0, r)
    assert not _bounded(1e150, np.array([1e-200]))  # s^2 overflows before the product
    assert not _bounded(1e100, np.array([1e60]))
    assert not _bounded(1.0, np.array([1.0, float("nan")]))  # an aliased column
    assert not _bounded(1.0, np.array([float("inf")]))


def test_edge_case_is_on_the_silenced_path():
    # s near 1e200 (s^2 overflows) and covariance entries that underflow to 0: s^2 * 0
    # would be inf * 0 without np.errstate.
    sol = _solution(1e160, 1e150, 1e100)
    s = sol.residual_norm / np.sqrt(12 - sol.rank)
    assert s > 1e150 and np.any(sol.covariance_factor == 0)
    assert not _bounded(s, sol.root_diagonal)
