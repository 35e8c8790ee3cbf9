"""Checks on the residuals, and per-row influence measures.

All on the weighted residuals ``e*_i = sqrt(w_i) (y_i - x_i b)``, in row order.

- Moments: ``skewness = m3 / m2^1.5`` and ``kurtosis = m4 / m2^2`` (3 for normal errors;
  not the excess), central moments ``m_k = mean((e - mean e)^k)``.
- Durbin-Watson: ``d = sum (e_t - e_{t-1})^2 / sum e_t^2`` (Durbin and Watson 1950,
  Biometrika 37, 409-428); near 2 without first-order serial correlation. It is
  meaningful only when the rows are in time (or another natural) order.
- Jarque-Bera: ``JB = n/6 (S^2 + (K - 3)^2 / 4)``, referred to chi-square(2) (Jarque and
  Bera 1980, Economics Letters 6, 255-259).
- Breusch-Pagan, studentized (Koenker 1981, Journal of Econometrics 17, 107-112):
  ``LM = n R^2`` of the regression of ``e*^2`` on a constant and the predictors,
  referred to chi-square with as many degrees of freedom as non-constant predictors.
- Influence (Cook and Weisberg, Residuals and Influence in Regression, 1982):
  leverage ``h_i``; internally studentized ``r_i = e*_i / (s sqrt(1 - h_i))``;
  externally studentized ``t_i = r_i sqrt((n - p - 1) / (n - p - r_i^2))``;
  Cook's distance ``D_i = r_i^2 h_i / (p (1 - h_i))``.
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy.special import cython_special

from .lstsq import LeastSquares
from .records import record

__all__ = ["ResidualChecks", "Influence", "check_residuals", "influence"]

_PROBS = (0.0, 0.25, 0.5, 0.75, 1.0)
_chdtrc = cython_special.chdtrc  # chi-square upper tail, scipy.special.chdtrc on floats


@record
class ResidualChecks:
    quantiles: tuple[tuple[float, float], ...]
    skewness: float
    kurtosis: float
    durbin_watson: float
    jarque_bera_statistic: float
    jarque_bera_p_value: float
    breusch_pagan_statistic: float
    breusch_pagan_df: int
    breusch_pagan_p_value: float


@record
class Influence:
    leverage: np.ndarray
    studentized_residual: np.ndarray
    externally_studentized_residual: np.ndarray
    cooks_distance: np.ndarray


def _weighted(solution: LeastSquares, weights: np.ndarray | None) -> np.ndarray:
    return solution.residuals if weights is None else solution.residuals * np.sqrt(weights)


def _breusch_pagan(u: np.ndarray, mean: float, x: np.ndarray, intercept: bool,
                   solution: LeastSquares | None = None) -> tuple[float, int, float]:
    """Koenker's ``LM = n R^2`` for ``u = e*^2`` of the given mean, ``e*`` scaled to
    ``max |e*| = 1``.

    With that scaling ``max u`` is exactly 1, so u is constant exactly when
    ``sum (u - mean)^2`` is 0 (otherwise some ``1 - mean`` is at least half an ulp of 1,
    whose square does not underflow): the test is then undefined (NaN).
    """
    n = u.shape[0]
    centred = np.subtract(u, mean, out=u)  # u is the caller's own temporary
    ss_tot = float(centred.dot(centred))
    if solution is not None and solution.factor is not None and solution.rank > 1:
        # With an intercept and no weights the auxiliary regressors are the model's own
        # columns, the constant among them: the model's QR factor projects onto them,
        # and the regression sum of squares is |P (u - ubar)|^2 = |Q_1' (u - ubar)|^2.
        rank = solution.rank - 1
        if ss_tot == 0:
            return math.nan, rank, math.nan
        coordinates = solution.coordinates(centred)
        lm = n * float(coordinates.dot(coordinates)) / ss_tot
        return lm, rank, _chdtrc(float(rank), lm)
    z = x[:, 1:] if intercept else x
    z = z[:, np.ptp(z, axis=0) > 0] if z.size else z
    if z.shape[1] == 0 or ss_tot == 0:
        return math.nan, int(z.shape[1]), math.nan
    scale = np.max(np.abs(z), axis=0)
    a = np.column_stack([np.ones(n), z / scale])
    # Regressing the centred squares: the fitted values are already about their mean.
    coef, _, rank_a, _ = np.linalg.lstsq(a, centred, rcond=None)
    rank = int(rank_a) - 1
    spread = a @ coef
    lm = n * float(spread.dot(spread)) / ss_tot
    return lm, rank, _chdtrc(float(rank), lm) if rank > 0 else math.nan


@functools.lru_cache(maxsize=64)
def _quantile_positions(n: int) -> tuple[tuple[float, int, float, int], ...]:
    """``(p, floor h, h - floor h, min(floor h + 1, n - 1))`` for ``h = p (n - 1)``."""
    out = []
    for prob in _PROBS:
        position = prob * (n - 1)
        low = math.floor(position)
        out.append((prob, low, position - low, min(low + 1, n - 1)))
    return tuple(out)


def _order_statistics(values: np.ndarray) -> np.ndarray:
    """``values`` rearranged so that every position :func:`_quantiles` reads holds what a
    full sort would put there (``numpy.partition`` at those positions: linear time)."""
    n = values.shape[0]
    if n <= 1_000:
        ordered = values.copy()  # np.sort's copy and sort, without its dispatch
        ordered.sort()
        return ordered
    wanted = sorted({i for _, low, _, high in _quantile_positions(n) for i in (low, high)})
    return np.partition(values, wanted)


def _quantiles(ordered: np.ndarray) -> tuple[tuple[float, float], ...]:
    """Quantiles at ``_PROBS`` of sorted values by linear interpolation.

    Position ``h = p (n - 1)``: ``q = x_(floor h) + (h - floor h) (x_(floor h + 1) -
    x_(floor h))`` (Hyndman and Fan 1996, definition 7; numpy's default).
    """
    # Up to 1,000 values (the full sort of _order_statistics) one tolist beats ten
    # ndarray.item calls; both give the same Python floats.
    item = ordered.tolist().__getitem__ if ordered.shape[0] <= 1_000 else ordered.item
    out = []
    for prob, low, fraction, high in _quantile_positions(ordered.shape[0]):
        a = item(low)
        out.append((prob, a + fraction * (item(high) - a)))
    return tuple(out)


def check_residuals(solution: LeastSquares, x: np.ndarray, weights: np.ndarray | None,
                    intercept: bool) -> ResidualChecks:
    """The residual summary and the tests of the module docstring."""
    raw = _weighted(solution, weights)
    n = raw.shape[0]
    ordered = _order_statistics(raw)
    quantiles = _quantiles(ordered)
    # Every statistic below is scale-free: work on e / max|e| so that fourth powers of
    # residuals near 1e100 neither overflow nor underflow. max|e| from the sorted ends
    # (NaN, sorted last, wins). Scalars are Python floats: no numpy warnings.
    low, high = (-ordered.item(0), ordered.item(n - 1)) if n else (0.0, 0.0)
    del ordered  # large designs: one n-vector fewer alive at the peak below
    top = low if low > high else high
    e = raw / top if top > 0 else raw
    d = e - float(np.add.reduce(e)) / n
    d2 = d * d
    m2 = float(d.dot(d)) / n
    if m2 > 0:
        skew = float(d2.dot(d)) / n / m2 ** 1.5
        kurt = float(d2.dot(d2)) / n / m2 ** 2
        jb = n / 6.0 * (skew * skew + (kurt - 3.0) ** 2 / 4.0)
        jb_p = math.exp(-jb / 2.0)
    else:
        skew = kurt = jb = jb_p = math.nan
    del d, d2
    ss = float(e.dot(e))
    if ss > 0 and n > 1:
        step = e[1:] - e[:-1]
        dw = float(step.dot(step)) / ss
        del step
    else:
        dw = math.nan
    own_columns = intercept and weights is None and solution.rank == x.shape[1]
    # sum u = sum e^2 = ss: the mean of the squares without another pass.
    bp, bp_df, bp_p = _breusch_pagan(e * e, ss / n, x, intercept,
                                     solution if own_columns else None)
    return ResidualChecks(quantiles, skew, kurt, dw, jb, jb_p, bp, bp_df, bp_p)


def influence(solution: LeastSquares, weights: np.ndarray | None, sigma: float) -> Influence:
    """Leverages, studentized residuals and Cook's distances (needs the projection)."""
    if solution.projection is None:
        raise ValueError("influence measures need the solution's projection")
    h = solution.projection.leverages
    e = _weighted(solution, weights)
    p = solution.rank
    df = e.shape[0] - p
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        free = np.where(h < 1.0 - 1e-12, 1.0 - h, np.nan)
        r = e / (sigma * np.sqrt(free)) if sigma > 0 else np.full_like(e, np.nan)
        if df > 1:
            t = r * np.sqrt((df - 1) / np.maximum(df - r * r, 0.0))
        else:
            t = np.full_like(e, np.nan)
        cook = r * r * h / (p * free) if p > 0 else np.full_like(e, np.nan)
    return Influence(leverage=h, studentized_residual=r,
                     externally_studentized_residual=t, cooks_distance=cook)
