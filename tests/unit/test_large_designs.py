"""Designs above 100,000 cells, where the solver factors the scaled design in place.

Reference: numpy.linalg.lstsq (LAPACK gelsd, an SVD solver) on the same data, a
general-purpose library used only here; agreement to 1e-10 relative is far inside
what either solver vouches for on these well-conditioned designs. The caller's
design must come back untouched.
"""

from __future__ import annotations

import numpy as np
import pytest

from service.stats.lstsq import REFINE_ALWAYS_CELLS, RankDeficient, solve

ROWS = 40_000


def _design(seed: int, columns: int = 3) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = np.empty((ROWS, columns + 1), order="F")
    x[:, 0] = 1.0
    x[:, 1:] = rng.normal(size=(ROWS, columns)) * [3.0, 40.0, 0.2][:columns] + 10.0
    y = x @ np.arange(1.0, columns + 2.0) + rng.normal(size=ROWS)
    return x, y


def test_the_case_is_large():
    x, _ = _design(1)
    assert x.size > REFINE_ALWAYS_CELLS


@pytest.mark.parametrize("weighted", [False, True])
def test_large_fit_agrees_with_an_svd_solver_and_leaves_the_design_alone(weighted):
    x, y = _design(2)
    w = np.random.default_rng(3).uniform(0.5, 2.0, size=ROWS) if weighted else None
    before = x.copy()
    sol = solve(x, y, w, centered=True)
    assert np.array_equal(x, before)
    sw = np.ones(ROWS) if w is None else np.sqrt(w)
    expected, *_ = np.linalg.lstsq(x * sw[:, None], y * sw, rcond=None)
    np.testing.assert_allclose(sol.coefficients, expected, rtol=1e-10)
    np.testing.assert_allclose(sol.residuals, y - x @ expected, rtol=1e-8, atol=1e-9)
    assert sol.rank == 4 and sol.estimated_correct_digits > 8


@pytest.mark.parametrize("weighted", [False, True])
def test_large_aliased_column_is_dropped_and_the_rest_fitted(weighted):
    x, y = _design(4)
    x = np.asfortranarray(np.column_stack([x, x[:, 1] + 2.0 * x[:, 2]]))
    w = np.random.default_rng(5).uniform(0.5, 2.0, size=ROWS) if weighted else None
    with pytest.raises(RankDeficient):
        solve(x, y, w, centered=True)
    before = x.copy()
    sol = solve(x, y, w, centered=True, drop_aliased=True)
    assert np.array_equal(x, before)
    assert sol.rank == 4 and [a.column for a in sol.aliases] == [4]
    sw = np.ones(ROWS) if w is None else np.sqrt(w)
    expected, *_ = np.linalg.lstsq(x[:, :4] * sw[:, None], y * sw, rcond=None)
    np.testing.assert_allclose(sol.coefficients[:4], expected, rtol=1e-10)
    assert np.isnan(sol.coefficients[4])


def test_scaled_products_stay_exact_when_the_rescaled_coefficients_would_not_be():
    from service.stats.lstsq import _Equilibrated
    # 2^-e b underflows for the second column: A b must then come from A itself.
    held = np.asfortranarray(np.array([[1.0, 2.0**1000], [3.0, 2.0**1001]]))
    e = np.array([0, 1100], dtype=np.intc)
    b = np.array([0.0, 2.0**-60])
    a = np.ldexp(held, -e[None, :])
    assert np.array_equal(a @ b, [2.0**-160, 2.0**-159])  # held @ (2^-e b) would be 0
    np.testing.assert_array_equal(_Equilibrated(held, e).times(b), a @ b)
    np.testing.assert_array_equal(_Equilibrated(a).times(b), a @ b)
    np.testing.assert_array_equal(_Equilibrated(held, e).long_double(),
                                  a.astype(np.longdouble))
