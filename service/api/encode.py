"""From a fit result to the JSON document of wire contract v1.

JSON carries no NaN or Infinity (RFC 8259): every undefined or overflowed figure is
written as null, and the result's warnings say why.
"""

from __future__ import annotations

import math
from typing import Any

import orjson
from flask import Response

from ..stats.fit import FitResult, describe_alias

__all__ = ["number", "encode_fit", "json_response"]


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
        "intervals": [{"level": iv.level, "lower": number(iv.lower), "upper": number(iv.upper)}
                      for iv in c.intervals],
        "vif": number(c.vif),
    } for c in inf.coefficients]
    return {
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
        "warnings": [{"code": n.code, "message": n.message,
                      "pointer": column_pointers.get(n.column) if n.column else None}
                     for n in result.notices],
        "numerics": {
            "method": result.numerics.method,
            "working_digits": result.numerics.working_digits,
            "estimated_correct_digits": round(result.numerics.estimated_correct_digits, 2),
        },
    }


def alias_entry(alias, names: tuple[str, ...]) -> dict[str, Any]:
    return {"column": names[alias.column],
            "relation": [{"column": names[i], "multiplier": number(m)} for i, m in alias.relation],
            "description": describe_alias(alias, names)}


def json_response(document: Any, status: int = 200) -> Response:
    return Response(orjson.dumps(document), status=status, mimetype="application/json")
