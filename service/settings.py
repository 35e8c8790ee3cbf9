"""Every limit and switch of the service, read from ``LINFER_*`` environment variables.

A setting is read once, when :func:`load` is called by the app factory; nothing
here runs at import time. Each field's default is safe for a public endpoint on
a small machine; raise a limit through its variable, never by editing code.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, fields
from typing import Mapping

__all__ = ["Settings", "load", "SettingsError"]


class SettingsError(ValueError):
    """A LINFER_* variable holds a value of the wrong kind or out of range."""


@dataclass(frozen=True)
class Settings:
    """The service's limits and switches.

    Attributes
    ----------
    max_body_bytes
        Largest request body read, in bytes (LINFER_MAX_BODY_BYTES). A larger
        Content-Length is refused with 413 before the body is read.
    max_rows
        Most observations in one fit (LINFER_MAX_ROWS).
    max_columns
        Most design columns, intercept included (LINFER_MAX_COLUMNS).
    max_cells
        Most rows x columns in one design (LINFER_MAX_CELLS).
    max_levels
        Most confidence levels in one request (LINFER_MAX_LEVELS).
    max_hypotheses
        Most sets of restrictions in one request (LINFER_MAX_HYPOTHESES); each set
        holds at most ``max_columns`` restrictions.
    extended_max_work
        Largest rows x (columns + 2)^2 for which the extended-precision path may be
        taken (LINFER_EXTENDED_MAX_WORK); larger problems stay in double
        precision and say how many digits they can vouch for.
    extended_below_digits
        The double-precision answer is recomputed in extended precision when
        its estimated correct digits fall below this (LINFER_EXTENDED_BELOW_DIGITS).
    max_request_seconds
        Longest time one request may take, body upload included
        (LINFER_MAX_REQUEST_SECONDS): past it the request is stopped and answered
        with a 408 (body still arriving) or 422 (computing) problem. Under gunicorn it
        must be below the worker timeout (LINFER_TIMEOUT), which ``linfer serve``
        checks; unset there, it is half of LINFER_TIMEOUT.
    api_tokens
        Comma-separated bearer tokens (LINFER_API_TOKENS). When set, every /v1
        endpoint needs ``Authorization: Bearer <token>``; empty: no authentication.
    cors_origins
        Comma-separated origins allowed to call the API from a browser
        (LINFER_CORS_ORIGINS), or ``*``; empty: no CORS headers (off).
    """

    @property
    def token_list(self) -> tuple[str, ...]:
        return tuple(t.strip() for t in self.api_tokens.split(",") if t.strip())

    @property
    def origin_list(self) -> tuple[str, ...]:
        return tuple(o.strip() for o in self.cors_origins.split(",") if o.strip())


    max_body_bytes: int = 64 * 1024 * 1024
    max_rows: int = 1_000_000
    max_columns: int = 200
    max_cells: int = 2_000_000
    max_levels: int = 10
    max_hypotheses: int = 50
    extended_max_work: int = 200_000
    extended_below_digits: float = 13.5
    max_request_seconds: float = 30.0
    api_tokens: str = ""
    cors_origins: str = ""

    def overlay(self, values: Mapping[str, object]) -> "Settings":
        """Return a copy with the given fields replaced (used by tests and the factory)."""
        known = {f.name for f in fields(self)}
        unknown = set(values) - known
        if unknown:
            raise SettingsError(f"unknown settings: {', '.join(sorted(unknown))}")
        current = {f.name: getattr(self, f.name) for f in fields(self)}
        current.update(values)
        return Settings(**current)


def load(environ: Mapping[str, str] | None = None) -> Settings:
    """Read every ``LINFER_<FIELD>`` variable that is set, over the defaults."""
    environ = os.environ if environ is None else environ
    base = Settings()
    values: dict[str, object] = {}
    for f in fields(base):
        name = "LINFER_" + f.name.upper()
        raw = environ.get(name)
        if raw is None or raw == "":
            continue
        kind = type(getattr(base, f.name))
        if kind is str:
            values[f.name] = raw
            continue
        try:
            value = kind(raw)
        except ValueError:
            raise SettingsError(f"{name}={raw!r} is not a {kind.__name__}") from None
        if not value > 0 or value == float("inf"):
            raise SettingsError(f"{name}={raw!r} must be a positive finite number")
        values[f.name] = value
    return base.overlay(values)
