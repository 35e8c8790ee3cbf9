"""Intervals for new rows from a model summary.

For a new row ``x`` (intercept entry included), the fitted mean is ``x'b`` with
standard error ``se = sqrt(x' V x)``, V the covariance of the estimates. Per level L,
with ``t = t_{(1+L)/2, n-p}``:

- ``mean``: the confidence interval for the mean response, ``x'b +- t se``;
- ``observation``: the prediction interval for one new observation of weight w
  (variance ``s^2 / w``), ``x'b +- t sqrt(s^2 / w + se^2)``;
- ``band``: the Working-Hotelling band, ``x'b +- sqrt(p F_L(p, n-p)) se``, which holds
  simultaneously for every x (Working and Hotelling 1929, JASA 24, 73-85).

(Seber and Lee 2003, sections 5.2-5.3.) A row whose values break the relation of an
aliased column lies outside the span the data pin down: its mean is not estimable
and comes back as NaN.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .distributions import f_quantile, t_quantile
from .inference import Interval
from .model import ModelSummary

__all__ = ["KINDS", "Prediction", "predict"]

KINDS = ("mean", "observation", "band")
ALIAS_TOLERANCE = 1e-9


@dataclass(frozen=True)
class Prediction:
    mean: float
    standard_error: float
    intervals: tuple[Interval, ...]
    estimable: bool


def _estimable_rows(model: ModelSummary, x: np.ndarray) -> np.ndarray:
    ok = np.ones(x.shape[0], dtype=bool)
    position = {name: j for j, name in enumerate(model.names)}
    for name, relation in model.aliased:
        implied = np.zeros(x.shape[0])
        size = np.zeros(x.shape[0])
        for other, multiplier in relation:
            term = multiplier * x[:, position[other]]
            implied += term
            size += np.abs(term)
        actual = x[:, position[name]]
        ok &= np.abs(actual - implied) <= ALIAS_TOLERANCE * (np.abs(actual) + size + 1e-300)
    return ok


def predict(model: ModelSummary, x: np.ndarray, levels: tuple[float, ...], kind: str,
            weights: np.ndarray | None = None) -> list[Prediction]:
    """Predictions for the rows of ``x`` (m x k, columns as ``model.names``).

    Parameters
    ----------
    model : ModelSummary
    x : (m, k) new rows, the intercept column (ones) included when the model has one
    levels : confidence levels in (0, 1)
    kind : ``"mean"``, ``"observation"`` or ``"band"``
    weights : (m,) positive weights of the new observations (``kind="observation"``)
    """
    est = model.estimable
    b = model.estimates[est]
    v = model.covariance[np.ix_(est, est)]
    xe = x[:, est]
    df = model.residual_df
    p = int(np.count_nonzero(est))
    ok = _estimable_rows(model, x)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        mean = xe @ b
        root = None if model.covariance_root is None else model.covariance_root[est]
        if root is not None and np.all(np.isfinite(root)):
            # |x'G| with G G' = V: no cancellation in x'Vx on ill-conditioned designs.
            g = xe @ root
            se = np.sqrt(np.einsum("ij,ij->i", g, g))
        else:
            quad = np.einsum("ij,jk,ik->i", xe, v, xe)
            se = np.sqrt(np.maximum(quad, 0.0))
        if kind == "observation":
            w = np.ones(x.shape[0]) if weights is None else weights
            spread = np.sqrt(model.residual_variance / w + se * se)
        else:
            spread = se
        if df <= 0:
            multipliers = [math.nan] * len(levels)
        elif kind == "band":
            multipliers = [math.sqrt(p * float(f_quantile(lv, p, df))) for lv in levels]
        else:
            multipliers = [float(-t_quantile((1.0 - lv) / 2.0, df)) for lv in levels]
    out = []
    for i in range(x.shape[0]):
        if not ok[i]:
            out.append(Prediction(math.nan, math.nan,
                                  tuple(Interval(lv, math.nan, math.nan) for lv in levels),
                                  False))
            continue
        m_i, s_i = float(mean[i]), float(spread[i])
        out.append(Prediction(
            mean=m_i, standard_error=float(se[i]),
            intervals=tuple(Interval(lv, m_i - q * s_i, m_i + q * s_i)
                            for lv, q in zip(levels, multipliers)),
            estimable=True))
    return out
