"""Options of POST /v1/fit from query parameters, for bodies that are tables (CSV, Arrow).

The body is then the table; everything else the JSON envelope would carry comes as
query parameters, checked here for form and then by the /v1/fit schema as usual.
"""

from __future__ import annotations

import re
from typing import Any, Mapping

from ..settings import Settings
from .arrays import invalid
from .limits import check_shape
from .problems import FieldError, pointer

__all__ = ["QUERY_PARAMETERS", "NUMBER", "options_from_query", "current_settings",
           "check_table_width", "used_columns"]

# A decimal number with optional spaces or tabs around it.
NUMBER = re.compile(r"[ \t]*[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?[ \t]*")
_QUOTED_MAX = 40
_LISTED_MAX = 20  # column names listed in a message (a header may hold a million)


def _quote(text: str) -> str:
    return repr(text if len(text) <= _QUOTED_MAX else text[:_QUOTED_MAX] + "...")


#: The query parameters of ``POST /v1/fit`` with a table body, and the kind of each.
QUERY_PARAMETERS: dict[str, str] = {
    "response_column": "name",
    "predictor_columns": "names",
    "weights": "name",
    "levels": "numbers",
    "intercept": "boolean",
    "missing": "word",
    "rank_deficiency": "word",
    "covariance": "word",
    "simultaneous": "word_or_none",
    "include": "words",
    "return_model": "boolean",
}
_LISTS = {"names", "numbers", "words"}

def _values(query: Mapping[str, Any], key: str) -> list[str]:
    if hasattr(query, "getlist"):  # a werkzeug MultiDict (request.args): every value
        return [str(v) for v in query.getlist(key)]
    value = query[key]
    if isinstance(value, (list, tuple)):
        return [str(v) for v in value]
    return [str(value)]


def _split(values: list[str]) -> list[str]:
    return [part.strip() for v in values for part in v.split(",")]


def options_from_query(query: Mapping[str, Any]) -> dict[str, Any]:
    """The body's options from the query parameters; one 422 with every fault."""
    errors: list[FieldError] = []
    options: dict[str, Any] = {}
    for key in query:
        kind = QUERY_PARAMETERS.get(key)
        if kind is None:
            errors.append(FieldError("", f"unknown query parameter {key!r}; the parameters "
                                     f"are {', '.join(QUERY_PARAMETERS)}"))
            continue
        values = _values(query, key)
        if kind not in _LISTS and len(values) > 1:
            errors.append(FieldError(pointer(key), f"query parameter {key} is given "
                                     f"{len(values)} times; give it once"))
            continue
        if kind in _LISTS:
            parts = _split(values)
            empty = [i for i, p in enumerate(parts) if not p]
            if empty:
                errors.append(FieldError(pointer(key, empty[0]), f"query parameter {key} "
                                         f"has an empty item at position {empty[0]} "
                                         "(items are separated by commas)"))
                continue
            if kind == "numbers":
                bad = [i for i, p in enumerate(parts) if not NUMBER.fullmatch(p)]
                for i in bad:
                    errors.append(FieldError(pointer(key, i), f"query parameter {key}: "
                                             f"{_quote(parts[i])} is not a number"))
                if bad:
                    continue
                options[key] = [float(p) for p in parts]
            else:
                options[key] = parts
            continue
        value = values[0].strip()
        if kind == "boolean":
            if value.lower() not in ("true", "false"):
                errors.append(FieldError(pointer(key), f"query parameter {key} must be true "
                                         f"or false, not {_quote(value)}"))
                continue
            options[key] = value.lower() == "true"
        elif kind == "word_or_none":
            options[key] = None if value.lower() in ("", "none", "null") else value
        else:
            if not value:
                errors.append(FieldError(pointer(key), f"query parameter {key} is empty"))
                continue
            options[key] = value
    if "response_column" not in query:
        errors.insert(0, FieldError("", "query parameter response_column is required: it "
                                    "names the column that holds the response"))
    if errors:
        raise invalid(errors, f"{len(errors)} query parameter problem(s): "
                      + "; ".join(e.message for e in errors[:3]))
    return options


def current_settings() -> Settings:
    """The app's settings inside a request, else the defaults (the readers' own tests)."""
    from flask import current_app, has_app_context

    if has_app_context():
        found = current_app.config.get("LINFER_SETTINGS")
        if isinstance(found, Settings):
            return found
    return Settings()


def check_table_width(names: list[str], options: dict[str, Any]) -> None:
    """Refuse a table whose every column would be a predictor, and too many of them.

    Without ``predictor_columns`` every column but the response and the weights is a
    predictor, so the design's width is known from the header or the schema alone:
    a table wider than LINFER_MAX_COLUMNS is answered (as the fit would answer it)
    before its rows are read, so that a header of a million names costs no parse.
    """
    if "predictor_columns" in options:
        return
    weights = options.get("weights")
    k = len(names) - 1 - int(weights in names) + int(options.get("intercept", True))
    check_shape("/table", current_settings(), columns=k)


def _listed(names: list[str]) -> str:
    if len(names) <= _LISTED_MAX:
        return ", ".join(names)
    return ", ".join(names[:_LISTED_MAX]) + f", ... ({len(names)} columns)"


def used_columns(names: list[str], options: dict[str, Any], source: str,
                 hint: str = "") -> list[int]:
    """Positions of the table's columns that the fit uses; 422 for names it lacks.

    ``source`` names the table in the messages ("the CSV header"); ``hint`` is added
    to the message about the response column.
    """
    position = {name: j for j, name in enumerate(names)}
    columns = _listed(names)
    errors = []
    if options["response_column"] not in position:
        errors.append(FieldError("/response_column", f"{options['response_column']!r} names "
                                 f"no column of {source} (columns: {columns}){hint}"))
    for i, name in enumerate(options.get("predictor_columns", [])):
        if name not in position:
            errors.append(FieldError(pointer("predictor_columns", i), f"{name!r} names no "
                                     f"column of {source} (columns: {columns})"))
    weights = options.get("weights")
    if weights is not None and weights not in position:
        errors.append(FieldError("/weights", f"{weights!r} names no column of {source} "
                                 f"(columns: {columns})"))
    if errors:
        raise invalid(errors)
    if "predictor_columns" not in options:
        return list(range(len(names)))
    wanted = {options["response_column"], *options["predictor_columns"]}
    if weights is not None:
        wanted.add(weights)
    return [j for j, name in enumerate(names) if name in wanted]
