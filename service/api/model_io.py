"""The model summary on the wire, and the new rows of /v1/predict.

A summary that comes back from a caller is checked as strictly as data: shapes,
names, symmetry and positive semi-definiteness of the covariance, and nulls only
where the service itself writes them (coefficients that are not estimable).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..settings import Settings
from ..stats.design import INTERCEPT
from ..stats.model import ModelSummary
from .arrays import as_matrix, as_vector, check_unique, invalid
from .encode import number
from .limits import over
from .problems import FieldError, pointer

__all__ = ["decode_model", "encode_model", "decode_new_rows"]

SYMMETRY_TOLERANCE = 1e-8


def encode_model(model: ModelSummary) -> dict[str, Any]:
    return {
        "version": model.version,
        "names": list(model.names),
        "intercept": model.intercept,
        "estimates": [number(v) for v in model.estimates],
        "covariance": [[number(v) for v in row] for row in model.covariance],
        "covariance_kind": model.covariance_kind,
        "residual_variance": number(model.residual_variance),
        "residual_df": model.residual_df,
        "n_observations": model.n_observations,
        "aliased": [{"column": name, "relation": [{"column": c, "multiplier": number(m)}
                                                  for c, m in relation]}
                    for name, relation in model.aliased],
        "covariance_root": (None if model.covariance_root is None else
                            [[number(v) for v in row] for row in model.covariance_root]),
    }


def _fail(where: tuple[str | int, ...], message: str):
    return invalid([FieldError(pointer("model", *where), message)])


def decode_model(m: dict[str, Any], settings: Settings) -> ModelSummary:
    """A validated :class:`ModelSummary` from the loaded ``model`` envelope."""
    names = m["names"]
    k = len(names)
    if k > settings.max_columns:
        raise _fail(("names",), over(k, "coefficients", settings.max_columns,
                                     "LINFER_MAX_COLUMNS"))
    seen = check_unique(names, ("model", "names"))
    if m["intercept"] and names[0] != INTERCEPT:
        raise _fail(("names", 0), "a model with an intercept names it 'intercept', first")
    if not m["intercept"] and INTERCEPT in seen:
        raise _fail(("names", seen[INTERCEPT]), "'intercept' names the column of ones; the "
                    "model says it has none")
    estimates = as_vector(m["estimates"], ("model", "estimates"))
    if estimates.shape[0] != k:
        raise _fail(("estimates",), f"has {estimates.shape[0]} values for {k} names")
    cov = as_matrix(m["covariance"], ("model", "covariance"))
    if cov.shape != (k, k):
        raise _fail(("covariance",), f"is {cov.shape[0]} x {cov.shape[1]}; the model has "
                    f"{k} names, so it must be {k} x {k}")
    missing = np.isnan(estimates)
    if np.all(missing):
        raise _fail(("estimates",), "holds no estimate")
    expected = missing[:, None] | missing[None, :]
    if np.all(np.isnan(cov)):
        # The service writes an all-null covariance when it is undefined (no residual
        # df, or a robust estimator undefined at a row of leverage 1).
        expected = np.ones_like(expected)
    wrong = np.argwhere(np.isnan(cov) != expected)
    if wrong.size:
        i, j = map(int, wrong[0])
        raise _fail(("covariance", i, j), "must be null exactly where the row's or the "
                    "column's estimate is null")
    est = ~missing
    v = np.nan_to_num(cov[np.ix_(est, est)])
    scale = float(np.max(np.abs(v))) if v.size else 0.0
    asym = np.abs(v - v.T)
    if scale > 0 and np.max(asym) > SYMMETRY_TOLERANCE * scale:
        i, j = np.unravel_index(int(np.argmax(asym)), asym.shape)
        rows = np.flatnonzero(est)
        raise _fail(("covariance", int(rows[i]), int(rows[j])), "breaks the symmetry of the "
                    "covariance matrix")
    if v.size and np.any(np.diag(v) < 0):
        j = int(np.flatnonzero(est)[int(np.argmin(np.diag(v)))])
        raise _fail(("covariance", j, j), "is a negative variance")
    if v.size and scale > 0:
        low = float(np.min(np.linalg.eigvalsh((v + v.T) / 2)))
        if low < -SYMMETRY_TOLERANCE * scale * k:
            raise _fail(("covariance",), "is not positive semi-definite (smallest eigenvalue "
                        f"{low:.3g}): it cannot be a covariance matrix")
    df = m["residual_df"]
    if df > m["n_observations"]:
        raise _fail(("residual_df",), f"{df} exceeds n_observations ({m['n_observations']})")
    s2 = m["residual_variance"]
    if s2 is None:
        if df > 0:
            raise _fail(("residual_variance",), "may be null only when residual_df is 0")
        s2 = math.nan
    elif s2 < 0:
        raise _fail(("residual_variance",), "must not be negative")
    aliased = []
    for a_index, a in enumerate(m.get("aliased") or []):
        if a["column"] not in seen or not missing[seen[a["column"]]]:
            raise _fail(("aliased", a_index, "column"), "must name a coefficient whose "
                        "estimate is null")
        for t_index, term in enumerate(a["relation"]):
            if term["column"] not in seen or missing[seen[term["column"]]]:
                raise _fail(("aliased", a_index, "relation", t_index, "column"),
                            "must name an estimable coefficient")
        aliased.append((a["column"], tuple((t["column"], t["multiplier"])
                                           for t in a["relation"])))
    root = _root(m.get("covariance_root"), cov, missing)
    return ModelSummary(names=tuple(names), intercept=m["intercept"], estimates=estimates,
                        covariance=cov, covariance_kind=m["covariance_kind"],
                        residual_variance=float(s2), residual_df=df,
                        n_observations=m["n_observations"], aliased=tuple(aliased),
                        covariance_root=root)


def _root(value: Any, cov: np.ndarray, missing: np.ndarray) -> np.ndarray | None:
    """The optional covariance_root G: k rows (null where the estimate is), ``G G' = V``."""
    if value is None:
        return None
    g = as_matrix(value, ("model", "covariance_root"))
    k = cov.shape[0]
    if g.shape[0] != k or g.shape[1] > k:
        raise _fail(("covariance_root",), f"is {g.shape[0]} x {g.shape[1]}; it must have "
                    f"{k} rows and at most {k} columns")
    rows_null = np.all(np.isnan(g), axis=1)
    if np.all(rows_null):
        return None
    if np.any(rows_null != missing) or np.any(np.isnan(g[~missing])):
        raise _fail(("covariance_root",), "must be null exactly in the rows whose estimate "
                    "is null")
    est = ~missing
    v = cov[np.ix_(est, est)]
    if not np.all(np.isfinite(v)):
        # The service writes no root beside a covariance it reports as undefined.
        raise _fail(("covariance_root",), "must be null when the covariance is null")
    with np.errstate(over="ignore", invalid="ignore"):
        product = g[est] @ g[est].T
        # Against the larger of the two: a zero covariance needs a zero root.
        scale = max(float(np.max(np.abs(v))), float(np.max(np.abs(product)))) if v.size \
            else 0.0
        wrong = not math.isfinite(scale) or (
            scale > 0 and float(np.max(np.abs(product - v))) > 1e-6 * scale)
    if wrong:
        raise _fail(("covariance_root",), "does not reproduce the covariance "
                    "(covariance_root times its transpose must equal covariance)")
    return g


def decode_new_rows(data: dict[str, Any], body: dict[str, Any], model: ModelSummary,
                    settings: Settings) -> tuple[np.ndarray, np.ndarray | None]:
    """The new rows as an (m, k) design (intercept column included) and their weights."""
    predictors = [n for n in model.names if not (model.intercept and n == INTERCEPT)]
    if "new_rows" in data:
        if isinstance(data["new_rows"], list) and data["new_rows"] and predictors == []:
            x = np.empty((len(data["new_rows"]), 0))
        else:
            x = as_matrix(data["new_rows"], ("new_rows",))
        if x.shape[1] != len(predictors):
            raise invalid([FieldError("/new_rows", f"rows have {x.shape[1]} values; the model "
                                      f"has {len(predictors)} predictors "
                                      f"({', '.join(predictors)})")])
        where = lambda i, j: pointer("new_rows", i, j)  # noqa: E731
    else:
        table = body["new_table"]
        for name in table:
            if name not in predictors:
                raise invalid([FieldError(pointer("new_table", name),
                                          f"{name!r} is not a predictor of the model "
                                          f"({', '.join(predictors)})")])
        absent = [p for p in predictors if p not in table]
        if absent:
            raise invalid([FieldError("/new_table", f"new_table lacks the predictor column(s) "
                                      f"{', '.join(absent)}")])
        columns = [as_vector(table[p], ("new_table", p)) for p in predictors]
        lengths = {c.shape[0] for c in columns}
        if len(lengths) > 1:
            n0 = columns[0].shape[0]
            bad = next(p for p, c in zip(predictors, columns) if c.shape[0] != n0)
            raise invalid([FieldError(pointer("new_table", bad), f"has a different length "
                                      f"from {predictors[0]!r} ({n0})")])
        x = np.column_stack(columns) if columns else np.empty((0, 0))
        where = lambda i, j: pointer("new_table", predictors[j], i)  # noqa: E731
    m = x.shape[0]
    if m * max(1, len(model.names)) > settings.max_cells or m > settings.max_rows:
        raise invalid([FieldError("/new_rows" if "new_rows" in data else "/new_table",
                                  f"{m} new rows are more than the limits allow "
                                  f"(LINFER_MAX_ROWS {settings.max_rows}, LINFER_MAX_CELLS "
                                  f"{settings.max_cells})")])
    bad = np.argwhere(np.isnan(x))
    if bad.size:
        raise invalid([FieldError(where(int(i), int(j)), "is missing (null); every new row "
                                  "needs every predictor") for i, j in bad[:10]])
    w = None
    if "new_weights" in data:
        w = as_vector(data["new_weights"], ("new_weights",))
        if w.shape[0] != m:
            raise invalid([FieldError("/new_weights", f"has {w.shape[0]} values for {m} "
                                      "new rows")])
        nonpositive = np.flatnonzero(~(w > 0))
        if nonpositive.size:
            raise invalid([FieldError(pointer("new_weights", int(i)), "must be a positive "
                                      "number") for i in nonpositive[:10]])
    if model.intercept:
        x = np.column_stack([np.ones(m), x])
    return x, w
