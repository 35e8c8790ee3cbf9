"""Warnings the numerical core attaches to a result: a stable code and a plain message."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Notice"]


@dataclass(frozen=True)
class Notice:
    """A warning. ``column`` names the design column it concerns, if any."""

    code: str
    message: str
    column: str | None = None
