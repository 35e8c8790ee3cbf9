"""Warnings the numerical core attaches to a result: a stable code and a plain message."""

from __future__ import annotations

from .records import record

__all__ = ["Notice"]


@record
class Notice:
    """A warning. ``column`` names the design column it concerns, if any."""

    code: str
    message: str
    column: str | None = None
