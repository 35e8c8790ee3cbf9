"""A small client for the linfer service, on the Python standard library alone.

::

    from service.client import Client

    client = Client("http://127.0.0.1:8000")
    result = client.fit(table={"temp_c": [...], "kwh": [...]}, response_column="kwh",
                        return_model=True)
    result.coefficient("temp_c").estimate
    client.predict(model=result, new_rows=[[12.5]], kind="observation")

numpy and pandas are optional: :meth:`Client.fit_frame`, :meth:`Client.fit_arrays`
and :meth:`FitResult.coefficients_frame` import them when called.

Data too large to send as rows is sent as a summary (README, "Summaries instead of
rows")::

    summary = summary_from_arrays(X, y, ["temp_c", "door_openings"])   # numpy
    summary = summary_from_dask(X, y, ["temp_c", "door_openings"])     # dask.array
    summary = merge_summaries([summary_a, summary_b])                  # partitions
    result = client.fit_summary(summary, return_model=True)

These import numpy (and dask) when called. The request fields
are the service's own (README, ``openapi/linfer.yaml``), passed as keyword arguments;
numpy arrays, numpy scalars and pandas Series are accepted anywhere in them, and NaN
is sent as ``null`` (a missing value).

Exceptions::

    LinferError                  every error this module raises
     +-- TransportError          no HTTP answer: connection refused, reset or closed
     |    +-- Timeout            no answer within the timeout
     +-- ApiError               the service answered with an error status: .status,
                                 .problem (the RFC 9457 document), .errors [(pointer, message)]

Retries: a 503 answer, a refused connection and a connection reset or closed before
the answer are tried again, ``retries`` times, after ``backoff * 2**attempt`` seconds
(longer when a 503 carries ``Retry-After``, up to 30 s). The service is stateless, so
repeating a request is safe. Nothing else is retried: not a 4xx, not another 5xx, not
a timeout (the same request would likely take as long again).
"""

from __future__ import annotations

import http.client
import importlib
import json
import math
import time
import urllib.error
import urllib.parse
import urllib.request
from dataclasses import dataclass, field
from types import ModuleType
from typing import TYPE_CHECKING, Any, Mapping, Sequence

if TYPE_CHECKING:  # pragma: no cover - for annotations only
    import pandas

__all__ = [
    "Client", "DEFAULT_BASE_URL", "DEFAULT_TIMEOUT",
    "LinferError", "TransportError", "Timeout", "ApiError",
    "FitResult", "Coefficient", "Interval", "FitStatistics", "FTest", "Conditioning",
    "Notice", "Numerics", "HypothesisResult", "PredictResult", "Prediction",
    "summary_from_arrays", "summary_from_dask", "merge_summaries", "SUMMARY_KINDS",
]

DEFAULT_BASE_URL = "http://127.0.0.1:8000"
DEFAULT_TIMEOUT = 30.0
MAX_RETRY_AFTER = 30.0
SUMMARY_KINDS = ("triangular", "cross_products")
INTERCEPT = "intercept"
USER_AGENT = "linfer-python-client/0.1"
_RETRYABLE = (ConnectionRefusedError, ConnectionResetError, ConnectionAbortedError,
              BrokenPipeError, http.client.RemoteDisconnected, http.client.IncompleteRead)

Json = dict[str, Any]


# --- exceptions ----------------------------------------------------------------------------

class LinferError(Exception):
    """Base class of every error raised by this client."""


class TransportError(LinferError):
    """The request got no HTTP answer: the connection failed, was refused, reset or closed."""

    def __init__(self, message: str, *, method: str = "", url: str = ""):
        super().__init__(message)
        self.method = method
        self.url = url


class Timeout(TransportError):
    """No answer within the client's timeout (connecting, or waiting for a read)."""


class ApiError(LinferError):
    """The service answered with an error status; ``problem`` is its RFC 9457 document."""

    def __init__(self, status: int, problem: Mapping[str, Any], *, method: str = "",
                 url: str = "", request_id: str | None = None):
        self.status = status
        self.problem: Json = dict(problem)
        self.errors: list[tuple[str, str]] = [
            (str(e.get("pointer", "")), str(e.get("message", "")))
            for e in problem.get("errors") or [] if isinstance(e, Mapping)]
        self.method = method
        self.url = url
        self.request_id = request_id
        super().__init__(self._describe())

    @property
    def title(self) -> str:
        return str(self.problem.get("title", ""))

    @property
    def detail(self) -> str:
        return str(self.problem.get("detail", ""))

    def _describe(self) -> str:
        head = f"{self.status} {self.title}: {self.detail}".rstrip(": ")
        where = f" ({self.method} {self.url})" if self.url else ""
        lines = [head + where] + [f"  {p or '/'}: {m}" for p, m in self.errors[:10]]
        return "\n".join(lines)


# --- results -------------------------------------------------------------------------------

def _num(value: Any) -> float | None:
    return None if value is None else float(value)


@dataclass(frozen=True)
class Interval:
    """A confidence (or prediction) interval at one level; bounds None when undefined."""

    level: float
    lower: float | None
    upper: float | None

    @classmethod
    def from_json(cls, d: Mapping[str, Any]) -> Interval:
        return cls(float(d["level"]), _num(d.get("lower")), _num(d.get("upper")))


def _intervals(items: Any) -> tuple[Interval, ...]:
    return tuple(Interval.from_json(i) for i in items or ())


@dataclass(frozen=True)
class Coefficient:
    """One row of the coefficient table; figures are None where the service says undefined."""

    name: str
    estimable: bool
    estimate: float | None
    standard_error: float | None
    t_statistic: float | None
    p_value: float | None
    intervals: tuple[Interval, ...]
    vif: float | None
    simultaneous_intervals: tuple[Interval, ...] = ()

    @classmethod
    def from_json(cls, d: Mapping[str, Any]) -> Coefficient:
        return cls(name=d["name"], estimable=bool(d.get("estimable", True)),
                   estimate=_num(d.get("estimate")),
                   standard_error=_num(d.get("standard_error")),
                   t_statistic=_num(d.get("t_statistic")), p_value=_num(d.get("p_value")),
                   intervals=_intervals(d.get("intervals")), vif=_num(d.get("vif")),
                   simultaneous_intervals=_intervals(d.get("simultaneous_intervals")))

    def interval(self, level: float = 0.95) -> Interval:
        """The interval at ``level``; KeyError when the fit was not asked for it."""
        for iv in self.intervals:
            if iv.level == level:
                return iv
        raise KeyError(f"no interval at level {level} for {self.name!r} (levels: "
                       f"{', '.join(str(iv.level) for iv in self.intervals)})")


@dataclass(frozen=True)
class FitStatistics:
    """The ``fit`` object: R squared, residual SD, sums of squares, likelihood figures."""

    r_squared: float | None
    adjusted_r_squared: float | None
    residual_standard_deviation: float | None
    residual_sum_of_squares: float | None
    regression_sum_of_squares: float | None
    total_sum_of_squares: float | None
    log_likelihood: float | None
    aic: float | None
    bic: float | None
    centered: bool | None

    @classmethod
    def from_json(cls, d: Mapping[str, Any]) -> FitStatistics:
        return cls(r_squared=_num(d.get("r_squared")),
                   adjusted_r_squared=_num(d.get("adjusted_r_squared")),
                   residual_standard_deviation=_num(d.get("residual_standard_deviation")),
                   residual_sum_of_squares=_num(d.get("residual_sum_of_squares")),
                   regression_sum_of_squares=_num(d.get("regression_sum_of_squares")),
                   total_sum_of_squares=_num(d.get("total_sum_of_squares")),
                   log_likelihood=_num(d.get("log_likelihood")), aic=_num(d.get("aic")),
                   bic=_num(d.get("bic")), centered=d.get("centered"))


@dataclass(frozen=True)
class FTest:
    """An F test (the overall one: every slope zero)."""

    statistic: float | None
    numerator_df: float | None
    denominator_df: float | None
    p_value: float | None

    @classmethod
    def from_json(cls, d: Mapping[str, Any] | None) -> FTest:
        d = d or {}
        return cls(*(_num(d.get(f)) for f in cls.__dataclass_fields__))


@dataclass(frozen=True)
class Conditioning:
    """The verdict on the design: ``status`` is ok, ill_conditioned or rank_deficient."""

    status: str
    rank: int | None
    n_columns: int | None
    condition_number: float | None
    condition_indexes: tuple[float | None, ...]
    collinear_sets: tuple[Json, ...]
    aliased: tuple[Json, ...]

    @classmethod
    def from_json(cls, d: Mapping[str, Any]) -> Conditioning:
        return cls(status=d["status"], rank=d.get("rank"), n_columns=d.get("n_columns"),
                   condition_number=_num(d.get("condition_number")),
                   condition_indexes=tuple(_num(v) for v in d.get("condition_indexes") or ()),
                   collinear_sets=tuple(d.get("collinear_sets") or ()),
                   aliased=tuple(d.get("aliased") or ()))


@dataclass(frozen=True)
class Notice:
    """One entry of ``warnings``: a code, a message, and a pointer into the request or None."""

    code: str
    message: str
    pointer: str | None = None

    @classmethod
    def from_json(cls, d: Mapping[str, Any]) -> Notice:
        return cls(d["code"], d.get("message", ""), d.get("pointer"))


def _notices(items: Any) -> tuple[Notice, ...]:
    return tuple(Notice.from_json(n) for n in items or ())


@dataclass(frozen=True)
class Numerics:
    """How the fit was computed and how many significant digits the service vouches for."""

    method: str | None
    working_digits: float | None
    estimated_correct_digits: float | None

    @classmethod
    def from_json(cls, d: Mapping[str, Any] | None) -> Numerics:
        d = d or {}
        return cls(d.get("method"), _num(d.get("working_digits")),
                   _num(d.get("estimated_correct_digits")))


@dataclass(frozen=True)
class HypothesisResult:
    """The test of one set of linear restrictions (F, or Wald with robust covariance)."""

    label: str | None
    statistic: float | None
    numerator_df: float | None
    denominator_df: float | None
    p_value: float | None
    restricted_residual_sum_of_squares: float | None = None
    unrestricted_residual_sum_of_squares: float | None = None

    @classmethod
    def from_json(cls, d: Mapping[str, Any]) -> HypothesisResult:
        return cls(label=d.get("label"), statistic=_num(d.get("statistic")),
                   numerator_df=_num(d.get("numerator_df")),
                   denominator_df=_num(d.get("denominator_df")), p_value=_num(d.get("p_value")),
                   restricted_residual_sum_of_squares=_num(
                       d.get("restricted_residual_sum_of_squares")),
                   unrestricted_residual_sum_of_squares=_num(
                       d.get("unrestricted_residual_sum_of_squares")))


@dataclass(frozen=True)
class FitResult:
    """The answer of POST /v1/fit; ``raw`` is the whole JSON document, every field in it."""

    n_observations: int
    n_parameters: int
    residual_df: int
    coefficients: tuple[Coefficient, ...]
    fit: FitStatistics
    overall_f_test: FTest
    conditioning: Conditioning
    warnings: tuple[Notice, ...]
    numerics: Numerics
    hypotheses: tuple[HypothesisResult, ...] = ()
    rows_dropped: int = 0
    model: Json | None = None
    raw: Json = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def from_json(cls, d: Json) -> FitResult:
        return cls(n_observations=d["n_observations"], n_parameters=d["n_parameters"],
                   residual_df=d["residual_df"],
                   coefficients=tuple(Coefficient.from_json(c) for c in d["coefficients"]),
                   fit=FitStatistics.from_json(d["fit"]),
                   overall_f_test=FTest.from_json(d.get("overall_f_test")),
                   conditioning=Conditioning.from_json(d["conditioning"]),
                   warnings=_notices(d.get("warnings")),
                   numerics=Numerics.from_json(d.get("numerics")),
                   hypotheses=tuple(HypothesisResult.from_json(h)
                                    for h in d.get("hypotheses") or ()),
                   rows_dropped=d.get("rows_dropped", 0), model=d.get("model"), raw=d)

    @property
    def names(self) -> list[str]:
        return [c.name for c in self.coefficients]

    def coefficient(self, name: str) -> Coefficient:
        """The coefficient called ``name``; KeyError naming the ones there are otherwise."""
        for c in self.coefficients:
            if c.name == name:
                return c
        raise KeyError(f"no coefficient {name!r} (coefficients: {', '.join(self.names)})")

    def coefficients_frame(self) -> pandas.DataFrame:
        """The coefficient table as a pandas DataFrame indexed by ``name``.

        Columns: estimable, estimate, standard_error, t_statistic, p_value, then
        ``lower_L`` and ``upper_L`` per level L, then vif; undefined figures are NaN.
        Needs pandas (imported here; ImportError saying so when it is missing).
        """
        pd = _optional("pandas", "FitResult.coefficients_frame()")
        levels: list[float] = []
        for c in self.coefficients:
            levels += [iv.level for iv in c.intervals if iv.level not in levels]
        nan = math.nan

        def value(v: float | None) -> float:
            return nan if v is None else v

        columns: dict[str, list[Any]] = {
            "estimable": [c.estimable for c in self.coefficients],
            **{f: [value(getattr(c, f)) for c in self.coefficients]
               for f in ("estimate", "standard_error", "t_statistic", "p_value")}}
        for lv in levels:
            by_level = [{iv.level: iv for iv in c.intervals}.get(lv) for c in self.coefficients]
            columns[f"lower_{lv!r}"] = [value(iv.lower) if iv else nan for iv in by_level]
            columns[f"upper_{lv!r}"] = [value(iv.upper) if iv else nan for iv in by_level]
        columns["vif"] = [value(c.vif) for c in self.coefficients]
        frame = pd.DataFrame(columns, index=pd.Index(self.names, name="name"))
        return frame.astype({k: "float64" for k in columns if k != "estimable"})


@dataclass(frozen=True)
class Prediction:
    """One new row: the fitted mean, its standard error, and the intervals of the kind asked."""

    mean: float | None
    standard_error: float | None
    intervals: tuple[Interval, ...]

    @classmethod
    def from_json(cls, d: Mapping[str, Any]) -> Prediction:
        return cls(_num(d.get("mean")), _num(d.get("standard_error")),
                   _intervals(d.get("intervals")))


@dataclass(frozen=True)
class PredictResult:
    """The answer of POST /v1/predict, one prediction per new row, in order."""

    kind: str
    covariance_kind: str | None
    residual_df: int | None
    predictions: tuple[Prediction, ...]
    warnings: tuple[Notice, ...]
    raw: Json = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def from_json(cls, d: Json) -> PredictResult:
        return cls(kind=d["kind"], covariance_kind=d.get("covariance_kind"),
                   residual_df=d.get("residual_df"),
                   predictions=tuple(Prediction.from_json(p) for p in d["predictions"]),
                   warnings=_notices(d.get("warnings")), raw=d)


# --- request bodies ------------------------------------------------------------------------

def _optional(module: str, feature: str, install: str | None = None) -> ModuleType:
    try:
        return importlib.import_module(module)
    except ImportError as err:
        raise ImportError(f"{feature} needs {module}, which is not installed here; install "
                          f"it (pip install {install or module}) or pass plain lists "
                          "instead") from err


def _token(key: Any) -> str:
    return str(key).replace("~", "~0").replace("/", "~1")


def _jsonable(value: Any, where: str = "") -> Any:
    """``value`` as plain JSON types: NaN (and pandas NA) as None; ValueError for infinities."""
    if value is None or isinstance(value, (bool, str, int)):
        return value
    if isinstance(value, float):
        if math.isnan(value):
            return None
        if math.isinf(value):
            raise ValueError(f"{where or '/'}: {value} cannot be sent: JSON has no "
                             "infinities, and the service fits finite numbers only")
        return value
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v, f"{where}/{_token(k)}") for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v, f"{where}/{i}") for i, v in enumerate(value)]
    module = type(value).__module__.split(".")[0]
    if module in ("numpy", "pandas") and hasattr(value, "tolist"):
        return _jsonable(value.tolist(), where)  # arrays, numpy scalars, Series, Index
    if type(value).__name__ == "NAType":  # pandas.NA
        return None
    raise TypeError(f"{where or '/'}: a {type(value).__name__} cannot be sent as JSON; "
                    "send numbers, strings, lists and dicts")


def _float_column(series: Any, name: str) -> Any:
    """A pandas column as a float64 numpy array (booleans as 0 and 1, NA as NaN)."""
    pd = _optional("pandas", "fit_frame()")
    np = _optional("numpy", "fit_frame()")
    if not pd.api.types.is_numeric_dtype(series.dtype):
        raise TypeError(f"column {name!r} has dtype {series.dtype}: the service fits numbers; "
                        "convert it (pandas.get_dummies for categories), or leave it out "
                        "with predictor_columns")
    return series.to_numpy(dtype="float64", na_value=np.nan)


# --- summaries -----------------------------------------------------------------------------

def _float_arrays(np: Any, x: Any, y: Any, x_name: str) -> tuple[Any, Any]:
    """x as a float64 matrix (a vector becomes one column), y as float64 with a
    one-column matrix flattened; the caller checks y's shape against x."""
    xv = np.asarray(x, dtype="float64")
    if xv.ndim == 1:
        xv = xv[:, None]
    if xv.ndim != 2:
        raise ValueError(f"{x_name} must be 1- or 2-dimensional, not of shape {xv.shape}")
    yv = np.asarray(y, dtype="float64")
    if yv.ndim == 2 and yv.shape[1] == 1:
        yv = yv[:, 0]
    return xv, yv


def _summary_names(column_names: Sequence[str] | None, k: int, intercept: bool) -> list[str]:
    """The summary's column names: ``intercept`` first when asked, then the predictors."""
    names = [f"x{j + 1}" for j in range(k)] if column_names is None else [
        str(c) for c in column_names]
    if len(names) != k:
        raise ValueError(f"column_names has {len(names)} names for {k} columns of x")
    repeated = sorted({n for n in names if names.count(n) > 1})
    if repeated:
        raise ValueError(f"column_names repeats {', '.join(map(repr, repeated))}")
    if INTERCEPT in names:
        raise ValueError("'intercept' names the column of ones, which the summary adds "
                         "itself with intercept=True; rename the column")
    return [INTERCEPT, *names] if intercept else names


def _check_kind(kind: str) -> None:
    if kind not in SUMMARY_KINDS:
        raise ValueError(f"kind must be one of {', '.join(SUMMARY_KINDS)}, not {kind!r}")


def _square_r(np: ModuleType, r: Any, size: int) -> Any:
    """R padded with zero rows to ``size`` x ``size`` (a partition with fewer rows than columns)."""
    r = np.asarray(r, dtype="float64")
    if r.shape[0] < size:
        r = np.vstack([r, np.zeros((size - r.shape[0], size))])
    return r


def _finished(np: ModuleType, kind: str, n: int, names: list[str], parts: dict[str, Any]) -> Json:
    """The summary dict (plain lists and floats, ready for JSON); ValueError on NaN or infinity."""
    for key, value in parts.items():
        if not np.all(np.isfinite(value)):
            raise ValueError(f"the {key} of the data is not finite: x or y holds NaN or an "
                             "infinity (a summary has no missing values; drop or fill those "
                             "rows first)")
    out: Json = {"kind": kind, "n_observations": int(n), "column_names": names}
    for key, value in parts.items():
        out[key] = float(value) if key == "yty" else np.asarray(value).tolist()
    return out


def summary_from_arrays(x: Any, y: Any, column_names: Sequence[str] | None = None,
                        intercept: bool = True, kind: str = "triangular") -> Json:
    """The summary of numpy arrays (x: n x k, or n; y: n), to send with :meth:`Client.fit_summary`.

    ``kind="triangular"`` (default) is R of a QR factorisation of ``[1 x y]`` (without
    the ones when ``intercept=False``), which keeps the accuracy of a fit from the rows;
    ``"cross_products"`` is X'X, X'y and y'y, which squares the condition number.
    With ``intercept=True`` the column of ones is added here and named ``intercept``;
    ``column_names`` name the columns of x (default x1..xk). A partition with fewer rows
    than columns gets zero rows under its R, so partitions always merge
    (:func:`merge_summaries`). NaN or infinity in the data is a ValueError.
    """
    np = _optional("numpy", "summary_from_arrays()")
    _check_kind(kind)
    xv, yv = _float_arrays(np, x, y, "x")
    if yv.ndim != 1 or yv.shape[0] != xv.shape[0]:
        raise ValueError(f"y must be 1-dimensional with one value per row of x "
                         f"({xv.shape[0]}), not of shape {yv.shape}")
    n, k = xv.shape
    names = _summary_names(column_names, k, intercept)
    columns = [np.ones((n, 1))] if intercept else []
    design = np.hstack(columns + [xv])
    if kind == "triangular":
        r = np.linalg.qr(np.column_stack([design, yv]), mode="r")
        parts: dict[str, Any] = {"r_factor": _square_r(np, r, len(names) + 1)}
    else:
        parts = {"xtx": design.T @ design, "xty": design.T @ yv, "yty": yv @ yv}
    return _finished(np, kind, n, names, parts)


def summary_from_dask(x: Any, y: Any, column_names: Sequence[str] | None = None,
                      intercept: bool = True, kind: str = "triangular") -> Json:
    """The summary of dask arrays, computed where the chunks are (dask.array.linalg.tsqr).

    As :func:`summary_from_arrays`, for a ``dask.array`` x (n x k, or n, chunked by rows)
    and y (n). The triangular summary is the R of ``dask.array.linalg.tsqr`` on
    ``[1 x y]``: each chunk is factored where it lives and the R factors are merged by
    stacking and factoring again. The cross products are one sum over the chunks. It is
    computed with the scheduler in force (``dask.config.set(scheduler=...)`` or a
    ``distributed.Client``); only the (k+2) x (k+2) result comes back. Chunk sizes
    must be known (``x.compute_chunk_sizes()`` after a filter).
    """
    np = _optional("numpy", "summary_from_dask()")
    da = _optional("dask.array", "summary_from_dask()", "'dask[array]'")
    _check_kind(kind)
    xv = da.asarray(x).astype("float64")
    if xv.ndim == 1:
        xv = xv[:, None]
    if xv.ndim != 2:
        raise ValueError(f"x must be 1- or 2-dimensional, not of shape {xv.shape}")
    yv = da.asarray(y).astype("float64")
    if yv.ndim == 2 and yv.shape[1] == 1:
        yv = yv[:, 0]
    if any(math.isnan(c) for c in xv.chunks[0]) or any(math.isnan(c) for c in yv.chunks[0]):
        raise ValueError("x and y need known chunk sizes: call .compute_chunk_sizes() on them "
                         "first (a filter leaves them unknown)")
    if yv.ndim != 1 or yv.shape[0] != xv.shape[0]:
        raise ValueError(f"y must be 1-dimensional with one value per row of x "
                         f"({xv.shape[0]}), not of shape {yv.shape}")
    n, k = xv.shape
    names = _summary_names(column_names, k, intercept)
    rows = xv.chunks[0]
    columns = [da.ones((n, 1), chunks=(rows, 1), dtype="float64")] if intercept else []
    design = da.concatenate(columns + [xv.rechunk({0: rows, 1: -1})], axis=1)
    yv = yv.rechunk((rows,))
    if kind == "triangular":
        augmented = da.concatenate([design, yv[:, None]], axis=1).rechunk({1: -1})
        _, r = da.linalg.tsqr(augmented, compute_svd=False)
        parts: dict[str, Any] = {"r_factor": _square_r(np, r.compute(), len(names) + 1)}
    else:
        xtx, xty, yty = da.compute(design.T @ design, design.T @ yv, yv @ yv)
        parts = {"xtx": xtx, "xty": xty, "yty": yty}
    return _finished(np, kind, n, names, parts)


def merge_summaries(summaries: Sequence[Mapping[str, Any]]) -> Json:
    """One summary of the rows of several partitions (each a summary of the same columns).

    Triangular: the R factors stacked and factored again (the merge step of TSQR), which
    keeps their accuracy. Cross products: the sums added. The kinds and the column
    names must be the same in every summary.
    """
    np = _optional("numpy", "merge_summaries()")
    parts = list(summaries)
    if not parts:
        raise ValueError("merge_summaries() needs at least one summary")
    kind, names = parts[0]["kind"], list(parts[0]["column_names"])
    _check_kind(kind)
    for i, s in enumerate(parts[1:], start=1):
        if s["kind"] != kind or list(s["column_names"]) != names:
            raise ValueError(f"summary {i} is {s['kind']} of {list(s['column_names'])}; "
                             f"summary 0 is {kind} of {names}: only summaries of the same "
                             "kind and columns merge")
    n = sum(int(s["n_observations"]) for s in parts)
    if kind == "triangular":
        stacked = np.vstack([np.asarray(s["r_factor"], dtype="float64") for s in parts])
        merged: dict[str, Any] = {"r_factor": _square_r(
            np, np.linalg.qr(stacked, mode="r"), len(names) + 1)}
    else:
        merged = {"xtx": sum(np.asarray(s["xtx"], dtype="float64") for s in parts),
                  "xty": sum(np.asarray(s["xty"], dtype="float64") for s in parts),
                  "yty": math.fsum(float(s["yty"]) for s in parts)}
    return _finished(np, kind, n, names, merged)


# --- the client ----------------------------------------------------------------------------

class Client:
    """A client of one linfer service.

    Parameters
    ----------
    base_url : str
        ``http://host:port`` of the service (a path prefix is kept: ``.../linfer``).
    timeout : float or None
        Seconds to wait for the connection and for each read of the answer; ``None``
        waits for ever (not recommended). Default 30.
    retries : int
        How many times a 503, a refused connection or a reset is tried again. Default 2.
    backoff : float
        Seconds before the first retry; each later one waits twice as long. Default 0.25.
    headers : mapping, optional
        Extra headers for every request (e.g. authorization for a gateway).
    trust_env : bool
        Use proxies from the environment (``HTTP_PROXY``, ``NO_PROXY``), as urllib
        does by default. False talks to ``base_url`` directly.
    """

    def __init__(self, base_url: str = DEFAULT_BASE_URL, timeout: float | None = DEFAULT_TIMEOUT,
                 retries: int = 2, backoff: float = 0.25, *,
                 headers: Mapping[str, str] | None = None, trust_env: bool = True):
        scheme = urllib.parse.urlsplit(base_url).scheme
        if scheme not in ("http", "https"):
            raise ValueError(f"base_url must be an http:// or https:// URL, not {base_url!r}")
        if timeout is not None and not timeout > 0:
            raise ValueError(f"timeout must be a positive number of seconds or None, "
                             f"not {timeout!r}")
        if isinstance(retries, bool) or not isinstance(retries, int) or retries < 0:
            raise ValueError(f"retries must be a non-negative integer, not {retries!r}")
        if not backoff >= 0:
            raise ValueError(f"backoff must be a non-negative number of seconds, not {backoff!r}")
        self.base_url = base_url.rstrip("/")
        self.timeout = timeout
        self.retries = retries
        self.backoff = backoff
        self.headers = dict(headers or {})
        handlers = [] if trust_env else [urllib.request.ProxyHandler({})]
        self._opener = urllib.request.build_opener(*handlers)

    def __repr__(self) -> str:
        return (f"Client({self.base_url!r}, timeout={self.timeout!r}, retries={self.retries!r}, "
                f"backoff={self.backoff!r})")

    # -- endpoints --

    def fit(self, **request_fields: Any) -> FitResult:
        """POST /v1/fit with the request's fields as keyword arguments.

        ``fit(design_matrix=X, response=y, column_names=[...])`` or
        ``fit(table={...}, response_column="kwh")``, plus options: intercept, levels,
        weights, missing, rank_deficiency, covariance, simultaneous, hypotheses,
        include, return_model.

        Raises ApiError (e.g. 422 with ``errors`` pointing at the bad values),
        TransportError or Timeout.
        """
        return FitResult.from_json(self._call("POST", "/v1/fit", request_fields))

    def fit_frame(self, frame: pandas.DataFrame, response_column: str,
                  **options: Any) -> FitResult:
        """Fit the columns of a pandas DataFrame (sent in the ``table`` layout).

        Column names are sent as strings; NaN and NA are sent as null (see the
        ``missing`` option); boolean columns as 0 and 1; other non-numeric columns
        are a TypeError. With ``predictor_columns`` only the response, the predictors
        and a weights column are sent. The index is not sent.
        """
        pd = _optional("pandas", "fit_frame()")
        if not isinstance(frame, pd.DataFrame):
            raise TypeError(f"fit_frame() takes a pandas DataFrame, not {type(frame).__name__}")
        names = [str(c) for c in frame.columns]
        repeated = sorted({n for n in names if names.count(n) > 1})
        if repeated:
            raise ValueError(f"the DataFrame has repeated column names: {', '.join(repeated)}")
        response_column = str(response_column)
        wanted: set[str] | None = None
        if "predictor_columns" in options:
            options["predictor_columns"] = [str(p) for p in options["predictor_columns"]]
            wanted = {response_column, *options["predictor_columns"]}
            if isinstance(options.get("weights"), str):
                wanted.add(options["weights"])
        table = {name: _float_column(frame.iloc[:, j], name) for j, name in enumerate(names)
                 if wanted is None or name in wanted}
        return self.fit(table=table, response_column=response_column, **options)

    def fit_arrays(self, X: Any, y: Any, column_names: Sequence[str] | None = None,
                   **options: Any) -> FitResult:
        """Fit numpy arrays (or anything numpy.asarray takes): X is n x k (or n), y is n.

        Sent in the ``design_matrix`` layout; NaN is sent as null. When ``X`` is a
        DataFrame and ``column_names`` is None, its column names are used.
        """
        np = _optional("numpy", "fit_arrays()")
        if column_names is None and hasattr(X, "columns"):
            column_names = [str(c) for c in X.columns]
        x, yv = _float_arrays(np, X, y, "X")
        if yv.ndim != 1:
            raise ValueError(f"y must be 1-dimensional, not of shape {yv.shape}")
        body: Json = {"design_matrix": x, "response": yv}
        if column_names is not None:
            body["column_names"] = [str(c) for c in column_names]
        return self.fit(**body, **options)

    def fit_summary(self, summary: Mapping[str, Any], **options: Any) -> FitResult:
        """POST /v1/fit with a triangular or cross-products ``summary`` instead of rows.

        ``summary`` is a dict as :func:`summary_from_arrays`, :func:`summary_from_dask` or
        :func:`merge_summaries` make (or one computed elsewhere, e.g. by SQL). Options:
        levels, rank_deficiency, simultaneous, hypotheses, return_model. Weights, robust
        covariances and per-row output need the rows and are a 422 ApiError; the answer
        has no residual checks and warns ``no_rows`` (and ``cross_products_precision``
        with the digits lost, for cross products).
        """
        return self.fit(summary=summary, **options)

    def predict(self, *, model: FitResult | Mapping[str, Any] | None = None,
                **request_fields: Any) -> PredictResult:
        """POST /v1/predict: intervals for ``new_rows`` or ``new_table``.

        ``model`` is the compact summary from a fit made with ``return_model=True``
        (the FitResult itself, or its ``.model`` dict); or send the data as in
        :meth:`fit` instead. Options: levels, kind ("mean", "observation", "band").
        """
        if model is not None:
            request_fields["model"] = _model_of(model)
        return PredictResult.from_json(self._call("POST", "/v1/predict", request_fields))

    def test(self, *, model: FitResult | Mapping[str, Any] | None = None,
             **request_fields: Any) -> list[HypothesisResult]:
        """POST /v1/test: ``hypotheses`` against a model summary (or the data sent).

        Returns one result per hypothesis set, in order.
        """
        if model is not None:
            request_fields["model"] = _model_of(model)
        doc = self._call("POST", "/v1/test", request_fields)
        return [HypothesisResult.from_json(h) for h in doc["hypotheses"]]

    def health(self) -> bool:
        """Whether GET /healthz answers 200 with status ok now (one try, no retries)."""
        try:
            status, _, data = self._send("GET", "/healthz", None, retries=0)
            return status == 200 and json.loads(data).get("status") == "ok"
        except (LinferError, ValueError, AttributeError):
            return False

    # -- HTTP --

    def _call(self, method: str, path: str, payload: Mapping[str, Any] | None) -> Json:
        body = None
        if payload is not None:
            body = json.dumps(_jsonable(payload), allow_nan=False,
                              separators=(",", ":")).encode("utf-8")
        status, headers, data = self._send(method, path, body)
        url = self.base_url + path
        if 200 <= status < 300:
            try:
                doc = json.loads(data)
            except ValueError:
                raise LinferError(f"{method} {url} answered {status} with a body that is not "
                                  f"JSON: {data[:200]!r}") from None
            if not isinstance(doc, dict):
                raise LinferError(f"{method} {url} answered {status} with JSON that is not "
                                  "an object")
            return doc
        raise ApiError(status, _problem(status, headers, data), method=method, url=url,
                       request_id=headers.get("X-Request-ID"))

    def _send(self, method: str, path: str, body: bytes | None,
              retries: int | None = None) -> tuple[int, Any, bytes]:
        """One request, retried as the module docstring says: (status, headers, body)."""
        url = self.base_url + path
        headers = {"Accept": "application/json", "User-Agent": USER_AGENT, **self.headers}
        if body is not None:
            headers["Content-Type"] = "application/json"
        budget = self.retries if retries is None else retries
        attempt = 0
        while True:
            # base_url was checked to be http:// or https:// in __init__.
            request = urllib.request.Request(  # noqa: S310
                url, data=body, method=method, headers=headers)
            try:
                with self._opener.open(request, timeout=self.timeout) as response:
                    return response.status, response.headers, response.read()
            except urllib.error.HTTPError as err:
                with err:
                    try:
                        status, answer_headers, data = err.code, err.headers, err.read()
                    except (OSError, http.client.HTTPException) as read_err:
                        reason: BaseException = read_err
                    else:
                        if status != 503 or attempt >= budget:
                            return status, answer_headers, data
                        time.sleep(self._delay(attempt, answer_headers))
                        attempt += 1
                        continue
            except urllib.error.URLError as err:
                reason = err.reason if isinstance(err.reason, BaseException) else err
            except (OSError, http.client.HTTPException) as err:
                reason = err
            if isinstance(reason, TimeoutError):
                raise Timeout(f"{method} {url}: no answer within {self.timeout} s",
                              method=method, url=url) from reason
            if isinstance(reason, _RETRYABLE) and attempt < budget:
                time.sleep(self._delay(attempt, None))
                attempt += 1
                continue
            tries = f" (after {attempt + 1} attempts)" if attempt else ""
            raise TransportError(f"{method} {url}: {_describe(reason)}{tries}",
                                 method=method, url=url) from reason

    def _delay(self, attempt: int, headers: Any) -> float:
        delay = float(self.backoff * 2.0 ** attempt)
        retry_after = headers.get("Retry-After") if headers is not None else None
        if retry_after:
            try:
                delay = max(delay, min(float(retry_after), MAX_RETRY_AFTER))
            except ValueError:
                pass  # an HTTP date: keep the backoff
        return delay


def _describe(reason: BaseException) -> str:
    if isinstance(reason, ConnectionRefusedError):
        return "connection refused (is the service running at this address?)"
    if isinstance(reason, (ConnectionResetError, http.client.IncompleteRead)):
        return f"the connection was reset or closed before the answer ({reason})"
    return f"{type(reason).__name__}: {reason}"


def _problem(status: int, headers: Any, data: bytes) -> Json:
    """The problem document of an error answer, or one made up for a body that is not one."""
    try:
        doc = json.loads(data)
    except ValueError:
        doc = None
    if isinstance(doc, dict):
        return doc
    reason = http.client.responses.get(status, "Error")
    text = data[:500].decode("utf-8", errors="replace").strip()
    return {"type": "about:blank", "title": reason, "status": status,
            "detail": text or reason, "errors": []}


def _model_of(model: FitResult | Mapping[str, Any]) -> Mapping[str, Any]:
    if isinstance(model, FitResult):
        if model.model is None:
            raise ValueError("this FitResult carries no model summary: fit with "
                             "return_model=True")
        return model.model
    return model
