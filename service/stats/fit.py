"""One fit from design to inference: solve, infer, assess, and say what the caller must know."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from .conditioning import Conditioning, assess
from .design import Design
from .hypotheses import Hypothesis, HypothesisResult, Restriction, test_hypotheses
from .inference import FTest, Inference, infer
from .lstsq import Alias, LeastSquares, solve
from .model import ModelSummary
from .notices import Notice
from .records import record
from .residuals import Influence, ResidualChecks, check_residuals, influence
from .summaries import Summary, solve_summary

__all__ = ["FitOptions", "FitResult", "Numerics", "TooFewObservations", "fit", "fit_summary",
           "describe_alias", "model_summary"]

FEW_DIGITS = 8.0


class TooFewObservations(Exception):
    """Fewer observations than design columns: the coefficients are not determined."""

    def __init__(self, n: int, k: int):
        super().__init__(f"{n} observations for {k} design columns")
        self.n = n
        self.k = k


@dataclass(frozen=True)
class FitOptions:
    levels: tuple[float, ...] = (0.95,)
    drop_aliased: bool = False
    extended_max_work: int = 200_000
    extended_below_digits: float = 13.5
    covariance: str = "classical"
    simultaneous: str | None = None
    hypotheses: tuple[Hypothesis, ...] = ()
    include_influence: bool = False


@record
class Numerics:
    """How the answer was computed and how many of its digits it vouches for."""

    method: str
    working_digits: float
    estimated_correct_digits: float


@record
class FitResult:
    design: Design
    solution: LeastSquares
    inference: Inference
    conditioning: Conditioning
    numerics: Numerics
    notices: tuple[Notice, ...]
    model: ModelSummary
    hypotheses: tuple[HypothesisResult, ...]
    residual_checks: ResidualChecks | None
    influence: Influence | None


def describe_alias(alias: Alias, names: tuple[str, ...]) -> str:
    """``"door_openings = 2 * pallets_received - 1 * intercept"`` (or ``"... is all zero"``)."""
    name = names[alias.column]
    if not alias.relation:
        return f"{name} is all zero"
    parts = []
    for i, (index, multiplier) in enumerate(alias.relation):
        sign = "-" if multiplier < 0 else "+"
        text = f"{abs(multiplier):.6g} * {names[index]}"
        parts.append(("- " if sign == "-" else "") + text if i == 0 else f"{sign} {text}")
    return f"{name} = " + " ".join(parts)


def _column_spread(design: Design, column_squares: np.ndarray | None = None
                   ) -> list[float] | None:
    """``sqrt(sum w (x_j - xbar_j)^2)`` per column, for VIF; NaN for the intercept.

    One pass (``sum w x^2 - (sum w x)^2 / sum w``) where that keeps at least 6 digits,
    which is plenty for a diagnostic; a second, centred pass for columns whose mean
    dwarfs their spread; columns are scaled first when squares could overflow (some
    ``max_i |x_ij|`` outside (1e-150, 1e150)). The per-column sums are numpy's; the k
    figures after them are Python floats (no numpy call per step, and overflow is inf
    without a warning). ``column_squares``: ``np.einsum("ij,ij->j", x, x)`` (no weights),
    when the caller has it.
    """
    if not design.intercept:
        return None
    x = design.matrix
    w = design.weights
    n, k = x.shape
    squares = None
    if w is None and column_squares is not None and n < 10**10 and all(
            1e-290 < v < 1e290 for v in column_squares.tolist()):
        # max_i x_ij^2 <= sum_i x_ij^2 <= n max_i x_ij^2 (to a few ulps): squares in
        # (1e-290, 1e290) put every max |x_ij| in (1e-145 / sqrt(n), 1e145), inside the
        # range that needs no scaling, so the maxima need not be formed.
        big, extreme, squares = None, False, column_squares
    else:
        # max |x| per column from the maxima and minima: no n x k temporary of |x|.
        big = np.maximum(x.max(axis=0), -x.min(axis=0)).tolist() if n else [0.0] * k
        extreme = not (1e-150 < min(big) and max(big) < 1e150)
    if extreme:
        big = [b if b > 0 else 1.0 for b in big]
        xs = x / np.array(big)
    else:
        xs = x
    if w is None:
        total = float(n)
        sums = xs.sum(axis=0)
        if squares is None:
            squares = np.einsum("ij,ij->j", xs, xs)
    else:
        total = float(w.sum())
        sums = w @ xs
        squares = np.einsum("i,ij,ij->j", w, xs, xs)
    sums, squares = sums.tolist(), squares.tolist()
    ss = [math.nan]  # the intercept: no spread, and no VIF
    lost = []
    for j in range(1, k):
        ss.append(squares[j] - sums[j] * sums[j] / total)
        if ss[j] <= 1e-6 * squares[j]:
            lost.append(j)
    if lost:
        dev = xs[:, lost] - np.array([sums[j] for j in lost]) / total
        centred = np.einsum("ij,ij->j", dev, dev) if w is None else \
            np.einsum("i,ij,ij->j", w, dev, dev)
        for j, value in zip(lost, centred.tolist()):
            ss[j] = value
    # sqrt(max(ss, 0)) as numpy's: NaN stays NaN.
    spread = [v if v != v else math.sqrt(v) if v > 0 else 0.0 for v in ss]
    if extreme:
        spread = [s * b for s, b in zip(spread, big)]
    return spread


def _leverage_notices(design: Design, solution: LeastSquares,
                      options: FitOptions) -> list[Notice]:
    if solution.projection is None:
        return []
    at_one = np.flatnonzero(solution.projection.leverages >= 1.0 - 1e-12)
    if at_one.size == 0:
        return []
    rows = ", ".join(str(int(design.rows_used[i])) for i in at_one[:10])
    more = "" if at_one.size <= 10 else f" and {at_one.size - 10} more"
    out = []
    if options.covariance in ("hc2", "hc3"):
        out.append(Notice("robust_covariance_undefined", (
            f"Row(s) {rows}{more} have leverage 1: the fit passes through them exactly, and "
            f"{options.covariance} divides by 1 - leverage, so it is undefined; standard "
            "errors, tests and intervals are null. Use hc0 or hc1, or remove the column that "
            "singles those rows out.")))
    if options.include_influence:
        out.append(Notice("leverage_one", (
            f"Row(s) {rows}{more} have leverage 1: their studentized residuals and Cook's "
            "distances are undefined (null).")))
    return out


def _notices(design: Design, result: Inference, cond: Conditioning,
             solution: LeastSquares) -> list[Notice]:
    out: list[Notice] = []
    names = design.names
    if design.rows_dropped_missing:
        out.append(Notice("rows_dropped", f"{design.rows_dropped_missing} rows with a missing "
                          "value were dropped before the fit (missing: drop_rows)."))
    if design.rows_zero_weight:
        out.append(Notice("zero_weights", f"{design.rows_zero_weight} rows have weight 0 and "
                          "take no part in the fit; they are not counted in n_observations."))
    for alias in cond.aliased:
        out.append(Notice(
            "aliased_column",
            f"{describe_alias(alias, names)}: its coefficient is not estimable and was left out "
            "(rank_deficiency: drop_aliased). Remove or recode the column to silence this.",
            column=names[alias.column]))
    if result.residual_df == 0:
        out.append(Notice("no_residual_df", f"{result.n_observations} observations and "
                          f"{result.n_parameters} parameters leave no residual degrees of freedom: "
                          "the estimates interpolate the data, and standard errors, tests and "
                          "intervals are undefined (null). Collect more observations."))
    elif result.perfect_fit:
        out.append(Notice("perfect_fit", "The residuals are at the rounding level of the "
                          "response: the model reproduces the data exactly, so standard errors "
                          "are 0 and t statistics, p values and the overall F test are undefined "
                          "(null). Check that the response is not computed from the predictors."))
    if design.intercept and solution.total_norm == 0:
        out.append(Notice("constant_response", "The response is constant: there is no "
                          "variation to explain, so R squared is undefined (null)."))
    if not design.intercept:
        out.append(Notice("uncentered", "The model has no intercept: the total sum of squares, "
                          "R squared and the overall F test are about zero (uncentered), not "
                          "about the mean, and are not comparable with a model that has one."))
    elif result.overall_f_test.numerator_df == 0:
        out.append(Notice("intercept_only", "The model has only an intercept: there is no "
                          "overall F test."))
    for s in cond.collinear_sets:
        out.append(Notice("near_collinear", (
            f"Near-collinear columns {', '.join(s.columns)} (condition index "
            f"{s.condition_index:.3g}): their estimates are unstable and their standard "
            "errors inflated. Centre or rescale the predictors, drop or combine one of "
            "them, or collect data in which they vary more independently.")))
    if cond.status == "ill_conditioned" and not cond.collinear_sets:
        out.append(Notice("ill_conditioned", (
            f"The design's condition number is {cond.condition_number:.3g} (above 30): small "
            "changes in the data can move the estimates a lot. Centre or rescale the "
            "predictors, or drop redundant ones.")))
    digits = solution.estimated_correct_digits
    if digits < FEW_DIGITS:
        out.append(Notice("few_correct_digits", (
            f"Only about {max(digits, 0):.1f} significant digits of the estimates can be "
            "vouched for (the problem is too large for the extended-precision path or too "
            "ill-conditioned). Centre and rescale the predictors, or send a smaller design.")))
    for c in result.coefficients:
        if c.p_value == 0 and math.isfinite(c.t_statistic):
            out.append(Notice("p_value_underflow", f"The p value of {c.name} is below the "
                              "smallest double (about 1e-308) and is reported as 0.",
                              column=c.name))
    out.extend(_overflow_notices(result))
    return out


def _overflow_notices(result: Inference) -> list[Notice]:
    """Figures that exist but exceed the double range (about 1e308), so are null."""
    out = []
    sigma = result.fit.residual_standard_deviation
    spread_known = result.residual_df > 0 and math.isfinite(sigma) and sigma > 0
    for c in result.coefficients:
        if not c.estimable:
            continue
        if math.isinf(c.estimate) or (spread_known and math.isinf(c.standard_error)):
            out.append(Notice("overflow", (
                f"The estimate or standard error of {c.name} exceeds the range of double "
                "precision (about 1e308) and is null, with its t statistic, p value and "
                "intervals. Rescale that predictor (or the response) by a power of ten and "
                "scale the coefficient back."), column=c.name))
    sums = result.fit
    if math.isfinite(sigma) and not all(
            math.isfinite(v) for v in (sums.residual_sum_of_squares,
                                       sums.regression_sum_of_squares,
                                       sums.total_sum_of_squares)):
        out.append(Notice("overflow", (
            "A sum of squares exceeds the range of double precision (about 1e308) and is "
            "null; the residual standard deviation, R squared and the tests do not need it. "
            "Rescale the response by a power of ten to see it.")))
    return out


def fit(design: Design, options: FitOptions) -> FitResult:
    """Fit ``y = X beta + e`` by weighted least squares and infer.

    Raises
    ------
    TooFewObservations
        ``n < k`` (after dropped rows).
    RankDeficient
        Aliased columns and ``options.drop_aliased`` is false.
    HypothesisError
        A set of restrictions that cannot be tested.
    """
    n, k = design.matrix.shape
    if n < k:
        raise TooFewObservations(n, k)
    robust = options.covariance != "classical"
    # sum_i x_ij^2 per column, once: the column scaling and the VIF spreads both start
    # from it (without weights; with them the solver squares sqrt(W) X instead).
    squares = np.einsum("ij,ij->j", design.matrix, design.matrix) \
        if design.weights is None and n else None
    solution = solve(design.matrix, design.response, design.weights,
                     centered=design.intercept, drop_aliased=options.drop_aliased,
                     extended_max_work=options.extended_max_work,
                     extended_below_digits=options.extended_below_digits,
                     want_projection=robust or options.include_influence,
                     exact_columns=None if design.exact is None else (
                         lambda columns, exponents: design.exact.mp_columns(
                             design.rows_used, columns, exponents)),
                     column_squares=squares)
    log_w = 0.0 if design.weights is None else math.fsum(np.log(design.weights).tolist())
    return _complete(design, solution, options, n, _column_spread(design, squares), log_w,
                     rows=True)


def fit_summary(summary: Summary, options: FitOptions) -> FitResult:
    """Fit from a triangular or cross-products summary instead of rows.

    Per-row outputs (residual checks, influence) and robust covariances need the rows
    and are not available; the caller refuses them before this call.

    Raises
    ------
    SummaryError, RankDeficient, HypothesisError
    """
    solution, spread = solve_summary(summary, drop_aliased=options.drop_aliased,
                                     extended_max_work=options.extended_max_work,
                                     extended_below_digits=options.extended_below_digits)
    p = len(summary.names)
    design = Design(matrix=np.zeros((0, p)), response=np.zeros(0), weights=None,
                    names=summary.names, intercept=summary.intercept,
                    rows_used=np.zeros(0, dtype=int), rows_dropped_missing=0,
                    rows_zero_weight=0)
    result = _complete(design, solution, options, summary.n_observations, spread, 0.0,
                       rows=False)
    if summary.kind == "cross_products":
        left = round(solution.estimated_correct_digits, 2)  # as numerics reports it
        note = Notice("cross_products_precision", (
            "Cross products square the condition number of the data: about "
            f"{15.95 - left:.1f} of the 16 digits of double precision are lost before the "
            f"fit, leaving about {left:.1f}. Send the triangular summary (R from a QR of "
            "[X y]) to keep them."))
        result = dataclasses.replace(result, notices=result.notices + (note,))
    return result


def _complete(design: Design, solution: LeastSquares, options: FitOptions, n: int,
              spread: np.ndarray | None, log_w: float, rows: bool) -> FitResult:
    """Inference, hypotheses, conditioning and notices for a solved problem."""
    robust = options.covariance != "classical"
    result = infer(solution, design.names, n, centered=design.intercept,
                   levels=options.levels, log_weight_sum=log_w,
                   column_spread=spread, covariance=options.covariance,
                   simultaneous=options.simultaneous)
    model = model_summary(design, solution, result)
    tests = test_hypotheses(model, options.hypotheses,
                            residual_sum_of_squares=result.fit.residual_sum_of_squares)
    if robust:
        result = _robust_overall_test(result, model, design)
    cond = assess(solution, design.names)
    numerics = Numerics(method=solution.method, working_digits=solution.working_digits,
                        estimated_correct_digits=solution.estimated_correct_digits)
    sigma = result.fit.residual_standard_deviation
    notices = _notices(design, result, cond, solution) + _leverage_notices(
        design, solution, options)
    if not rows:
        notices.append(Notice("no_rows", "The fit came from a summary: per-row figures "
                              "(residual checks, influence) need the rows and are null."))
    return FitResult(
        design=design, solution=solution, inference=result, conditioning=cond,
        numerics=numerics, notices=tuple(notices), model=model, hypotheses=tuple(tests),
        residual_checks=check_residuals(solution, design.matrix, design.weights,
                                        design.intercept) if rows else None,
        influence=influence(solution, design.weights, sigma)
        if options.include_influence and rows else None)


def model_summary(design: Design, solution: LeastSquares, result: Inference) -> ModelSummary:
    """The compact summary of a fit (estimates, their covariance, residual variance, ...)."""
    names = design.names
    sigma = result.fit.residual_standard_deviation
    aliased = tuple((names[a.column], tuple((names[i], m) for i, m in a.relation))
                    for a in solution.aliases)
    return ModelSummary(
        names=names, intercept=design.intercept, estimates=solution.coefficients,
        covariance=result.covariance.matrix, covariance_kind=result.covariance.kind,
        residual_variance=sigma * sigma, residual_df=result.residual_df,
        n_observations=result.n_observations, aliased=aliased,
        covariance_root=result.covariance.root)


def _robust_overall_test(result: Inference, model: ModelSummary, design: Design) -> Inference:
    """With a robust covariance the overall test is the Wald test that all slopes are zero."""
    slopes = [name for name, e in zip(design.names, model.estimable)
              if e and not (design.intercept and name == design.names[0])]
    if not slopes or result.perfect_fit:
        return result
    everything = Hypothesis(label=None, restrictions=tuple(
        Restriction(coefficients=((name, 1.0),), equals=0.0) for name in slopes))
    wald = test_hypotheses(model, (everything,))[0]
    return dataclasses.replace(result, overall_f_test=FTest(
        statistic=wald.statistic, numerator_df=float(wald.numerator_df),
        denominator_df=float(wald.denominator_df), p_value=wald.p_value))
