"""The application factory: ``create_app(settings) -> Flask``; nothing happens at import time.

gunicorn calls it as ``service.app:create_app()``.
"""

from __future__ import annotations

import os
import re
from typing import Mapping

from flask import Flask, Response, g, request

from . import observability, security
from . import settings as settings_module
from .api import problems, routes
from .settings import Settings

__all__ = ["create_app"]

_REQUEST_ID = re.compile(r"^[A-Za-z0-9._:-]{1,128}$")


_UUID_CLEAR = ~((0xc000 << 48) | (0xf000 << 64))
_UUID_SET = (0x8000 << 48) | (4 << 76)


def _new_id() -> str:
    """A random (version 4) UUID in hex, as ``uuid.uuid4().hex`` writes it, without the
    UUID object: the variant and version bits set on 128 random bits."""
    return "%032x" % (int.from_bytes(os.urandom(16), "big") & _UUID_CLEAR | _UUID_SET)


def _request_id() -> None:
    given = request.environ.get("HTTP_X_REQUEST_ID", "")  # request.headers.get, less its wrapper
    g.request_id = given if _REQUEST_ID.match(given) else _new_id()


def _tag(response: Response) -> Response:
    response.headers["X-Request-ID"] = getattr(g, "request_id", None) or _new_id()
    return response


def create_app(settings: Settings | Mapping[str, object] | None = None) -> Flask:
    """Build the app from the LINFER_* environment, overlaid by ``settings`` when given."""
    if isinstance(settings, Settings):
        resolved = settings
    else:
        resolved = settings_module.load()
        if settings:
            resolved = resolved.overlay(settings)
    app = Flask("linfer")
    app.config["LINFER_SETTINGS"] = resolved
    app.config["MAX_CONTENT_LENGTH"] = resolved.max_body_bytes
    app.before_request(_request_id)
    app.after_request(_tag)
    observability.init_app(app)
    security.init_app(app)
    problems.init_app(app)
    routes.init_app(app)
    return app
