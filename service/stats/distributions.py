"""Tail probabilities and quantiles of the t and F distributions.

Everything goes through ``scipy.special`` (the incomplete beta function and its
inverse), which is what ``scipy.stats`` calls underneath, at a few microseconds a
call instead of tens. Tails are computed directly, never as ``1 - cdf``, so a
p value of 1e-250 comes back as that number and not as zero.

Each function takes a float or an array. A float (the common case: one statistic
at a time) goes through ``scipy.special.cython_special``, the same compiled
functions as the ufuncs called on Python floats without the ufunc machinery, and
comes back as a float; only the branch a value needs is evaluated. An array goes
through the ufuncs and comes back as an array.
"""

from __future__ import annotations

import numpy as np
from scipy import special
from scipy.special import cython_special as _scalar

__all__ = ["t_two_sided_p", "t_two_sided_p_float", "t_quantile", "f_upper_p", "f_quantile"]

_betainc = _scalar.betainc
_betaincc = _scalar.betaincc
_stdtrit = _scalar.stdtrit
_fdtri = _scalar.fdtri
_REAL = (int, float, np.integer)


def _t_two_sided_p_array(t: np.ndarray, df: float) -> np.ndarray:
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        t2 = t * t
        x = df / (df + t2)
        y = t2 / (df + t2)
        return np.where(x <= 0.5, special.betainc(0.5 * df, 0.5, x),
                        special.betaincc(0.5, 0.5 * df, y))


def t_two_sided_p(t: np.ndarray | float, df: float) -> np.ndarray | float:
    """Two-sided p value ``P(|T| >= |t|)`` for Student's t with ``df`` degrees of freedom.

    Notes
    -----
    ``P(|T| >= |t|) = I_x(df/2, 1/2)`` with ``x = df / (df + t^2)``, the regularized
    incomplete beta function (Abramowitz and Stegun 26.7.1 with 26.5.27). When x is
    near 1 (a small t or many degrees of freedom) rounding x would lose ``1 - x``,
    so the complement ``1 - I_{1-x}(1/2, df/2)`` is used there, with
    ``1 - x = t^2 / (df + t^2)`` formed directly. Both keep full relative accuracy,
    down to p values near 1e-300.
    """
    if isinstance(t, float) and isinstance(df, _REAL):
        t, df = float(t), float(df)  # Python floats: overflow to inf, NaN, no warnings
        if df + t * t != 0.0:
            return t_two_sided_p_float(t, df)
    return _t_two_sided_p_array(np.asarray(t, dtype=float), df)


def t_two_sided_p_float(t: float, df: float) -> float:
    """:func:`t_two_sided_p` for Python floats with ``df + t^2 != 0`` (``df > 0``, say),
    without the type checks: for callers that hold such floats already."""
    t2 = t * t
    s = df + t2
    x = df / s
    if x <= 0.5:
        return _betainc(0.5 * df, 0.5, x)
    return _betaincc(0.5, 0.5 * df, t2 / s)


def t_quantile(probability: np.ndarray | float, df: float) -> np.ndarray | float:
    """The ``probability`` quantile of Student's t (``P(T <= q) = probability``)."""
    if isinstance(probability, float) and isinstance(df, _REAL):
        return _stdtrit(float(df), probability)
    return special.stdtrit(df, probability)


def _f_upper_p_array(f: np.ndarray, dfn: float, dfd: float) -> np.ndarray:
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        x = dfd / (dfd + dfn * f)
        y = dfn * f / (dfd + dfn * f)
        return np.where(x <= 0.5, special.betainc(0.5 * dfd, 0.5 * dfn, x),
                        special.betaincc(0.5 * dfn, 0.5 * dfd, y))


def f_upper_p(f: np.ndarray | float, dfn: float, dfd: float) -> np.ndarray | float:
    """Upper-tail probability ``P(F >= f)`` for the F distribution.

    Notes
    -----
    ``P(F >= f) = I_x(dfd/2, dfn/2)`` with ``x = dfd / (dfd + dfn f)`` (Abramowitz and
    Stegun 26.6.2); for x near 1 the complement ``1 - I_{1-x}(dfn/2, dfd/2)`` with
    ``1 - x = dfn f / (dfd + dfn f)`` formed directly, as for t.
    """
    if isinstance(f, float) and isinstance(dfn, _REAL) and isinstance(dfd, _REAL):
        f, dfn, dfd = float(f), float(dfn), float(dfd)
        u = dfn * f
        s = dfd + u
        if s != 0.0:
            x = dfd / s
            if x <= 0.5:
                return _betainc(0.5 * dfd, 0.5 * dfn, x)
            return _betaincc(0.5 * dfn, 0.5 * dfd, u / s)
    return _f_upper_p_array(np.asarray(f, dtype=float), dfn, dfd)


def f_quantile(probability: np.ndarray | float, dfn: float, dfd: float) -> np.ndarray | float:
    """The ``probability`` quantile of the F distribution (``P(F <= q) = probability``)."""
    if isinstance(probability, float) and isinstance(dfn, _REAL) and isinstance(dfd, _REAL):
        return _fdtri(float(dfn), float(dfd), probability)
    return special.fdtri(dfn, dfd, probability)
