"""The compact model summary: everything later questions need, without the data."""

from __future__ import annotations

import numpy as np

from .records import record


__all__ = ["ModelSummary", "MODEL_VERSION"]

MODEL_VERSION = 1


@record
class ModelSummary:
    """A fitted model, as /v1/fit returns it with ``return_model``.

    Attributes
    ----------
    names : design column names, ``"intercept"`` first when there is one
    intercept : whether the model has an intercept
    estimates : (k,) NaN for coefficients that are not estimable
    covariance : (k, k) covariance of the estimates under ``covariance_kind``
    covariance_kind : ``"classical"`` or ``"hc0"``..``"hc3"``
    residual_variance : ``s^2 = RSS / residual_df`` (NaN without residual df)
    residual_df : ``n - p``
    n_observations : n
    aliased : per aliased column, its name and the relation ``((name, multiplier), ...)``
        that ties it to the kept columns
    version : the summary format's version
    covariance_root : (k, r) G with ``G G' = covariance`` when the model comes from a
        fit in this process (never on the wire); tests and predictions use it to keep
        their digits on ill-conditioned designs
    """

    names: tuple[str, ...]
    intercept: bool
    estimates: np.ndarray
    covariance: np.ndarray
    covariance_kind: str
    residual_variance: float
    residual_df: int
    n_observations: int
    aliased: tuple[tuple[str, tuple[tuple[str, float], ...]], ...] = ()
    version: int = MODEL_VERSION
    covariance_root: np.ndarray | None = None

    @property
    def estimable(self) -> np.ndarray:
        return ~np.isnan(self.estimates)
