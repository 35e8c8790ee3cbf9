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

import math

import numpy as np

from .lstsq import Alias, LeastSquares
from .records import record

__all__ = ["Conditioning", "assess", "CONDITION_INDEX_LIMIT", "PROPORTION_LIMIT"]

CONDITION_INDEX_LIMIT = 30.0
PROPORTION_LIMIT = 0.5


@record
class CollinearSet:
    """Columns whose coefficient variances one near-dependency inflates."""

    condition_index: float
    columns: tuple[str, ...]
    proportions: tuple[float, ...]


@record
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
    mu = solution.singular_values.tolist()
    sets: list[CollinearSet] = []
    # Python floats; mu_1 / 0 is inf (NaN when mu_1 is 0 too), as IEEE division gives.
    top = mu[0] if mu else 0.0
    eta = [top / m if m else (math.inf if top > 0 else math.nan) for m in mu]
    flagged = [kdx for kdx, v in enumerate(eta) if v > CONDITION_INDEX_LIMIT]
    if flagged:
        kept_names = names if solution.rank == len(names) else \
            [n for n, e in zip(names, solution.estimable.tolist()) if e]
        v = solution.right_singular_vectors
        s = solution.singular_values
        phi = (v * v) / (s * s)
        proportions = (phi / np.add.reduce(phi, axis=1)[:, None]).tolist()
        for kdx in flagged:
            involved = [i for i, row in enumerate(proportions) if row[kdx] > PROPORTION_LIMIT]
            if len(involved) >= 2:
                sets.append(CollinearSet(eta[kdx], tuple([kept_names[i] for i in involved]),
                                         tuple([proportions[i][kdx] for i in involved])))
    if solution.aliases:
        status = "rank_deficient"
    elif solution.condition_number > CONDITION_INDEX_LIMIT:
        status = "ill_conditioned"
    else:
        status = "ok"
    return Conditioning(status, solution.rank, len(names), solution.rank_tolerance,
                        solution.condition_number, tuple(eta), tuple(sets),
                        solution.aliases)
