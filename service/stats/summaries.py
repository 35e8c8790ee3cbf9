"""Least squares from sufficient statistics instead of rows.

Two summaries of ``[X y]`` that any engine computes in one pass over partitions:

- ``triangular``: R from a QR factorisation of ``[X y]`` ((p+1) x (p+1), upper
  triangular; its last column holds ``Q'y`` and its corner the residual norm; row
  signs are arbitrary). Partitions merge by stacking their R factors and factoring
  again (TSQR; Demmel, Grigori, Hoemmen and Langou 2012, SIAM J. Sci. Comput. 34),
  which keeps the accuracy of QR.
- ``cross_products``: ``X'X``, ``X'y``, ``y'y`` and n, the SUM aggregates of SQL. Forming
  them squares the condition number of the problem, so about ``2 log10(kappa)``
  digits are lost before any solver sees them; the digits estimate says so.

Either becomes a square matrix ``F = [F_x f_y]`` with ``F'F = [X y]'[X y]``; the
least-squares problem ``min |F_x b - f_y|`` has the same solution, the same
``(X'X)^-1`` and the same residual sum of squares as the rows, so the row solver
(:func:`service.stats.lstsq.solve`) answers it with its rank decisions, aliases and
conditioning. For the triangular form F is R itself; for cross products
``F = Lambda^1/2 V'`` from the symmetric eigendecomposition of the augmented matrix.

Sums of squares about the mean need the intercept, a column of ones named
``intercept`` and first: in R its row is ``sqrt(n) (1, xbar, ybar)`` up to sign, so the
centred total is ``|f_y[1:]|^2`` and the centred regression sum ``|(F_x b)[1:]|^2``
exactly; from cross products, ``y'y - (1'y)^2 / n``.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from .lstsq import EPS, LeastSquares, solve

__all__ = ["Summary", "SummaryError", "solve_summary", "TRIANGULAR_TOLERANCE"]

TRIANGULAR_TOLERANCE = 1e-12
# Eigenvalues of the (equilibrated) augmented cross products below this many
# (p + 1) eps lambda_max are rounding, not data: cross products of exactly dependent
# columns leave eigenvalues of that size, and a design whose condition number exceeds
# about 1 / sqrt(100 eps), 7e6, cannot be told from one in this form.
ZERO_EIGENVALUE = 100
SYMMETRY_TOLERANCE = 1e-10


@dataclass(frozen=True)
class Summary:
    """A validated summary: ``kind`` is ``"triangular"`` or ``"cross_products"``."""

    kind: str
    n_observations: int
    names: tuple[str, ...]
    intercept: bool
    r_factor: np.ndarray | None = None
    xtx: np.ndarray | None = None
    xty: np.ndarray | None = None
    yty: float | None = None


class SummaryError(ValueError):
    """A summary that cannot describe any data; ``field`` and ``index`` locate the fault."""

    def __init__(self, message: str, field: str, index: tuple[int, ...] = ()):
        super().__init__(message)
        self.field = field
        self.index = index


def _factor(summary: Summary) -> np.ndarray:
    """The square F with ``F'F = [X y]'[X y]``."""
    p = len(summary.names)
    if summary.kind == "triangular":
        r = summary.r_factor
        if r.shape != (p + 1, p + 1):
            raise SummaryError(f"is {r.shape[0]} x {r.shape[1]}; with {p} column names it "
                               f"must be {p + 1} x {p + 1} (the last column is y)", "r_factor")
        scale = float(np.max(np.abs(r))) or 1.0
        below = np.tril(r, -1)
        if np.any(np.abs(below) > TRIANGULAR_TOLERANCE * scale):
            i, j = np.unravel_index(int(np.argmax(np.abs(below))), below.shape)
            raise SummaryError("must be zero: r_factor is upper triangular", "r_factor",
                               (int(i), int(j)))
        if summary.intercept:
            root_n = math.sqrt(summary.n_observations)
            if not abs(abs(r[0, 0]) - root_n) <= 1e-8 * root_n:
                raise SummaryError(f"is {r[0, 0]:.10g}; for the intercept (a column of "
                                   f"ones, first) it must be +-sqrt(n_observations) = "
                                   f"+-{root_n:.10g}", "r_factor", (0, 0))
        return np.triu(r)
    xtx, xty, yty = summary.xtx, summary.xty, summary.yty
    if xtx.shape != (p, p):
        raise SummaryError(f"is {xtx.shape[0]} x {xtx.shape[1]}; with {p} column names it "
                           f"must be {p} x {p}", "xtx")
    if xty.shape != (p,):
        raise SummaryError(f"has {xty.shape[0]} values for {p} column names", "xty")
    scale = float(np.max(np.abs(xtx))) or 1.0
    asym = np.abs(xtx - xtx.T)
    if np.max(asym) > SYMMETRY_TOLERANCE * scale:
        i, j = np.unravel_index(int(np.argmax(asym)), asym.shape)
        raise SummaryError("breaks the symmetry of xtx", "xtx", (int(i), int(j)))
    if np.any(np.diag(xtx) < 0):
        j = int(np.argmin(np.diag(xtx)))
        raise SummaryError("is a negative sum of squares", "xtx", (j, j))
    if yty < 0:
        raise SummaryError("is a negative sum of squares", "yty")
    if summary.intercept and xtx[0, 0] != summary.n_observations:
        raise SummaryError(f"is {xtx[0, 0]:g}; for the intercept (a column of ones) it must "
                           f"equal n_observations ({summary.n_observations})", "xtx", (0, 0))
    aug = np.empty((p + 1, p + 1))
    aug[:p, :p] = (xtx + xtx.T) / 2
    aug[:p, p] = aug[p, :p] = xty
    aug[p, p] = yty
    # Equilibrate before the eigendecomposition so that columns of any scale meet on
    # equal terms; powers of two keep it exact.
    d = np.sqrt(np.diag(aug))
    _, e = np.frexp(np.where(d > 0, d, 1.0))
    a = np.ldexp(np.ldexp(aug, -e[:, None]), -e[None, :])
    lam, v = np.linalg.eigh(a)
    top = float(np.max(lam)) if lam.size else 0.0
    if lam.size and lam[0] < -1e3 * EPS * max(top, 1.0) * (p + 1):
        raise SummaryError("with xty and yty is not positive semi-definite (smallest "
                           f"eigenvalue {lam[0]:.3g} of {top:.3g}): no data have these "
                           "cross products", "xtx")
    # Eigenvalues within rounding of zero are zero: their square roots would turn
    # noise of eps * lambda_max into singular values of sqrt(eps) * sigma_max and hide
    # an exact dependency from the rank test.
    lam = np.where(lam > ZERO_EIGENVALUE * (p + 1) * EPS * top, lam, 0.0)
    f = np.sqrt(lam)[:, None] * v.T
    return np.ldexp(f, e[None, :])


def _augmented_condition(summary: Summary, f: np.ndarray) -> float:
    """Condition number of [X y] with columns scaled to unit length (from F)."""
    norms = np.sqrt(np.sum(f * f, axis=0))
    unit = f / np.where(norms > 0, norms, 1.0)
    s = np.linalg.svd(unit, compute_uv=False)
    return float(s[0] / s[-1]) if s[-1] > 0 else math.inf


def _spread(summary: Summary, f: np.ndarray) -> np.ndarray | None:
    """``sqrt(sum (x_j - xbar_j)^2)`` per column from ``X'X`` (with an intercept), for VIF."""
    if not summary.intercept:
        return None
    p = len(summary.names)
    xtx = summary.xtx if summary.xtx is not None else f[:, :p].T @ f[:, :p]
    n = summary.n_observations
    with np.errstate(invalid="ignore"):
        spread = np.sqrt(np.clip(np.diag(xtx) - xtx[0] ** 2 / n, 0.0, None))
    spread[0] = np.nan
    return spread


def _constant_response(summary: Summary, total: float, fy: np.ndarray) -> bool:
    """Whether the centred total is at the rounding level of the response, the level
    :func:`service.stats.inference.is_perfect_fit` uses: ``8 n eps |y|`` for R's
    ``|f_y[1:]|``; for cross products, whose ``y'y - (1'y)^2 / n`` cancels in squares,
    ``8 n eps y'y`` for the centred sum of squares."""
    n = summary.n_observations
    if summary.kind == "triangular":
        return total <= 8 * n * EPS * float(np.linalg.norm(fy))
    return total * total <= 8 * n * EPS * summary.yty


def solve_summary(summary: Summary, *, drop_aliased: bool, extended_max_work: int,
                  extended_below_digits: float) -> tuple[LeastSquares, np.ndarray | None]:
    """The least-squares solution from a summary, and the column spreads for VIF.

    Raises
    ------
    SummaryError, RankDeficient
    """
    p = len(summary.names)
    if summary.n_observations <= p:
        raise SummaryError(f"is {summary.n_observations}; the summary has {p} columns, and "
                           "inference needs more observations than columns",
                           "n_observations")
    f = _factor(summary)
    fx, fy = f[:, :p], f[:, p]
    sol = solve(fx, fy, centered=False, drop_aliased=drop_aliased,
                extended_max_work=extended_max_work,
                extended_below_digits=extended_below_digits,
                rank_rows=summary.n_observations,
                # The eigendecomposition leaves directions it zeroed at about (p + 1)
                # eps, far below the sqrt(100 (p + 1) eps) of any direction it kept.
                rank_tolerance=(1000 * (p + 1) * EPS if summary.kind == "cross_products"
                                else None))
    fitted = sol.fitted
    if summary.kind == "triangular":
        if summary.intercept:
            total = math.hypot(*fy[1:]) if p > 0 else 0.0
            regression = float(np.linalg.norm(fitted[1:]))
        else:
            total = float(np.linalg.norm(fy))
            regression = float(np.linalg.norm(fitted))
        digits = sol.estimated_correct_digits
    else:
        rss = sol.residual_norm * sol.residual_norm
        yty = summary.yty
        tss = (yty - summary.xty[0] * summary.xty[0] / summary.n_observations
               if summary.intercept else yty)
        tss = max(tss, 0.0)
        total = math.sqrt(tss)
        regression = math.sqrt(max(tss - rss, 0.0))
        # The cross products hold the problem to about eps kappa^2, kappa the condition
        # number of the augmented [X y] (worse than X's whenever the fit is good).
        lost = 2 * math.log10(max(_augmented_condition(summary, f), 1.0))
        digits = min(sol.estimated_correct_digits, max(0.0, 15.95 - lost))
    residual = sol.residual_norm
    if summary.intercept and _constant_response(summary, total, fy):
        # What the rows of a constant response give: no variation about the mean, none
        # explained, none left (R squared undefined), instead of a ratio of roundings.
        total = regression = residual = 0.0
    sol = dataclasses.replace(
        sol, fitted=np.zeros(0), residuals=np.zeros(0), regression_norm=regression,
        total_norm=total, residual_norm=residual, response_norm=float(np.linalg.norm(fy)),
        estimated_correct_digits=digits, projection=None)
    return sol, _spread(summary, f)
