"""From a fit result to the JSON document of wire contract v1.

JSON carries no NaN or Infinity (RFC 8259): every undefined or overflowed figure is
written as null, and the result's warnings say why.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import orjson
from flask import Response

from ..stats.fit import FitResult, describe_alias

__all__ = ["number", "numbers", "intervals", "encode_fit", "encode_hypothesis", "encode_rows",
           "json_response"]


def number(value: float) -> float | None:
    """A finite float, or None for NaN and infinities."""
    value = float(value)
    return value if math.isfinite(value) else None


def encode_fit(result: FitResult, column_pointers: dict[str, str]) -> dict[str, Any]:
    inf = result.inference
    fit = inf.fit
    f = inf.overall_f_test
    cond = result.conditioning
    design = result.design
    names = design.names
    coefficients = [{
        "name": c.name,
        "estimable": c.estimable,
        "estimate": number(c.estimate),
        "standard_error": number(c.standard_error),
        "t_statistic": number(c.t_statistic),
        "p_value": number(c.p_value),
        "intervals": intervals(c.intervals),
        "simultaneous_intervals": intervals(c.simultaneous_intervals),
        "vif": number(c.vif),
    } for c in inf.coefficients]
    document = {
        "n_observations": inf.n_observations,
        "n_parameters": inf.n_parameters,
        "residual_df": inf.residual_df,
        "rows_dropped": design.rows_dropped_missing,
        "coefficients": coefficients,
        "fit": {
            "r_squared": number(fit.r_squared),
            "adjusted_r_squared": number(fit.adjusted_r_squared),
            "residual_standard_deviation": number(fit.residual_standard_deviation),
            "residual_sum_of_squares": number(fit.residual_sum_of_squares),
            "regression_sum_of_squares": number(fit.regression_sum_of_squares),
            "total_sum_of_squares": number(fit.total_sum_of_squares),
            "log_likelihood": number(fit.log_likelihood),
            "aic": number(fit.aic),
            "bic": number(fit.bic),
            "centered": fit.centered,
        },
        "covariance": {
            "kind": inf.covariance.kind,
            "reference_distribution": (
                f"Student t and F with {inf.residual_df} denominator degrees of freedom"),
        },
        "simultaneous": None if inf.simultaneous is None else {
            "method": inf.simultaneous,
            "family_size": inf.n_parameters,
        },
        "overall_f_test": {
            "statistic": number(f.statistic),
            "numerator_df": number(f.numerator_df),
            "denominator_df": number(f.denominator_df),
            "p_value": number(f.p_value),
        },
        "conditioning": {
            "status": cond.status,
            "rank": cond.rank,
            "n_columns": cond.n_columns,
            "rank_tolerance": cond.rank_tolerance,
            "condition_number": number(cond.condition_number),
            "condition_indexes": [number(v) for v in cond.condition_indexes],
            "collinear_sets": [{"condition_index": number(s.condition_index),
                                "columns": list(s.columns),
                                "variance_proportions": [number(p) for p in s.proportions]}
                               for s in cond.collinear_sets],
            "aliased": [alias_entry(a, names) for a in cond.aliased],
        },
        "hypotheses": [encode_hypothesis(h) for h in result.hypotheses],
        "residual_checks": (None if result.residual_checks is None
                            else encode_residual_checks(result.residual_checks)),
        "warnings": [{"code": n.code, "message": n.message,
                      "pointer": column_pointers.get(n.column) if n.column else None}
                     for n in result.notices] + _hypothesis_overflow(result.hypotheses),
        "numerics": {
            "method": result.numerics.method,
            "working_digits": result.numerics.working_digits,
            "estimated_correct_digits": round(result.numerics.estimated_correct_digits, 2),
        },
    }
    if design.terms:
        document["terms"] = [{"name": t.name, "kind": t.kind, "columns": list(t.columns),
                              **({"levels": list(t.levels), "reference": t.reference}
                                 if t.kind == "categorical" else {})}
                             for t in design.terms]
    return document


def _hypothesis_overflow(tests) -> list[dict[str, Any]]:
    """A warning per test whose F statistic is beyond the double range (null)."""
    return [{"code": "overflow", "message": (
        f"The F statistic of hypothesis set {i} exceeds the range of double precision "
        "(about 1e308) and is null, with the restricted residual sum of squares; its p "
        "value is computed without it. The restrictions are far from the estimates: "
        "check their units."), "pointer": f"/hypotheses/{i}"}
        for i, h in enumerate(tests) if math.isinf(h.statistic)]


def intervals(items) -> list[dict[str, Any]]:
    return [{"level": iv.level, "lower": number(iv.lower), "upper": number(iv.upper)}
            for iv in items]


def numbers(values: np.ndarray) -> list[float | None]:
    return [v if math.isfinite(v) else None for v in np.asarray(values, dtype=float).tolist()]


def encode_hypothesis(h) -> dict[str, Any]:
    return {"label": h.label, "statistic": number(h.statistic),
            "numerator_df": h.numerator_df, "denominator_df": h.denominator_df,
            "p_value": number(h.p_value),
            "restricted_residual_sum_of_squares": number(h.restricted_residual_sum_of_squares),
            "unrestricted_residual_sum_of_squares":
                number(h.unrestricted_residual_sum_of_squares)}


def encode_residual_checks(c) -> dict[str, Any]:
    return {
        "quantiles": [{"probability": p, "value": number(v)} for p, v in c.quantiles],
        "skewness": number(c.skewness),
        "kurtosis": number(c.kurtosis),
        "durbin_watson": number(c.durbin_watson),
        "jarque_bera": {"statistic": number(c.jarque_bera_statistic), "df": 2,
                        "p_value": number(c.jarque_bera_p_value)},
        "breusch_pagan": {"statistic": number(c.breusch_pagan_statistic),
                          "df": c.breusch_pagan_df,
                          "p_value": number(c.breusch_pagan_p_value)},
    }


def encode_rows(result: FitResult) -> dict[str, Any]:
    """Per-row output, column-wise: one list per measure, ``row`` indexing the rows as posted."""
    rows: dict[str, Any] = {
        "row": result.design.rows_used.tolist(),
        "fitted": numbers(result.solution.fitted),
        "residual": numbers(result.solution.residuals),
    }
    if result.influence is not None:
        inf = result.influence
        rows["leverage"] = numbers(inf.leverage)
        rows["studentized_residual"] = numbers(inf.studentized_residual)
        rows["externally_studentized_residual"] = numbers(inf.externally_studentized_residual)
        rows["cooks_distance"] = numbers(inf.cooks_distance)
    return rows


def alias_entry(alias, names: tuple[str, ...]) -> dict[str, Any]:
    return {"column": names[alias.column],
            "relation": [{"column": names[i], "multiplier": number(m)} for i, m in alias.relation],
            "description": describe_alias(alias, names)}


def json_response(document: Any, status: int = 200) -> Response:
    return Response(orjson.dumps(document), status=status, mimetype="application/json")
