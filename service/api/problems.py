"""RFC 9457 problem details: the one shape every error of the service takes.

``ApiProblem`` is raised anywhere in the web layer; the handlers registered by
:func:`init_app` turn it, and every HTTP error Flask raises, into an
``application/problem+json`` response with ``type``, ``title``, ``status``,
``detail`` and ``errors``: a list of ``{"pointer", "message"}``, each pointer an
RFC 6901 JSON Pointer into the request document.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field

import orjson
from flask import Flask, Response, current_app
from werkzeug.exceptions import HTTPException

__all__ = ["ApiProblem", "FieldError", "pointer", "problem_response", "init_app"]

TYPE_BASE = "https://linfer.invalid/problems/"
log = logging.getLogger("linfer")


def pointer(*parts: str | int) -> str:
    """An RFC 6901 JSON Pointer from its reference tokens (``~`` and ``/`` escaped)."""
    return "".join("/" + str(p).replace("~", "~0").replace("/", "~1") for p in parts)


@dataclass(frozen=True)
class FieldError:
    pointer: str
    message: str


@dataclass
class ApiProblem(Exception):
    """An error answer. ``kind`` is the last segment of the problem ``type`` URI."""

    status: int
    title: str
    detail: str
    kind: str
    errors: list[FieldError] = field(default_factory=list)

    def __str__(self) -> str:
        return f"{self.status} {self.title}: {self.detail}"


def problem_response(problem: ApiProblem) -> Response:
    body = {
        "type": TYPE_BASE + problem.kind,
        "title": problem.title,
        "status": problem.status,
        "detail": problem.detail,
        "errors": [{"pointer": e.pointer, "message": e.message} for e in problem.errors],
    }
    return Response(orjson.dumps(body), status=problem.status,
                    mimetype="application/problem+json")


def body_limit_detail() -> str:
    limit = current_app.config["MAX_CONTENT_LENGTH"]
    return f"The request body is larger than the limit of {limit} bytes (LINFER_MAX_BODY_BYTES)."


def _http_error(error: HTTPException) -> Response:
    status = error.code or 500
    detail = error.description or error.name
    if status == 413:
        detail = body_limit_detail()
    kind = error.name.lower().replace(" ", "_").replace("'", "")
    response = problem_response(ApiProblem(status, error.name, detail, kind))
    for name, value in error.get_headers():
        if name.lower() != "content-type":
            response.headers[name] = value
    return response


def _unexpected(error: Exception) -> Response:
    log.exception("unexpected error", exc_info=error)
    return problem_response(ApiProblem(
        500, "Internal Server Error",
        "The service failed on this request; the failure is logged without the request data.",
        "internal_error"))


def init_app(app: Flask) -> None:
    app.register_error_handler(ApiProblem, problem_response)
    app.register_error_handler(HTTPException, _http_error)
    app.register_error_handler(Exception, _unexpected)
