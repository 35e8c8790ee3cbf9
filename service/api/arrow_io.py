"""Apache Arrow IPC streams for large tables: a /v1/fit body straight into float arrays.

``POST /v1/fit`` with ``Content-Type: application/vnd.apache.arrow.stream`` takes the
table as an Arrow IPC stream (the open columnar format that JavaScript, Java and Go
callers can write) and the options as query parameters, as for CSV. Numeric columns
(integers or floats) become float64 arrays without passing through Python numbers;
nulls are missing values. Problems point into the equivalent table layout
(``/table/<column>``). pyarrow is an optional dependency (``pip install linfer[arrow]``);
without it the service answers 415.
"""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from .arrays import invalid
from .problems import ApiProblem, FieldError, pointer
from .query import options_from_query

__all__ = ["ARROW_MEDIA_TYPE", "table_body_from_arrow"]

ARROW_MEDIA_TYPE = "application/vnd.apache.arrow.stream"


def _pyarrow():
    try:
        import pyarrow
        import pyarrow.ipc  # noqa: F401
    except ImportError:
        raise ApiProblem(415, "Unsupported Media Type", "this server cannot read Arrow "
                         "streams (pyarrow is not installed: pip install linfer[arrow]); "
                         "send JSON or CSV", "unsupported_media_type") from None
    return pyarrow


def table_body_from_arrow(raw: bytes, query: Mapping[str, Any]) -> dict[str, Any]:
    """A /v1/fit body in the ``table`` layout from an Arrow IPC stream and the query.

    Raises
    ------
    ApiProblem
        400 for bytes that are not an Arrow IPC stream; 422 for a repeated column name,
        a column of a type other than integer or floating point, or a bad query
        parameter; 415 without pyarrow.
    """
    pa = _pyarrow()
    options = options_from_query(query)
    try:
        table = pa.ipc.open_stream(pa.py_buffer(raw)).read_all()
    except (pa.ArrowInvalid, pa.ArrowException, OSError) as err:
        raise ApiProblem(400, "Malformed Arrow stream", f"the body is not an Arrow IPC "
                         f"stream: {err}", "malformed_arrow") from None
    names = table.column_names
    seen: set[str] = set()
    for name in names:
        if name in seen:
            raise invalid([FieldError(pointer("table", name), f"the stream has two columns "
                                      f"named {name!r}")])
        seen.add(name)
    if "predictor_columns" in options:
        wanted = set(options["predictor_columns"]) | {options.get("response_column")}
        if isinstance(options.get("weights"), str):
            wanted.add(options["weights"])
        names = [n for n in names if n in wanted]
    columns: dict[str, np.ndarray] = {}
    for name in names:
        column = table.column(name)
        kind = column.type
        if not (pa.types.is_integer(kind) or pa.types.is_floating(kind)):
            raise invalid([FieldError(pointer("table", name), f"column {name!r} has Arrow "
                                      f"type {kind}; send numbers (integer or floating "
                                      "point)")])
        as_float = column.cast(pa.float64())
        values = as_float.to_numpy(zero_copy_only=False)
        if as_float.null_count:
            values = np.where(np.asarray(as_float.is_null()), np.nan, values)
        columns[name] = np.ascontiguousarray(values, dtype=np.float64)
    return {"table": columns, **options}
