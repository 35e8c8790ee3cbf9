"""The HTTP endpoints: /v1/fit and the operational ones."""

from __future__ import annotations

import math
import select
from pathlib import Path

import numpy as np

import orjson
from flask import Blueprint, Flask, Response, current_app, request
from werkzeug.exceptions import ClientDisconnected
from werkzeug.sansio.utils import get_content_length

from ..observability import record_shape
from ..settings import Settings
from ..stats.design import INTERCEPT, Design
from ..stats.fit import FitOptions, FitResult, TooFewObservations, fit, fit_summary
from ..stats.hypotheses import HypothesisError, test_hypotheses
from ..stats.lstsq import RankDeficient, ResponseScaleOutOfRange
from ..stats.model import ModelSummary
from ..stats.predict import predict
from ..stats.summaries import Summary, SummaryError
from ..time_limit import body_received
from .arrays import invalid
from .arrow_io import ARROW_MEDIA_TYPE, table_body_from_arrow
from .csv_io import CSV_MEDIA_TYPE, coefficients_csv, table_body_from_csv
from .decode import decode_design, decode_fit, fit_options, load_request
from .encode import (alias_entry, encode_fit, encode_hypothesis, encode_rows, intervals,
                     json_response, number)
from .model_io import decode_model, decode_new_rows, encode_model
from .problems import ApiProblem, FieldError, body_limit_detail, pointer
from .schemas import PredictRequestSchema, TestRequestSchema

__all__ = ["init_app"]

bp = Blueprint("v1", __name__)
DRAIN_BYTES = 32 * 1024 * 1024
DRAIN_WAIT = 1.0
_PREDICT = PredictRequestSchema()
_TEST = TestRequestSchema()
# The contract ships inside the package (service/openapi.yaml, a link to the
# repository's openapi/linfer.yaml that the wheel build resolves into a file).
OPENAPI = Path(__file__).resolve().parents[1] / "openapi.yaml"


def _drain(length: int) -> None:
    """Read and drop up to ``length`` bytes of a refused body while they keep arriving.

    Straight from gunicorn's socket (its body reader would block for a full chunk), and
    only while data come: a caller that announced the length but waits before sending
    is not waited for beyond DRAIN_WAIT seconds. Under another server, nothing is read.
    """
    sock = request.environ.get("gunicorn.socket")
    if sock is None:
        return
    left = length
    while left > 0:
        if not select.select([sock], [], [], DRAIN_WAIT)[0]:
            return
        try:
            chunk = sock.recv(min(left, 1 << 16))
        except OSError:
            return
        if not chunk:
            return
        left -= len(chunk)


def _read_body() -> bytes:
    """The request body, refusing one over LINFER_MAX_BODY_BYTES with 413."""
    req = request._get_current_object()
    environ = req.environ
    limit = current_app.config["MAX_CONTENT_LENGTH"]
    # req.content_length, read from the environ its headers would wrap.
    length = get_content_length(environ.get("CONTENT_LENGTH"),
                                environ.get("HTTP_TRANSFER_ENCODING"))
    if length is not None and length > limit:
        # Read (and drop) a moderately oversized body before answering, so that a
        # client still sending it sees the 413 instead of a broken pipe; a body
        # larger than DRAIN_BYTES is refused without being read.
        if length <= DRAIN_BYTES:
            _drain(length)
        raise ApiProblem(413, "Content Too Large", body_limit_detail(), "content_too_large")
    if length is None:
        # A chunked body has no length to refuse up front: read one byte past the
        # limit straight from the server's stream, so a longer body is a 413 and
        # never a silently truncated document.
        raw = environ["wsgi.input"].read(limit + 1)
        if len(raw) > limit:
            raise ApiProblem(413, "Content Too Large", body_limit_detail(),
                             "content_too_large")
        body_received()
        return raw
    # What request.get_data(cache=False) reads, without its stream wrappers: the
    # announced length, and a body cut short is a client that went away (400), unless
    # the server itself ends the stream (wsgi.input_terminated), as werkzeug has it.
    raw = environ["wsgi.input"].read(length)
    if len(raw) < length and "wsgi.input_terminated" not in environ:
        raise ClientDisconnected()
    body_received()
    return raw


def _json_body(mime: str | None = None) -> object:
    """The parsed JSON body (``mime``: the request's mimetype, when already read)."""
    mime = (request.mimetype if mime is None else mime) or ""
    if mime != "application/json" and not mime.endswith("+json"):
        raise ApiProblem(415, "Unsupported Media Type",
                         f"send the request as application/json, not {mime or 'no type'}",
                         "unsupported_media_type")
    raw = _read_body()
    try:
        return orjson.loads(raw)
    except orjson.JSONDecodeError as err:
        raise ApiProblem(400, "Malformed JSON", f"the body is not valid JSON: {err}",
                         "malformed_json") from None


def _run_fit(design: Design, options: FitOptions, pointers: dict[str, str]) -> FitResult:
    """Fit, turning the core's refusals into problems that point into the request."""
    record_shape(*design.matrix.shape)
    try:
        return fit(design, options)
    except TooFewObservations as err:
        dropped = design.rows_dropped_missing + design.rows_zero_weight
        why = (f" after {dropped} rows were dropped or had weight 0" if dropped else "")
        where = "/table" if any(p.startswith("/table") for p in pointers.values()) \
            else "/design_matrix"
        raise invalid([FieldError(where, f"{err.n} observations{why} for {err.k} design "
                                  "columns: the coefficients are not determined; send at "
                                  f"least {err.k + 1} rows for any inference")]) from None
    except RankDeficient as err:
        raise _rank_problem(err, design.names, pointers) from None
    except ResponseScaleOutOfRange as err:
        table = any(p.startswith("/table") for p in pointers.values())
        where = "/weights" if design.weights is not None else \
            ("/response_column" if table else "/response")
        raise invalid([FieldError(where, str(err))]) from None
    except HypothesisError as err:
        raise _hypothesis_problem(err) from None


def _run_summary(summary: Summary, options: FitOptions,
                 pointers: dict[str, str]) -> FitResult:
    record_shape(summary.n_observations, len(summary.names))
    try:
        return fit_summary(summary, options)
    except SummaryError as err:
        raise invalid([FieldError(pointer("summary", err.field, *err.index), str(err))]) \
            from None
    except RankDeficient as err:
        raise _rank_problem(err, summary.names, pointers) from None
    except ResponseScaleOutOfRange as err:
        raise invalid([FieldError("/summary", str(err))]) from None
    except HypothesisError as err:
        raise _hypothesis_problem(err) from None


def _rank_problem(err: RankDeficient, names: tuple[str, ...],
                  pointers: dict[str, str]) -> ApiProblem:
    errors = [FieldError(pointers.get(names[a.column], ""),
                         alias_entry(a, names)["description"] + " (aliased)")
              for a in err.aliases]
    return ApiProblem(
        422, "Rank-deficient design",
        f"The design has rank {err.rank} for {err.n_columns} columns: "
        + "; ".join(e.message for e in errors)
        + ". Remove the aliased columns, or set rank_deficiency to drop_aliased to fit "
          "the rest and report these as not estimable.",
        "rank_deficient", errors)


def _hypothesis_problem(err: HypothesisError) -> ApiProblem:
    parts: list[str | int] = ["hypotheses", err.hypothesis]
    if err.restriction is not None:
        parts += ["restrictions", err.restriction]
        if err.name is not None:
            parts += ["coefficients", err.name]
    return invalid([FieldError(pointer(*parts), str(err))])


def _request(mime: str | None = None) -> tuple[Settings, object]:
    return current_app.config["LINFER_SETTINGS"], _json_body(mime)


# Accept headers that ask for JSON (or anything) in the words clients send most:
# the negotiation below would pick JSON for each of them.
_JSON_ACCEPTS = frozenset({"", "*/*", "application/json", "application/*",
                           "application/json, */*", "application/json, text/plain, */*"})


def _wants_csv(req) -> bool:
    """Whether the caller's Accept header prefers the coefficient table as CSV."""
    if req.environ.get("HTTP_ACCEPT", "") in _JSON_ACCEPTS:
        return False
    return req.accept_mimetypes.best_match(["application/json", CSV_MEDIA_TYPE]) \
        == CSV_MEDIA_TYPE


@bp.post("/v1/fit")
def fit_endpoint() -> Response:
    req_ = request._get_current_object()
    mimetype = req_.mimetype
    if mimetype in (CSV_MEDIA_TYPE, ARROW_MEDIA_TYPE):
        # A table as CSV or Arrow: it becomes the table layout, options come from the
        # query string, and problems point into that table (/table/<column>/<row>).
        settings = current_app.config["LINFER_SETTINGS"]
        reader = table_body_from_csv if mimetype == CSV_MEDIA_TYPE \
            else table_body_from_arrow
        body = reader(_read_body(), req_.args)
    else:
        if req_.environ.get("QUERY_STRING") and req_.args:
            raise invalid([FieldError("", f"query parameter {name!r} is for CSV and Arrow "
                                      "bodies; with JSON, send the option in the body")
                           for name in req_.args])
        settings, body = _request(mimetype)
    req = decode_fit(body, settings)
    # The design holds its own copy of the numbers: let the parsed body (for JSON a
    # Python object per number, for Arrow and CSV the stream's buffers) go before the fit.
    del body
    if req.summary is not None:
        result = _run_summary(req.summary, req.options, req.column_pointers)
    else:
        result = _run_fit(req.design, req.options, req.column_pointers)
    document = encode_fit(result, req.column_pointers)
    if req.include_residuals:
        document["rows"] = encode_rows(result)
    if req.return_model:
        document["model"] = encode_model(result.model)
    if _wants_csv(req_):
        return Response(coefficients_csv(document), mimetype=CSV_MEDIA_TYPE)
    return json_response(document)


def _model_from(data: dict, body: dict, settings: Settings,
                hypotheses: bool = False) -> tuple[ModelSummary, FitResult | None]:
    """The model summary sent, or the one fitted from the data sent."""
    if "model" in data:
        return decode_model(data["model"], settings), None
    options = fit_options({**data, "hypotheses": []} if hypotheses else data, settings)
    design, where = decode_design(data, body, settings)
    result = _run_fit(design, options, where)
    return result.model, result


def _prediction_notices(model: ModelSummary, predictions: list, data: dict) -> list[dict]:
    """Why a prediction's figures are null: no residual df, an undefined covariance,
    overflow, or a row the data do not determine."""
    notices = []
    est = model.estimable
    covariance_ok = bool(np.all(np.isfinite(model.covariance[np.ix_(est, est)])))
    if model.residual_df <= 0:
        notices.append({"code": "no_residual_df", "message": "The model has no residual "
                        "degrees of freedom: standard errors and intervals are undefined.",
                        "pointer": None})
    elif not covariance_ok:
        notices.append({"code": "covariance_undefined", "message": "The model's covariance "
                        "is undefined (null), so standard errors and intervals are null; "
                        "refit with another covariance kind.", "pointer": "/model/covariance"})
    defined = model.residual_df > 0 and covariance_ok and math.isfinite(model.residual_variance)
    first = next((n for n in model.names if not (model.intercept and n == INTERCEPT)), None)
    for i, p in enumerate(predictions):
        where = pointer("new_rows", i) if "new_rows" in data else pointer("new_table", first, i)
        figures = (p.mean, p.standard_error,
                   *(bound for iv in p.intervals for bound in (iv.lower, iv.upper)))
        if p.estimable and defined and not all(math.isfinite(v) for v in figures):
            notices.append({"code": "overflow", "message": (
                f"New row {i}: a figure exceeds the range of double precision and is null; "
                "rescale the predictors."), "pointer": where})
        if not p.estimable:
            notices.append({"code": "not_estimable", "message": (
                f"New row {i} breaks the relation of an aliased column: the data do not "
                "determine its mean, which is null."), "pointer": where})
    return notices


@bp.post("/v1/predict")
def predict_endpoint() -> Response:
    settings, body = _request()
    data = load_request(_PREDICT, body)
    levels = fit_options({**data, "hypotheses": []}, settings).levels
    model, _ = _model_from(data, body, settings)
    x, weights = decode_new_rows(data, body, model, settings)
    predictions = predict(model, x, levels, data["kind"], weights)
    notices = _prediction_notices(model, predictions, data)
    return json_response({
        "kind": data["kind"],
        "covariance_kind": model.covariance_kind,
        "residual_df": model.residual_df,
        "predictions": [{"mean": number(p.mean), "standard_error": number(p.standard_error),
                         "intervals": intervals(p.intervals)} for p in predictions],
        "warnings": notices,
    })


@bp.post("/v1/test")
def test_endpoint() -> Response:
    settings, body = _request()
    data = load_request(_TEST, body)
    model, result = _model_from(data, body, settings, hypotheses=True)
    hypotheses = fit_options(data, settings).hypotheses
    rss = result.inference.fit.residual_sum_of_squares if result is not None else (
        model.residual_variance * model.residual_df
        if model.covariance_kind == "classical" else None)
    try:
        tests = test_hypotheses(model, hypotheses, residual_sum_of_squares=rss)
    except HypothesisError as err:
        raise _hypothesis_problem(err) from None
    return json_response({"covariance_kind": model.covariance_kind,
                          "residual_df": model.residual_df,
                          "hypotheses": [encode_hypothesis(h) for h in tests]})


@bp.get("/healthz")
def healthz() -> Response:
    return json_response({"status": "ok"})


@bp.get("/readyz")
def readyz() -> Response:
    return json_response({"status": "ready"})


@bp.get("/openapi.yaml")
def openapi() -> Response:
    if not OPENAPI.is_file():
        raise ApiProblem(404, "Not Found", "the OpenAPI description is not installed",
                         "not_found")
    return Response(OPENAPI.read_bytes(), mimetype="application/yaml")


def init_app(app: Flask) -> None:
    app.register_blueprint(bp)
