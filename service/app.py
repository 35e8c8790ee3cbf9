"""The application factory: ``create_app(settings) -> Flask``; nothing happens at import time.

gunicorn calls it as ``service.app:create_app()``.
"""

from __future__ import annotations

from typing import Mapping

from flask import Flask

from . import observability, security, time_limit
from . import settings as settings_module
from .api import problems, routes
from .settings import Settings

__all__ = ["create_app"]


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
    # Request ids (X-Request-ID) come with the metrics and the access log: one hook
    # before the request and one after it for the three.
    observability.init_app(app)
    security.init_app(app)
    # After the hooks above: its after-request hook then runs first (disarming the timer).
    time_limit.init_app(app)
    problems.init_app(app)
    routes.init_app(app)
    return app
