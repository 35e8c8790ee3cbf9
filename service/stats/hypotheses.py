"""Joint tests of linear restrictions ``R beta = q`` (F and Wald tests).

For ``m`` restrictions with ``d = R b - q`` and ``V`` the covariance of the estimates,
``F = d' (R V R')^-1 d / m``, referred to ``F(m, n - p)``; for a model fitted here,
through a factor ``G G' = V`` so that the design's condition number is not squared. With the classical
covariance ``V = s^2 (X'WX)^-1`` this is the partial F test, and the restricted
residual sum of squares is ``RSS_r = RSS + m F s^2`` (Seber and Lee, Linear
Regression Analysis, 2nd ed., 2003, theorem 4.1); with a heteroskedasticity-
consistent ``V`` it is the Wald test divided by ``m``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import linalg, special

from .distributions import f_upper_p
from .model import ModelSummary
from .records import record

__all__ = ["Restriction", "Hypothesis", "HypothesisResult", "HypothesisError", "test_hypotheses"]

DEPENDENCE_TOLERANCE = 1e-10


@dataclass(frozen=True)
class Restriction:
    """``sum(multiplier * beta[name]) = equals``."""

    coefficients: tuple[tuple[str, float], ...]
    equals: float


@dataclass(frozen=True)
class Hypothesis:
    label: str | None
    restrictions: tuple[Restriction, ...]


@record
class HypothesisResult:
    label: str | None
    statistic: float
    numerator_df: int
    denominator_df: int
    p_value: float
    restricted_residual_sum_of_squares: float
    unrestricted_residual_sum_of_squares: float


class HypothesisError(ValueError):
    """A restriction that cannot be tested; ``where`` locates it: (set, restriction, name)."""

    def __init__(self, message: str, hypothesis: int, restriction: int | None = None,
                 name: str | None = None):
        super().__init__(message)
        self.hypothesis = hypothesis
        self.restriction = restriction
        self.name = name


def _matrix(model: ModelSummary, h: Hypothesis, index: int) -> tuple[np.ndarray, np.ndarray]:
    position = {name: j for j, name in enumerate(model.names)}
    estimable = model.estimable
    rows = []
    q = []
    for r_index, r in enumerate(h.restrictions):
        row = np.zeros(len(model.names))
        for name, multiplier in r.coefficients:
            if name not in position:
                raise HypothesisError(f"{name!r} is not a coefficient of the model "
                                      f"(coefficients: {', '.join(model.names)})",
                                      index, r_index, name)
            if not estimable[position[name]]:
                raise HypothesisError(f"{name!r} is aliased and not estimable; a restriction "
                                      "on it cannot be tested", index, r_index, name)
            row[position[name]] += multiplier
        scale = float(np.max(np.abs(row)))
        if scale == 0:
            raise HypothesisError("all multipliers are zero: the restriction says nothing",
                                  index, r_index)
        rows.append(row / scale)
        q.append(r.equals / scale)
    return np.array(rows), np.array(q)


def _check_independent(rmat: np.ndarray, q: np.ndarray, index: int) -> None:
    """Each restriction must add something: not implied by, nor contradicting, the earlier ones."""
    basis = np.zeros((rmat.shape[1], 0))
    for i, row in enumerate(rmat):
        v = row.copy()
        for _ in range(2):
            v -= basis @ (basis.T @ v)
        if np.linalg.norm(v) <= DEPENDENCE_TOLERANCE * np.linalg.norm(row):
            c, *_ = np.linalg.lstsq(rmat[:i].T, row, rcond=None)
            implied = float(c @ q[:i])
            if math.isclose(implied, q[i], rel_tol=1e-9, abs_tol=1e-12 * max(1.0, abs(q[i]))):
                raise HypothesisError("follows from the earlier restrictions of this set; "
                                      "remove it", index, i)
            raise HypothesisError("contradicts the earlier restrictions of this set: no "
                                  "coefficients satisfy them all", index, i)
        basis = np.column_stack([basis, v / np.linalg.norm(v)])


def _through_root(m: np.ndarray, d: np.ndarray, df: int) -> float:
    """``d' (M M')^-1 d`` from the triangular factor of ``M'`` (M = R G, ``G G' = V``).

    Forming R V R' squares the condition of the design; through G it is not squared.
    """
    if df <= 0 or not np.all(np.isfinite(m)) or not np.any(m):
        return math.nan
    t = np.linalg.qr(m.T, mode="r")
    diag = np.abs(np.diag(t))
    if not np.all(diag > 0):
        return math.nan
    z = linalg.solve_triangular(t, d, trans="T")
    return float(z @ z)


def _statistic(r: np.ndarray, d: np.ndarray, root: np.ndarray | None, v: np.ndarray,
               df: int) -> float:
    """``d' (R V R')^-1 d``, through the root when there is one (NaN when undefined)."""
    if root is not None:
        return _through_root(r @ root, d, df)
    middle = r @ v @ r.T
    if df > 0 and np.all(np.isfinite(middle)) and np.any(middle):
        try:
            factor = linalg.cho_factor(middle)
            return float(d @ linalg.cho_solve(factor, d))
        except linalg.LinAlgError:
            return math.nan
    return math.nan


def _far_off(r: np.ndarray, d: np.ndarray, root: np.ndarray | None, v: np.ndarray,
             df: int, m: int) -> tuple[float, float]:
    """The statistic and p value when ``d' (R V R')^-1 d`` overflows although ``d`` is
    finite (restrictions far from the estimates): the quadratic form of ``d / 2^e``
    times ``2^(2e)`` (inf only when the statistic itself is beyond the double range),
    and ``P(F >= f) = I_x(df/2, m/2)`` with ``x = df / (df + m f)``, which is
    ``df / (m f)`` to the last bit for such f, formed from the scaled form."""
    _, e = math.frexp(float(np.max(np.abs(d))))
    unit = _statistic(r, np.ldexp(d, -e), root, v, df) / m
    stat = float(np.ldexp(unit, 2 * e))
    if not math.isfinite(stat):
        x = float(np.ldexp(df / (m * unit), -2 * e))
        return stat, float(special.betainc(0.5 * df, 0.5 * m, x))
    return stat, float(f_upper_p(stat, m, df))


def test_hypotheses(model: ModelSummary, hypotheses: tuple[Hypothesis, ...],
                    residual_sum_of_squares: float | None = None) -> list[HypothesisResult]:
    """Test each set of restrictions against ``model``; results in order.

    Raises
    ------
    HypothesisError
        An unknown or aliased coefficient, an empty restriction, or restrictions
        that repeat or contradict one another.
    """
    if not hypotheses:
        return []
    # Dependence among restrictions is judged in standard-error units, so that the
    # verdict does not change with the units of the predictors.
    with np.errstate(invalid="ignore"):
        unit = np.sqrt(np.abs(np.diag(model.covariance)))
    unit = np.where(np.isfinite(unit) & (unit > 0), unit, 1.0)
    prepared = []
    for index, h in enumerate(hypotheses):
        rmat, q = _matrix(model, h, index)
        scaled = rmat * unit[None, :]
        size = np.max(np.abs(scaled), axis=1, keepdims=True)
        with np.errstate(over="ignore"):
            q_scaled = q / size[:, 0]
        _check_independent(scaled / size, q_scaled, index)
        prepared.append((h, rmat, q))
    estimable = model.estimable
    b = model.estimates[estimable]
    v = model.covariance[np.ix_(estimable, estimable)]
    df = model.residual_df
    classical = model.covariance_kind == "classical"
    s2 = model.residual_variance
    root = None
    if model.covariance_root is not None:
        root = model.covariance_root[estimable]
        if not np.all(np.isfinite(root)):
            root = None
    results = []
    for h, rmat, q in prepared:
        r = rmat[:, estimable]
        m = r.shape[0]
        d = r @ b - q
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            stat = _statistic(r, d, root, v, df) / m
            p = float(f_upper_p(stat, m, df)) if math.isfinite(stat) else math.nan
            if math.isinf(stat) and np.all(np.isfinite(d)):
                stat, p = _far_off(r, d, root, v, df, m)
        rss = residual_sum_of_squares if classical and residual_sum_of_squares is not None \
            else math.nan
        restricted = rss + m * stat * s2 if classical and math.isfinite(rss) else math.nan
        results.append(HypothesisResult(
            label=h.label, statistic=stat, numerator_df=m, denominator_df=df, p_value=p,
            restricted_residual_sum_of_squares=restricted,
            unrestricted_residual_sum_of_squares=rss))
    return results
