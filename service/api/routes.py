"""The HTTP endpoints: /v1/fit and the operational ones."""

from __future__ import annotations

from pathlib import Path

import orjson
from flask import Blueprint, Flask, Response, current_app, request

from ..stats.fit import TooFewObservations, fit
from ..stats.lstsq import RankDeficient
from .arrays import invalid
from .decode import decode_fit
from .encode import alias_entry, encode_fit, json_response
from .problems import ApiProblem, FieldError, body_limit_detail

__all__ = ["init_app"]

bp = Blueprint("v1", __name__)
OPENAPI = Path(__file__).resolve().parents[2] / "openapi" / "linfer.yaml"


def _json_body() -> tuple[object, int]:
    """The parsed body, and how many boolean literals its bytes hold."""
    mime = request.mimetype or ""
    if mime != "application/json" and not mime.endswith("+json"):
        raise ApiProblem(415, "Unsupported Media Type",
                         f"send the request as application/json, not {mime or 'no type'}",
                         "unsupported_media_type")
    limit = current_app.config["MAX_CONTENT_LENGTH"]
    if request.content_length is not None and request.content_length > limit:
        raise ApiProblem(413, "Content Too Large", body_limit_detail(), "content_too_large")
    if request.content_length is None:
        # A chunked body has no length to refuse up front: read one byte past the
        # limit straight from the server's stream, so a longer body is a 413 and
        # never a silently truncated document.
        raw = request.environ["wsgi.input"].read(limit + 1)
        if len(raw) > limit:
            raise ApiProblem(413, "Content Too Large", body_limit_detail(),
                             "content_too_large")
    else:
        raw = request.get_data(cache=False)
    try:
        return orjson.loads(raw), raw.count(b"true") + raw.count(b"false")
    except orjson.JSONDecodeError as err:
        raise ApiProblem(400, "Malformed JSON", f"the body is not valid JSON: {err}",
                         "malformed_json") from None


@bp.post("/v1/fit")
def fit_endpoint() -> Response:
    settings = current_app.config["LINFER_SETTINGS"]
    body, booleans = _json_body()
    req = decode_fit(body, settings, booleans)
    design = req.design
    try:
        result = fit(design, req.options)
    except TooFewObservations as err:
        dropped = design.rows_dropped_missing + design.rows_zero_weight
        why = (f" after {dropped} rows were dropped or had weight 0" if dropped else "")
        raise invalid([FieldError("/table" if "/table" in "".join(req.column_pointers.values())
                                  else "/design_matrix",
                                  f"{err.n} observations{why} for {err.k} design columns: the "
                                  "coefficients are not determined; send at least "
                                  f"{err.k + 1} rows for any inference")]) from None
    except RankDeficient as err:
        errors = [FieldError(req.column_pointers.get(design.names[a.column], ""),
                             alias_entry(a, design.names)["description"] + " (aliased)")
                  for a in err.aliases]
        raise ApiProblem(
            422, "Rank-deficient design",
            f"The design has rank {err.rank} for {err.n_columns} columns: "
            + "; ".join(e.message for e in errors)
            + ". Remove the aliased columns, or set rank_deficiency to drop_aliased to fit "
              "the rest and report these as not estimable.",
            "rank_deficient", errors) from None
    return json_response(encode_fit(result, req.column_pointers))


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
