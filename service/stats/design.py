"""The design: predictors, intercept, response and weights, with unusable rows removed."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from .terms import ExactColumns, TermInfo

__all__ = ["Design", "build_design", "INTERCEPT"]

INTERCEPT = "intercept"


@dataclass(frozen=True)
class Design:
    """The arrays a fit works on.

    Attributes
    ----------
    matrix : (n, k) array, Fortran (column-major) order
        Design columns, the intercept column of ones first when there is one. Column
        order is what the factorisation and the per-column sums read.
    response : (n,) array
    weights : (n,) array or None
        Positive weights; None for ordinary least squares.
    names : tuple of str
        One name per design column (``"intercept"`` for the column of ones).
    intercept : bool
    rows_used : (n,) int array
        Indices, into the rows as posted, of the rows in the fit.
    rows_dropped_missing : int
        Rows dropped because a value was missing (``missing="drop_rows"``).
    rows_zero_weight : int
        Rows left out because their weight is zero: they take no part in the fit.
    """

    matrix: np.ndarray
    response: np.ndarray
    weights: np.ndarray | None
    names: tuple[str, ...]
    intercept: bool
    rows_used: np.ndarray
    rows_dropped_missing: int
    rows_zero_weight: int
    exact: ExactColumns | None = None
    terms: tuple[TermInfo, ...] = ()

    @property
    def n_observations(self) -> int:
        return int(self.matrix.shape[0])


def build_design(predictors: np.ndarray | Sequence[np.ndarray], response: np.ndarray,
                 names: tuple[str, ...], *,
                 intercept: bool = True, weights: np.ndarray | None = None,
                 exact: ExactColumns | None = None,
                 terms: tuple[TermInfo, ...] = ()) -> Design:
    """Assemble the design from validated arrays.

    Parameters
    ----------
    predictors : (n, m) float array, or m float arrays of n values (the columns)
        Finite or NaN (missing); rows with a NaN anywhere (predictors, response or
        weight) are dropped. The caller decides beforehand whether that is allowed.
        Columns are copied once, straight into the design.
    response : (n,) float array
    names : tuple of m str
    intercept : bool
        Prepend a column of ones named ``"intercept"``.
    weights : (n,) float array or None
        Non-negative; rows of weight zero are left out of the fit.
    exact, terms : from :func:`service.stats.terms.expand_terms`, when the predictors
        were built from model terms
    """
    n = response.shape[0]
    # A view into something larger (a column of an Arrow stream or of a parsed CSV
    # block) would keep all of that alive for as long as the design: own copies.
    if response.base is not None:
        response = response.copy()
    if weights is not None and weights.base is not None:
        weights = weights.copy()
    bad = np.isnan(response)
    # A matrix is copied in one piece (faster than column by column: measured), columns
    # one by one.
    matrix = isinstance(predictors, np.ndarray)
    columns = None if matrix else list(predictors)
    width = predictors.shape[1] if matrix else len(columns)
    # A NaN anywhere makes the plain sum NaN (so can opposite overflows): one pass over
    # the predictors decides whether the row-by-row test is needed.
    with np.errstate(over="ignore", invalid="ignore"):
        suspect = math.isnan(float(predictors.sum())) if matrix else \
            any(math.isnan(float(c.sum())) for c in columns)
    if suspect:
        bad |= np.isnan(predictors).any(axis=1) if matrix else \
            np.logical_or.reduce([np.isnan(c) for c in columns])
    if weights is not None:
        bad |= np.isnan(weights)
    keep = ~bad
    dropped_missing = int(np.count_nonzero(bad))
    zero = 0
    if weights is not None:
        zero_mask = keep & (weights == 0)
        zero = int(np.count_nonzero(zero_mask))
        keep &= ~zero_mask
    rows = np.flatnonzero(keep) if (dropped_missing or zero) else np.arange(n)
    y = response[rows] if rows.size != n else response
    w = None
    if weights is not None:
        w = weights[rows] if rows.size != n else weights
        if np.all(w == 1.0):
            w = None
    first = 1 if intercept else 0
    x = np.empty((rows.size, width + first), order="F")
    if intercept:
        x[:, 0] = 1.0
        names = (INTERCEPT,) + tuple(names)
        if exact is not None:
            exact = exact.with_intercept()
    if matrix:
        x[:, first:] = predictors[rows] if rows.size != n else predictors
    else:
        for j, column in enumerate(columns):
            x[:, first + j] = column[rows] if rows.size != n else column
    return Design(matrix=x, response=y, weights=w,
                  names=tuple(names), intercept=intercept, rows_used=rows,
                  rows_dropped_missing=dropped_missing, rows_zero_weight=zero,
                  exact=exact, terms=terms)
