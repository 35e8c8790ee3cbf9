"""Residual quantiles against numpy.quantile (linear interpolation, Hyndman and Fan
definition 7: numpy's default), for short and long residual vectors: the long ones
take the partial-sort path."""

from __future__ import annotations

import numpy as np
import pytest

from service.stats.residuals import _PROBS, _order_statistics, _quantiles


@pytest.mark.parametrize("n", [1, 2, 7, 1_000, 1_001, 54_321])
def test_quantiles_match_numpy(n):
    values = np.random.default_rng(n).standard_t(3, size=n)
    got = _quantiles(_order_statistics(values.copy()))
    assert [p for p, _ in got] == list(_PROBS)
    # numpy interpolates in another, equally rounded, form: agreement to a few ulps.
    np.testing.assert_allclose([q for _, q in got], np.quantile(values, _PROBS),
                               rtol=4e-16, atol=1e-16)
