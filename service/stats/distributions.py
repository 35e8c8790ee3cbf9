"""Tail probabilities and quantiles of the t and F distributions.

Everything goes through ``scipy.special`` (the incomplete beta function and its
inverse), which is what ``scipy.stats`` calls underneath, at a few microseconds a
call instead of tens. Tails are computed directly, never as ``1 - cdf``, so a
p value of 1e-250 comes back as that number and not as zero.
"""

from __future__ import annotations

import numpy as np
from scipy import special

__all__ = ["t_two_sided_p", "t_quantile", "f_upper_p", "f_quantile"]


def t_two_sided_p(t: np.ndarray | float, df: float) -> np.ndarray:
    """Two-sided p value ``P(|T| >= |t|)`` for Student's t with ``df`` degrees of freedom.

    Notes
    -----
    ``P(|T| >= |t|) = I_x(df/2, 1/2)`` with ``x = df / (df + t^2)``, the regularized
    incomplete beta function (Abramowitz and Stegun 26.7.1 with 26.5.27). The form
    keeps full relative accuracy in the far tail.
    """
    t = np.asarray(t, dtype=float)
    with np.errstate(over="ignore"):
        x = df / (df + t * t)
    return special.betainc(0.5 * df, 0.5, x)


def t_quantile(probability: np.ndarray | float, df: float) -> np.ndarray:
    """The ``probability`` quantile of Student's t (``P(T <= q) = probability``)."""
    return special.stdtrit(df, probability)


def f_upper_p(f: np.ndarray | float, dfn: float, dfd: float) -> np.ndarray:
    """Upper-tail probability ``P(F >= f)`` for the F distribution.

    Notes
    -----
    ``P(F >= f) = I_x(dfd/2, dfn/2)`` with ``x = dfd / (dfd + dfn f)``
    (Abramowitz and Stegun 26.6.2), computed without cancellation.
    """
    f = np.asarray(f, dtype=float)
    with np.errstate(over="ignore"):
        x = dfd / (dfd + dfn * f)
    return special.betainc(0.5 * dfd, 0.5 * dfn, x)


def f_quantile(probability: np.ndarray | float, dfn: float, dfd: float) -> np.ndarray:
    """The ``probability`` quantile of the F distribution (``P(F <= q) = probability``)."""
    return special.fdtri(dfn, dfd, probability)
