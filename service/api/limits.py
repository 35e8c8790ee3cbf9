"""The size limits of a request as the 422 problems that name them: one wording for all.

Each message says what was counted, the limit, and the setting that raises it, e.g.
``has 250 design columns, more than the limit of 200 (LINFER_MAX_COLUMNS)``.
"""

from __future__ import annotations

from ..settings import Settings
from .arrays import invalid
from .problems import FieldError

__all__ = ["check_shape", "over"]


def over(count: int | str, what: str, limit: int, variable: str) -> str:
    """``has <count> <what>, more than the limit of <limit> (<variable>)``."""
    return f"has {count} {what}, more than the limit of {limit} ({variable})"


def check_shape(where: str, settings: Settings, rows: int | None = None,
                columns: int | None = None) -> None:
    """422 at ``where`` for a design over LINFER_MAX_ROWS, LINFER_MAX_COLUMNS or, when
    both sizes are known, LINFER_MAX_CELLS (every limit passed is named)."""
    errors = []
    if rows is not None and rows > settings.max_rows:
        errors.append(FieldError(where, over(rows, "rows", settings.max_rows,
                                             "LINFER_MAX_ROWS")))
    if columns is not None and columns > settings.max_columns:
        errors.append(FieldError(where, over(columns, "design columns", settings.max_columns,
                                             "LINFER_MAX_COLUMNS")))
    if rows is not None and columns is not None and rows * columns > settings.max_cells:
        cells = f"{rows} x {columns} = {rows * columns}"
        errors.append(FieldError(where, over(cells, "cells", settings.max_cells,
                                             "LINFER_MAX_CELLS")))
    if errors:
        raise invalid(errors)
