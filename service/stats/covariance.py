"""The covariance of the estimates: classical, or heteroskedasticity-consistent (HC0-HC3).

Classical: ``V = s^2 (X'WX)^-1`` with ``s^2 = RSS / (n - p)``.

Heteroskedasticity-consistent ("sandwich") estimators, for the weighted model
written as ``y* = X* b + e*`` with ``X* = sqrt(W) X``, ``e*_i = sqrt(w_i) e_i``:
``V = X*^+ diag(omega) X*^+'``, where ``X*^+ = (X*'X*)^-1 X*'`` and

- ``hc0``: ``omega_i = e*_i^2`` (White 1980, Econometrica 48, 817-838);
- ``hc1``: ``omega_i = n / (n - p) e*_i^2``;
- ``hc2``: ``omega_i = e*_i^2 / (1 - h_i)``;
- ``hc3``: ``omega_i = e*_i^2 / (1 - h_i)^2`` (MacKinnon and White 1985, Journal of
  Econometrics 29, 305-325),

with ``h_i`` the leverages. Tests and intervals then use Student's t with the
residual degrees of freedom, a common small-sample practice for these estimators
(Long and Ervin 2000, The American Statistician 54, 217-224; from memory). A row of
leverage 1 is fitted exactly and carries no information on its own variance; HC2
and HC3 are undefined there and come back as NaN.
"""

from __future__ import annotations

import contextlib

import numpy as np

from .lstsq import LeastSquares
from .records import record

__all__ = ["KINDS", "CovarianceEstimate", "estimate_covariance"]

KINDS = ("classical", "hc0", "hc1", "hc2", "hc3")


@record
class CovarianceEstimate:
    """``matrix`` (k x k, NaN for aliased columns) and ``standard_errors`` (overflow-safe).

    ``root`` (classical only): G with ``G G' = matrix``, for tests and predictions that
    keep their digits on ill-conditioned designs; None for the robust kinds.
    """

    kind: str
    matrix: np.ndarray
    standard_errors: np.ndarray
    root: np.ndarray | None = None


_QUIET = contextlib.nullcontext()


def _bounded(s: float, root_diagonal: np.ndarray) -> bool:
    """Whether ``s^2 (X'WX)^-1``, ``s r`` and ``s G`` are sure to stay finite (and meet
    no ``0 * inf``), so that numpy's floating-point checks need not be silenced.

    With ``r_i = sqrt([(X'WX)^-1]_ii)``: ``|[(X'WX)^-1]_ij| <= r_i r_j`` (a covariance
    factor is positive semi-definite) and ``|G_ij| <= r_i`` (the rows of G have norm
    r_i), so ``s < 1e150`` (``s^2`` is formed first) and every ``r_i`` below
    ``1e150 / max(s, 1)`` bound them all far below the largest double. A NaN s (no
    residual df) only makes NaNs; a NaN r_i (an aliased column) or an infinite one
    fails the test.
    """
    if s >= 1e150:
        return False
    limit = 1e150 / s if s > 1.0 else 1e150
    return all(r < limit for r in root_diagonal.tolist())


def estimate_covariance(solution: LeastSquares, kind: str, n: int,
                        sigma: float, perfect_fit: bool) -> CovarianceEstimate:
    """The covariance of the estimates of ``kind`` (one of :data:`KINDS`).

    ``sigma`` is the residual standard deviation (NaN without residual degrees of
    freedom); for a perfect fit every estimator is zero.
    """
    k = solution.coefficients.shape[0]
    df = n - solution.rank
    if kind == "classical" or perfect_fit or df <= 0:
        s = 0.0 if perfect_fit and df > 0 else sigma
        with _QUIET if _bounded(s, solution.root_diagonal) else \
                np.errstate(over="ignore", invalid="ignore"):
            matrix = s * s * solution.covariance_factor
            se = s * solution.root_diagonal
            root = s * solution.covariance_root if kind == "classical" else None
        return CovarianceEstimate(kind, matrix, se, root)
    proj = solution.projection
    if proj is None:
        raise ValueError("a robust covariance needs the solution's projection")
    e2 = proj.weighted_residuals ** 2
    h = proj.leverages
    with np.errstate(divide="ignore", invalid="ignore"):
        if kind == "hc0":
            omega = e2
        elif kind == "hc1":
            omega = e2 * (n / df)
        elif kind == "hc2":
            omega = np.where(h < 1.0, e2 / (1.0 - h), np.nan)
        elif kind == "hc3":
            omega = np.where(h < 1.0, e2 / (1.0 - h) ** 2, np.nan)
        else:
            raise ValueError(f"unknown covariance kind {kind!r}")
    p = proj.pseudo_inverse
    scaled = (p * omega[None, :]) @ p.T
    e = proj.column_exponents
    e_y = proj.response_exponent
    kept = np.flatnonzero(solution.estimable)
    matrix = np.full((k, k), np.nan)
    se = np.full(k, np.nan)
    with np.errstate(over="ignore", invalid="ignore"):
        matrix[np.ix_(kept, kept)] = np.ldexp(scaled, 2 * e_y - (e[:, None] + e[None, :]))
        se[kept] = np.ldexp(np.sqrt(np.diag(scaled)), e_y - e)
    return CovarianceEstimate(kind, matrix, se)
