"""marshmallow schemas for the request envelopes (everything but the bulk numbers).

Unknown fields are rejected. Single-field rules live on the fields; the rules that
tie fields together live in one schema-level validator that names the field it
blames. Bulk numbers (``design_matrix``, ``response``, table columns, weights) pass
through as raw JSON and are checked by numpy in :mod:`service.api.arrays`.
"""

from __future__ import annotations

import math
from typing import Any

from marshmallow import RAISE, Schema, ValidationError, fields, validate, validates_schema

from .problems import FieldError, pointer

__all__ = ["FitRequestSchema", "flatten_errors"]


class StrictBoolean(fields.Field):
    """A JSON ``true`` or ``false``, nothing else (no strings, no 0 and 1)."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> bool:
        if not isinstance(value, bool):
            raise ValidationError("must be true or false")
        return value


class Level(fields.Field):
    """A confidence level: a JSON number strictly between 0 and 1."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ValidationError("must be a number between 0 and 1")
        value = float(value)
        if not (0.0 < value < 1.0) or not math.isfinite(value):
            raise ValidationError(f"must be strictly between 0 and 1, not {value:g}")
        return value


class Name(fields.String):
    """A non-empty column name."""

    def __init__(self, **kwargs: Any):
        super().__init__(validate=validate.Length(min=1, max=200), **kwargs)


class FitRequestSchema(Schema):
    class Meta:
        unknown = RAISE

    design_matrix = fields.Raw()
    response = fields.Raw()
    column_names = fields.List(Name())
    table = fields.Dict(keys=fields.String(validate=validate.Length(min=1, max=200)),
                        values=fields.Raw())
    response_column = Name()
    predictor_columns = fields.List(Name())
    intercept = StrictBoolean(load_default=True)
    levels = fields.List(Level(), validate=validate.Length(min=1), load_default=lambda: [0.95])
    weights = fields.Raw()
    missing = fields.String(validate=validate.OneOf(["reject", "drop_rows"]),
                            load_default="reject")
    rank_deficiency = fields.String(validate=validate.OneOf(["reject", "drop_aliased"]),
                                    load_default="reject")

    @validates_schema
    def _one_layout(self, data: dict[str, Any], **kwargs: Any) -> None:
        matrix = "design_matrix" in data or "response" in data
        table = "table" in data
        if matrix and table:
            raise ValidationError("send either design_matrix and response, or table, not both",
                                  field_name="table")
        if not matrix and not table:
            raise ValidationError("send the data as design_matrix and response, or as table "
                                  "with response_column", field_name="_schema")
        # A missing member cannot be pointed at: its error points at the object
        # that lacks it ("" is the whole document) and names it.
        errors: dict[str, list[str]] = {}
        absent: list[str] = []
        if matrix:
            for name in ("design_matrix", "response"):
                if name not in data:
                    absent.append(f"{name} is required with the design_matrix layout")
            for name in ("response_column", "predictor_columns"):
                if name in data:
                    errors[name] = ["belongs to the table layout; with design_matrix, "
                                    "use column_names"]
            if isinstance(data.get("weights"), str):
                errors["weights"] = ["a column name needs the table layout; send a list"]
        else:
            if "response_column" not in data:
                absent.append("response_column is required with the table layout")
            if "column_names" in data:
                errors["column_names"] = ["belongs to the design_matrix layout; with table, "
                                          "use predictor_columns"]
        if absent:
            errors["_schema"] = absent
        if errors:
            raise ValidationError(errors)


def flatten_errors(messages: Any, prefix: tuple[str | int, ...] = ()) -> list[FieldError]:
    """marshmallow's nested error messages as a flat list of pointer errors."""
    out: list[FieldError] = []
    if isinstance(messages, dict):
        for key, value in messages.items():
            if key == "_schema":
                out.extend(flatten_errors(value, prefix))
            elif isinstance(value, dict) and set(value) <= {"key", "value"}:
                out.extend(flatten_errors(value.get("key", []), prefix))
                out.extend(flatten_errors(value.get("value", []), prefix))
            else:
                out.extend(flatten_errors(value, prefix + (key,)))
    elif isinstance(messages, list):
        for m in messages:
            if isinstance(m, (dict, list)):
                out.extend(flatten_errors(m, prefix))
            else:
                text = str(m)
                if text == "Unknown field.":
                    text = "is not a field of this request"
                out.append(FieldError(pointer(*prefix), text))
    else:
        out.append(FieldError(pointer(*prefix), str(messages)))
    return out
