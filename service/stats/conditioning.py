"""Can the design support the fit? Rank, condition indexes and near-dependencies.

The diagnostics follow Belsley, Kuh and Welsch, Regression Diagnostics (Wiley 1980),
chapter 3: the design's columns are scaled to unit length (not centred), its
singular values ``mu_1 >= ... >= mu_p`` give the condition indexes
``eta_k = mu_1 / mu_k``, and the variance-decomposition proportions
``pi_kj = (v_jk^2 / mu_k^2) / sum_l (v_jl^2 / mu_l^2)`` say which coefficients'
variances a near-dependency inflates.

Thresholds (from memory of BKW 1980, chapter 3, where condition indexes of 30 to 100
are described as moderate to strong dependencies, and proportions above 0.5 as the
columns involved): a condition index above 30 marks a near-dependency, and the
columns with proportion above 0.5 on it form a collinear set. The design is
``ill_conditioned`` when its condition number exceeds 30.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .lstsq import Alias, LeastSquares

__all__ = ["Conditioning", "assess", "CONDITION_INDEX_LIMIT", "PROPORTION_LIMIT"]

CONDITION_INDEX_LIMIT = 30.0
PROPORTION_LIMIT = 0.5


@dataclass(frozen=True)
class CollinearSet:
    """Columns whose coefficient variances one near-dependency inflates."""

    condition_index: float
    columns: tuple[str, ...]
    proportions: tuple[float, ...]


@dataclass(frozen=True)
class Conditioning:
    """The verdict on the design.

    ``status`` is ``"rank_deficient"`` when columns were aliased, else
    ``"ill_conditioned"`` when the condition number exceeds 30, else ``"ok"``.
    """

    status: str
    rank: int
    n_columns: int
    rank_tolerance: float
    condition_number: float
    condition_indexes: tuple[float, ...]
    collinear_sets: tuple[CollinearSet, ...]
    aliased: tuple[Alias, ...]


def assess(solution: LeastSquares, names: tuple[str, ...]) -> Conditioning:
    """Rank, condition indexes and collinear sets of the kept design columns."""
    kept_names = [n for n, e in zip(names, solution.estimable) if e]
    mu = solution.singular_values
    sets: list[CollinearSet] = []
    indexes: tuple[float, ...] = ()
    if mu.size:
        with np.errstate(divide="ignore"):
            eta = mu[0] / mu
        indexes = tuple(float(v) for v in eta)
        phi = solution.right_singular_vectors ** 2 / mu[None, :] ** 2
        proportions = phi / phi.sum(axis=1, keepdims=True)
        for kdx in range(mu.size):
            if not eta[kdx] > CONDITION_INDEX_LIMIT:
                continue
            involved = np.flatnonzero(proportions[:, kdx] > PROPORTION_LIMIT)
            if involved.size >= 2:
                sets.append(CollinearSet(
                    condition_index=float(eta[kdx]),
                    columns=tuple(kept_names[i] for i in involved),
                    proportions=tuple(float(proportions[i, kdx]) for i in involved)))
    if solution.aliases:
        status = "rank_deficient"
    elif solution.condition_number > CONDITION_INDEX_LIMIT:
        status = "ill_conditioned"
    else:
        status = "ok"
    return Conditioning(
        status=status, rank=solution.rank, n_columns=len(names),
        rank_tolerance=solution.rank_tolerance,
        condition_number=solution.condition_number, condition_indexes=indexes,
        collinear_sets=tuple(sets), aliased=solution.aliases)
