"""From a decoded JSON request to a validated design and fit options.

Order of checks: the envelope (marshmallow, every field error in one answer), then the
bulk numbers (numpy), then the rules between them (lengths, names, limits, missing
values). Every failure is a 422 problem whose pointers name the offending values.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from marshmallow import Schema, ValidationError

from ..settings import Settings
from ..stats.design import INTERCEPT, Design, build_design
from ..stats.fit import FitOptions
from ..stats.hypotheses import Hypothesis, Restriction
from ..stats.summaries import Summary
from ..stats.terms import (CategoricalTerm, ColumnTerm, PowerTerm, ProductTerm, Term,
                           TermError, expand_terms)
from .arrays import MAX_POINTED, as_matrix, as_vector, check_unique, invalid, surely_finite
from .limits import check_shape, over
from .problems import FieldError, pointer
from .schemas import FitRequestSchema, flatten_errors, load_envelope

__all__ = ["FitRequest", "decode_fit", "decode_design", "decode_summary", "fit_options",
           "load_request"]

_SCHEMA = FitRequestSchema()


@dataclass(frozen=True)
class FitRequest:
    """A validated /v1/fit request. ``column_pointers`` maps design column names to pointers."""

    design: Design | None
    options: FitOptions
    column_pointers: dict[str, str]
    include_residuals: bool = False
    return_model: bool = False
    summary: Summary | None = None


def _check_levels(levels: list[float], settings: Settings) -> tuple[float, ...]:
    if len(levels) > settings.max_levels:
        raise invalid([FieldError("/levels", over(len(levels), "levels", settings.max_levels,
                                                  "LINFER_MAX_LEVELS"))])
    check_unique(levels, ("levels",), what="level ")
    return tuple(levels)


def _check_weights(w: np.ndarray, n: int, where: tuple[str | int, ...]) -> None:
    if w.shape[0] != n:
        raise invalid([FieldError(pointer(*where), f"has {w.shape[0]} values for {n} rows")])
    negative = np.flatnonzero(w < 0)
    if negative.size:
        raise invalid([FieldError(pointer(*where, int(i)), "must not be negative")
                       for i in negative[:MAX_POINTED]])
    if not np.any(w > 0):
        raise invalid([FieldError(pointer(*where), "must have at least one positive weight")])
    with np.errstate(over="ignore"):
        total = float(np.nansum(w))
    if not math.isfinite(total):
        # The sums of the fit start from the sum of the weights: it must be a double.
        raise invalid([FieldError(pointer(*where), "the weights sum to more than the largest "
                                  "double (about 1.8e308); divide them all by a power of ten "
                                  "(the estimates and standard errors do not change)")])


def _reject_missing(arrays: list[tuple[np.ndarray, tuple[str | int, ...], bool]]) -> None:
    """422 for null values; each entry is (array, pointer prefix, whether columns of a matrix)."""
    errors: list[FieldError] = []
    total = 0
    for arr, where, _ in arrays:
        if surely_finite(arr):
            continue
        mask = np.isnan(arr)
        if not mask.any():
            continue
        total += int(np.count_nonzero(mask))
        for index in zip(*np.nonzero(mask)):
            if len(errors) < MAX_POINTED:
                errors.append(FieldError(pointer(*where, *map(int, index)),
                                         "is missing (null); send a number, or set missing "
                                         "to drop_rows"))
    if errors:
        raise invalid(errors, f"{total} value(s) are missing (null) and missing is 'reject'")


@functools.lru_cache(maxsize=64)
def _default_columns(k: int) -> tuple[tuple[str, ...], dict[str, str]]:
    """The names x1..xk of ``k`` unnamed design_matrix columns, and their pointers (the
    cells of row 0): the same for every request of that width."""
    names = tuple(f"x{j + 1}" for j in range(k))
    return names, {name: f"/design_matrix/0/{j}" for j, name in enumerate(names)}


def _names_for_matrix(data: dict[str, Any], k: int, intercept: bool
                      ) -> tuple[list[str] | tuple[str, ...], dict[str, str]]:
    """The design_matrix's column names and a pointer per name (a new dict)."""
    names = data.get("column_names")
    if names is None:
        names, where = _default_columns(k)
        return names, dict(where)
    if len(names) != k:
        raise invalid([FieldError("/column_names",
                                  f"has {len(names)} names for {k} design_matrix columns")])
    seen = check_unique(names, ("column_names",))
    if intercept and INTERCEPT in seen:
        raise invalid([FieldError(pointer("column_names", seen[INTERCEPT]),
                                  "'intercept' names the column of ones the service adds; "
                                  "rename the column or set intercept to false")])
    # pointer("column_names", j): nothing to escape.
    return list(names), {name: f"/column_names/{j}" for j, name in enumerate(names)}


def _matrix_layout(data: dict[str, Any], settings: Settings):
    x = as_matrix(data["design_matrix"], ("design_matrix",))
    y = as_vector(data["response"], ("response",))
    n, m = x.shape
    if y.shape[0] != n:
        raise invalid([FieldError("/response", f"response has {y.shape[0]} values, "
                                  f"design_matrix has {n} rows")])
    check_shape("/design_matrix", settings, n, m + int(data["intercept"]))
    names, where = _names_for_matrix(data, m, data["intercept"])
    w = None
    if "weights" in data:
        w = as_vector(data["weights"], ("weights",))
        _check_weights(w, n, ("weights",))
    if data["missing"] == "reject":
        arrays = [(x, ("design_matrix",), True), (y, ("response",), False)]
        if w is not None:
            arrays.append((w, ("weights",), False))
        _reject_missing(arrays)
    return x, y, w, names, where, None, ()


def _table_layout(data: dict[str, Any], settings: Settings):
    table: dict[str, Any] = data["table"]  # the body's own dict: its column order is the caller's
    response = data["response_column"]
    if response not in table:
        raise invalid([FieldError("/response_column",
                                  f"names no column of table (columns: {', '.join(table)})")])
    weight_col = data.get("weights") if isinstance(data.get("weights"), str) else None
    if weight_col is not None:
        if weight_col not in table:
            raise invalid([FieldError("/weights", f"names no column of table "
                                      f"(columns: {', '.join(table)})")])
        if weight_col == response:
            raise invalid([FieldError("/weights", "names the response column")])
    terms = data.get("terms")
    if terms is not None:
        predictors, categorical = _term_columns(terms, table, response, weight_col)
    elif "predictor_columns" in data:
        predictors, categorical = data["predictor_columns"], []
        check_unique(predictors, ("predictor_columns",))
        for i, name in enumerate(predictors):
            _check_predictor(name, pointer("predictor_columns", i), table, response,
                             weight_col)
    else:
        predictors, categorical = [c for c in table if c not in (response, weight_col)], []
    if data["intercept"] and INTERCEPT in predictors:
        raise invalid([FieldError(pointer("table", INTERCEPT),
                                  "'intercept' names the column of ones the service adds; "
                                  "rename the column or set intercept to false")])
    y = as_vector(table[response], ("table", response))
    n = y.shape[0]
    check_shape("/table", settings, n, len(predictors) + int(data["intercept"]))
    columns = []
    for name in predictors:
        col = as_vector(table[name], ("table", name))
        if col.shape[0] != n:
            raise invalid([FieldError(pointer("table", name), f"has {col.shape[0]} values; "
                                      f"the response column {response!r} has {n}")])
        columns.append(col)
    labels = {name: _labels(table[name], name, n) for name in categorical}
    w = None
    if weight_col is not None:
        w = as_vector(table[weight_col], ("table", weight_col))
        _check_weights(w, n, ("table", weight_col))
    elif "weights" in data:
        w = as_vector(data["weights"], ("weights",))
        _check_weights(w, n, ("weights",))
    if data["missing"] == "reject":
        arrays = [(col, ("table", name), False) for col, name in zip(columns, predictors)]
        arrays += [(np.array([np.nan if v is None else 0.0 for v in values]),
                    ("table", name), False) for name, values in labels.items()]
        arrays.append((y, ("table", response), False))
        if w is not None:
            arrays.append((w, ("table", weight_col) if weight_col else ("weights",), False))
        _reject_missing(arrays)
    if terms is None:
        where = {name: pointer("table", name) for name in predictors}
        return columns, y, w, predictors, where, None, ()
    try:
        expanded = expand_terms(tuple(terms), dict(zip(predictors, columns)), labels)
    except TermError as err:
        at = pointer("terms", err.index, *([err.field] if err.field else []))
        raise invalid([FieldError(at, str(err))]) from None
    check_shape("/terms", settings, n, len(expanded.names) + int(data["intercept"]))
    if data["intercept"] and INTERCEPT in expanded.names:
        raise invalid([FieldError("/terms", "a term makes a column named 'intercept', the "
                                  "name of the column of ones the service adds")])
    where = {}
    for i, info in enumerate(expanded.terms):
        for name in info.columns:
            where[name] = pointer("terms", i)
    return (expanded.matrix, y, w, list(expanded.names), where, expanded.exact,
            expanded.terms)


def _check_predictor(name: str, at: str, table: dict[str, Any], response: str,
                     weight_col: str | None) -> None:
    """A predictor must be a column of the table, and neither the response nor the weights."""
    if name not in table:
        raise invalid([FieldError(at, f"{name!r} names no column of table")])
    if name == response:
        raise invalid([FieldError(at, f"{name!r} is the response column")])
    if name == weight_col:
        raise invalid([FieldError(at, f"{name!r} is the weights column")])


def _term_columns(terms: list[Term], table: dict[str, Any], response: str,
                  weight_col: str | None) -> tuple[list[str], list[str]]:
    """The raw numeric and categorical columns that ``terms`` use, checked against the table."""
    numeric: list[str] = []
    categorical: list[str] = []
    for i, term in enumerate(terms):
        if isinstance(term, ColumnTerm):
            used, field = [term.column], None
        elif isinstance(term, PowerTerm):
            used, field = [term.column], "column"
        elif isinstance(term, ProductTerm):
            used, field = list(term.columns), "product"
        else:
            used, field = [term.column], "categorical"
        at = pointer("terms", i, *([field] if field else []))
        for name in used:
            _check_predictor(name, at, table, response, weight_col)
        target = categorical if isinstance(term, CategoricalTerm) else numeric
        for name in used:
            if name not in target:
                target.append(name)
    both = set(numeric) & set(categorical)
    if both:
        name = sorted(both)[0]
        raise invalid([FieldError(pointer("table", name), f"{name!r} is used both as a number "
                                  "and as a categorical column")])
    return numeric, categorical


def _labels(values: Any, name: str, n: int) -> list:
    """The values of a categorical column: text or numbers (null is missing)."""
    where = ("table", name)
    if not isinstance(values, list):
        raise invalid([FieldError(pointer(*where), "must be a list of levels")])
    if len(values) != n:
        raise invalid([FieldError(pointer(*where), f"has {len(values)} values; the response "
                                  f"column has {n}")])
    kinds = set()
    for i, v in enumerate(values):
        if v is None:
            continue
        if isinstance(v, bool) or not isinstance(v, (str, int, float)):
            raise invalid([FieldError(pointer(*where, i), "a level must be text or a number")])
        kinds.add(str if isinstance(v, str) else float)
    if len(kinds) > 1:
        raise invalid([FieldError(pointer(*where), "mixes text and numbers as levels; send "
                                  "all levels as text")])
    return values


def decode_design(data: dict[str, Any], body: dict[str, Any],
                  settings: Settings) -> tuple[Design, dict[str, str]]:
    """The design from either data layout, and a JSON pointer per design column."""
    if "table" in data:
        data["table"] = body["table"]  # the body's own dict: its column order is the caller's
    layout = _table_layout if "table" in data else _matrix_layout
    x, y, w, names, where, exact, terms = layout(data, settings)
    design = build_design(x, y, tuple(names), intercept=data["intercept"], weights=w,
                          exact=exact, terms=terms)
    if data["intercept"]:
        where[INTERCEPT] = "/intercept"
    return design, where


def _hypotheses(data: dict[str, Any], settings: Settings) -> tuple[Hypothesis, ...]:
    sets = data.get("hypotheses") or []
    if len(sets) > settings.max_hypotheses:
        raise invalid([FieldError("/hypotheses", over(len(sets), "sets", settings.max_hypotheses,
                                                      "LINFER_MAX_HYPOTHESES"))])
    out = []
    for i, h in enumerate(sets):
        if len(h["restrictions"]) > settings.max_columns:
            raise invalid([FieldError(pointer("hypotheses", i, "restrictions"),
                                      over(len(h["restrictions"]), "restrictions",
                                           settings.max_columns, "LINFER_MAX_COLUMNS"))])
        out.append(Hypothesis(label=h.get("label"), restrictions=tuple(
            Restriction(coefficients=tuple(r["coefficients"].items()), equals=r["equals"])
            for r in h["restrictions"])))
    return tuple(out)


def fit_options(data: dict[str, Any], settings: Settings) -> FitOptions:
    """The fit options of a loaded envelope, its levels and hypotheses checked."""
    levels = _check_levels(data["levels"], settings)
    hypotheses = _hypotheses(data, settings)
    drop_aliased = data.get("rank_deficiency") == "drop_aliased"
    covariance = data.get("covariance", "classical")
    influence = "influence" in data.get("include", ())
    options = _plain_options(levels, drop_aliased, settings.extended_max_work,
                             settings.extended_below_digits, covariance,
                             data.get("simultaneous"), influence)
    return dataclasses.replace(options, hypotheses=hypotheses) if hypotheses else options


@functools.lru_cache(maxsize=64)
def _plain_options(levels: tuple[float, ...], drop_aliased: bool, extended_max_work: int,
                   extended_below_digits: float, covariance: str, simultaneous: str | None,
                   include_influence: bool) -> FitOptions:
    """The options without hypotheses, built once per combination (they are immutable,
    and most requests ask for one of a few)."""
    return FitOptions(levels=levels, drop_aliased=drop_aliased,
                      extended_max_work=extended_max_work,
                      extended_below_digits=extended_below_digits, covariance=covariance,
                      simultaneous=simultaneous, include_influence=include_influence)


def load_request(schema: Schema, body: Any) -> dict[str, Any]:
    """The envelope of ``body`` loaded by ``schema``; 422 with every field error at once."""
    if not isinstance(body, dict):
        raise invalid([FieldError("", "the request body must be a JSON object")])
    try:
        data = load_envelope(schema, body)
    except ValidationError as err:
        errors = flatten_errors(err.messages)
        raise invalid(errors, f"{len(errors)} field(s) of the request are invalid: "
                      + "; ".join(f"{e.pointer or '/'} {e.message}" for e in errors[:3]))
    return data


def decode_summary(data: dict[str, Any], settings: Settings) -> Summary:
    """The validated summary from its loaded envelope (numbers checked by numpy)."""
    s = data["summary"]
    names = s["column_names"]
    seen = check_unique(names, ("summary", "column_names"))
    if INTERCEPT in seen and seen[INTERCEPT] != 0:
        raise invalid([FieldError(pointer("summary", "column_names", seen[INTERCEPT]),
                                  "the intercept column (a column of ones) must come first")])
    if len(names) > settings.max_columns:
        # n_observations is not a limit: the rows never travel, which is the point.
        raise invalid([FieldError("/summary/column_names", over(
            len(names), "columns", settings.max_columns, "LINFER_MAX_COLUMNS"))])
    if data.get("covariance", "classical") != "classical":
        raise invalid([FieldError("/covariance", "robust covariances need the rows; a "
                                  "summary supports only classical")])
    if data.get("include"):
        raise invalid([FieldError("/include", "per-row output needs the rows; a summary "
                                  "has none")])
    fields_: dict[str, Any] = {}
    if s["kind"] == "triangular":
        fields_["r_factor"] = as_matrix(s["r_factor"], ("summary", "r_factor"))
        arrays = [("r_factor", fields_["r_factor"])]
    else:
        fields_["xtx"] = as_matrix(s["xtx"], ("summary", "xtx"))
        fields_["xty"] = as_vector(s["xty"], ("summary", "xty"))
        fields_["yty"] = s["yty"]
        arrays = [("xtx", fields_["xtx"]), ("xty", fields_["xty"])]
    for name, arr in arrays:
        bad = np.argwhere(np.isnan(arr))
        if bad.size:
            raise invalid([FieldError(pointer("summary", name, *map(int, bad[0])),
                                      "must be a number: a summary has no missing values")])
    return Summary(kind=s["kind"], n_observations=s["n_observations"], names=tuple(names),
                   intercept=bool(names) and names[0] == INTERCEPT, **fields_)


def decode_fit(body: Any, settings: Settings) -> FitRequest:
    """Validate a /v1/fit body; raise a 422 :class:`ApiProblem` with pointers on any fault."""
    data = load_request(_SCHEMA, body)
    options = fit_options(data, settings)
    include = tuple(data.get("include", ()))
    if "summary" in data:
        summary = decode_summary(data, settings)
        where = {name: pointer("summary", "column_names", j)
                 for j, name in enumerate(summary.names)}
        return FitRequest(design=None, options=options, column_pointers=where,
                          return_model=data["return_model"], summary=summary)
    design, where = decode_design(data, body, settings)
    return FitRequest(design=design, options=options, column_pointers=where,
                      include_residuals="residuals" in include or "influence" in include,
                      return_model=data["return_model"])
