"""Classical inference for a least-squares fit: the coefficient table, fit statistics, overall F.

Undefined figures are NaN here; the web layer writes them as null, beside a warning
that says why. Model: ``y = X beta + e`` with independent errors of mean zero and
variance ``sigma^2 / w_i``, normally distributed for the t and F reference
distributions to hold exactly.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from .covariance import CovarianceEstimate, estimate_covariance
from .distributions import f_quantile, f_upper_p, t_quantile, t_two_sided_p_float
from .lstsq import EPS, LeastSquares
from .records import record

__all__ = ["Interval", "Coefficient", "FitStatistics", "FTest", "Inference", "infer",
           "is_perfect_fit", "SIMULTANEOUS", "simultaneous_multipliers"]

SIMULTANEOUS = ("bonferroni", "scheffe")


@record
class Interval:
    """A two-sided confidence interval at ``level``."""

    level: float
    lower: float
    upper: float


@record
class Coefficient:
    """One row of the coefficient table.

    ``t_statistic = estimate / standard_error`` tests ``beta_j = 0``;
    ``p_value = P(|T| >= |t|)`` with T ~ t(residual_df); each interval is
    ``estimate +- t_{(1+level)/2, residual_df} * standard_error``.
    """

    name: str
    estimable: bool
    estimate: float
    standard_error: float
    t_statistic: float
    p_value: float
    intervals: tuple[Interval, ...]
    simultaneous_intervals: tuple[Interval, ...]
    vif: float


@record
class FitStatistics:
    """Goodness of fit.

    With an intercept the total sum of squares is about the weighted mean
    (``centered``); without one it is about zero (uncentered), and so are R squared
    and the overall F test. ``r_squared = SSR / (SSR + RSS)`` (equal to
    ``1 - RSS/TSS``, but without cancellation);
    ``adjusted_r_squared = 1 - (1 - R^2) (n - c) / (n - p)`` with c = 1 when centered.
    ``log_likelihood = -n/2 (log(2 pi RSS / n) + 1) + 1/2 sum log w_i`` (Gaussian errors,
    the maximum-likelihood variance RSS/n); ``aic = -2 L + 2 (p + 1)``,
    ``bic = -2 L + log(n) (p + 1)``, the error variance counted as a parameter.
    """

    r_squared: float
    adjusted_r_squared: float
    residual_standard_deviation: float
    residual_sum_of_squares: float
    regression_sum_of_squares: float
    total_sum_of_squares: float
    log_likelihood: float
    aic: float
    bic: float
    centered: bool


@record
class FTest:
    """``statistic ~ F(numerator_df, denominator_df)`` under the null; ``p_value = P(F >= statistic)``."""

    statistic: float
    numerator_df: float
    denominator_df: float
    p_value: float


@record
class Inference:
    n_observations: int
    n_parameters: int
    residual_df: int
    coefficients: tuple[Coefficient, ...]
    fit: FitStatistics
    overall_f_test: FTest
    perfect_fit: bool
    covariance: CovarianceEstimate
    simultaneous: str | None


def is_perfect_fit(solution: LeastSquares, n: int) -> bool:
    """Residuals at the rounding level of the response: ``|r| <= 8 n eps |sqrt(W) y|``."""
    return solution.residual_norm <= 8 * n * EPS * solution.response_norm


def _ratio(b: float, s: float) -> float:
    """``b / s`` with IEEE semantics (as numpy divides): +-inf for b / 0, NaN for 0 / 0."""
    if s:
        return b / s
    if b != b or b == 0:
        return math.nan
    return math.copysign(math.inf, b) * math.copysign(1.0, s)


def _vif(solution: LeastSquares,
         column_spread: np.ndarray | list[float] | None) -> list[float]:
    """``VIF_j = [(X'WX)^-1]_jj * sum_i w_i (x_ij - xbar_j)^2`` (with an intercept only).

    This equals ``1 / (1 - R_j^2)`` from the regression of column j on the others
    (Belsley, Kuh and Welsch 1980, section 3.2).
    """
    if column_spread is None:
        return [math.nan] * solution.coefficients.shape[0]
    # Python floats: a product that overflows is inf, without a warning.
    if isinstance(column_spread, np.ndarray):
        column_spread = column_spread.tolist()
    return [(r * c) * (r * c) for r, c in zip(solution.root_diagonal.tolist(), column_spread)]


@functools.lru_cache(maxsize=256)
def _t_multiplier(level: float, df: int) -> float:
    """``t_{(1+level)/2, df}``, the half-width of a two-sided interval at ``level`` in
    standard errors; cached, since a service sees the same few levels and df again."""
    return float(-t_quantile((1.0 - level) / 2.0, df))


def simultaneous_multipliers(method: str, levels: tuple[float, ...], m: int,
                             df: float) -> list[float]:
    """Half-width multipliers (in standard errors) for m intervals holding jointly.

    ``bonferroni``: ``t_{1 - (1 - level) / (2 m), df}`` (each interval at level
    ``1 - (1 - level) / m``; the joint coverage is at least ``level`` by Bonferroni's
    inequality). ``scheffe``: ``sqrt(m F_{level}(m, df))``, which covers every linear
    combination of the m coefficients at once (Scheffe 1953, Biometrika 40, 87-104).
    """
    if df <= 0 or m <= 0:
        return [math.nan] * len(levels)
    if method == "bonferroni":
        return [float(-t_quantile((1.0 - lv) / (2.0 * m), df)) for lv in levels]
    if method == "scheffe":
        return [math.sqrt(m * float(f_quantile(lv, m, df))) for lv in levels]
    raise ValueError(f"unknown simultaneous method {method!r}")


def infer(solution: LeastSquares, names: tuple[str, ...], n: int, *, centered: bool,
          levels: tuple[float, ...], log_weight_sum: float = 0.0,
          column_spread: np.ndarray | list[float] | None = None,
          covariance: str = "classical",
          simultaneous: str | None = None) -> Inference:
    """The coefficient table and fit statistics of a solved least-squares problem.

    Parameters
    ----------
    solution : LeastSquares
    names : k column names
    n : number of observations in the fit (positive weight)
    centered : whether the model has an intercept
    levels : confidence levels in (0, 1)
    log_weight_sum : ``sum log w_i`` for the log likelihood (0 without weights)
    column_spread : k values (array or list) ``sqrt(sum w (x_j - xbar_j)^2)`` per column,
        for VIF (with an intercept; NaN for the intercept itself), or None
    covariance : one of :data:`service.stats.covariance.KINDS`; standard errors, t, p
        and intervals follow it
    simultaneous : None, ``"bonferroni"`` or ``"scheffe"``: add intervals that hold
        jointly for all estimable coefficients
    """
    p = solution.rank
    df = n - p
    perfect = is_perfect_fit(solution, n)
    # Scalars as Python floats from here on: their overflow gives inf and their NaN
    # propagates without numpy's floating-point warnings (and without np.errstate).
    rn, gn = float(solution.residual_norm), float(solution.regression_norm)
    if centered and p <= 1:
        gn = 0.0  # the intercept-only model fits the mean: nothing is explained
    sigma = rn / math.sqrt(df) if df > 0 else math.nan
    cov = estimate_covariance(solution, covariance, n, sigma, perfect and df > 0)
    se = cov.standard_errors.tolist()
    estimates = solution.coefficients.tolist()
    k = len(estimates)
    if df > 0 and not perfect:
        t = [_ratio(b, s_j) for b, s_j in zip(estimates, se)]
        fdf = float(df)  # df > 0: df + t^2 is never 0
        pv = [t_two_sided_p_float(v, fdf) for v in t]
    else:
        t = pv = [math.nan] * k
    quantiles = [_t_multiplier(lv, df) if df > 0 else math.nan for lv in levels]
    joint = (simultaneous_multipliers(simultaneous, levels, p, df)
             if simultaneous else [])
    vif = _vif(solution, column_spread)
    coefficients = tuple(
        Coefficient(name, est, b, s_j, t_j, p_j,
                    tuple([Interval(lv, b - q * s_j, b + q * s_j)
                           for lv, q in zip(levels, quantiles)]),
                    tuple([Interval(lv, b - q * s_j, b + q * s_j)
                           for lv, q in zip(levels, joint)]) if joint else (),
                    v)
        for name, est, b, s_j, t_j, p_j, v
        in zip(names, solution.estimable.tolist(), estimates, se, t, pv, vif))

    c = 1 if centered else 0
    if gn == 0 and rn == 0:
        r2 = math.nan
        one_minus = math.nan
    elif gn == 0:
        r2, one_minus = 0.0, 1.0
    else:
        ratio = rn / gn
        r2 = 1.0 / (1.0 + ratio * ratio)
        one_minus = ratio * ratio / (1.0 + ratio * ratio)
    adj = 1.0 - one_minus * (n - c) / df if df > 0 else math.nan
    rss = rn * rn
    if n > 0 and rn > 0:
        log_lik = (-0.5 * n * (math.log(2 * math.pi) + 2 * math.log(rn) - math.log(n) + 1)
                   + 0.5 * log_weight_sum)
    else:
        log_lik = math.nan
    n_par = p + 1
    aic = -2 * log_lik + 2 * n_par
    bic = -2 * log_lik + math.log(n) * n_par if n > 0 else math.nan
    dfn = p - c
    if dfn > 0 and df > 0 and rn > 0 and not perfect:
        q = gn / rn
        f_stat = q * q * df / dfn
        f_p = f_upper_p(f_stat, dfn, df)
    else:
        f_stat = f_p = math.nan
    total = float(solution.total_norm)
    fit = FitStatistics(
        r_squared=r2, adjusted_r_squared=adj, residual_standard_deviation=sigma,
        residual_sum_of_squares=rss, regression_sum_of_squares=gn * gn,
        total_sum_of_squares=total * total, log_likelihood=log_lik,
        aic=aic, bic=bic, centered=centered)
    return Inference(
        n_observations=n, n_parameters=p, residual_df=df,
        coefficients=coefficients, fit=fit,
        overall_f_test=FTest(statistic=f_stat, numerator_df=float(dfn),
                             denominator_df=float(df), p_value=f_p),
        perfect_fit=perfect, covariance=cov, simultaneous=simultaneous)
