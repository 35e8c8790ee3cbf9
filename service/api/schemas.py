"""marshmallow schemas for the request envelopes (everything but the bulk numbers).

Unknown fields are rejected. Single-field rules live on the fields; the rules that
tie fields together live in one schema-level validator that names the field it
blames. Bulk numbers (``design_matrix``, ``response``, table columns, weights) pass
through as raw JSON and are checked by numpy in :mod:`service.api.arrays`.
"""

from __future__ import annotations

import functools
import math
from typing import Any

from marshmallow import RAISE, Schema, ValidationError, fields, missing, validate, validates_schema

from ..stats.covariance import KINDS as COVARIANCE_KINDS
from ..stats.inference import SIMULTANEOUS
from ..stats.predict import KINDS as PREDICTION_KINDS
from ..stats.terms import CategoricalTerm, ColumnTerm, PowerTerm, ProductTerm, Term
from .problems import FieldError, pointer

__all__ = ["FitRequestSchema", "PredictRequestSchema", "TestRequestSchema", "flatten_errors",
           "load_envelope"]


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


class Number(fields.Field):
    """A finite JSON number (not a boolean, not a string)."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ValidationError("must be a number")
        value = float(value)
        if not math.isfinite(value):
            raise ValidationError("must be a finite number")
        return value


class NullableNumber(Number):
    """A finite JSON number or null (a figure the service itself reports as undefined)."""

    def __init__(self, **kwargs: Any):
        super().__init__(allow_none=True, **kwargs)


class Count(fields.Field):
    """A non-negative JSON integer."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> int:
        if isinstance(value, bool) or not isinstance(value, int) or value < 0:
            raise ValidationError("must be a non-negative integer")
        return value


class TermField(fields.Field):
    """A model term: a column name, a power, a product or a categorical column."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> Term:
        if isinstance(value, str) and value:
            return ColumnTerm(value)
        if not isinstance(value, dict):
            raise ValidationError("must be a column name, or an object with column and "
                                  "power, product, or categorical")
        keys = set(value)
        if keys == {"column", "power"}:
            power = value["power"]
            if isinstance(power, bool) or not isinstance(power, int) or not 2 <= power <= 20:
                raise ValidationError("power must be a whole number from 2 to 20")
            if not isinstance(value["column"], str) or not value["column"]:
                raise ValidationError("column must be a column name")
            return PowerTerm(value["column"], power)
        if keys == {"product"}:
            cols = value["product"]
            if (not isinstance(cols, list) or len(cols) < 2
                    or not all(isinstance(c, str) and c for c in cols)):
                raise ValidationError("product must list two or more column names")
            if len(set(cols)) != len(cols):
                raise ValidationError("product repeats a column; use a power for that")
            return ProductTerm(tuple(cols))
        if keys in ({"categorical"}, {"categorical", "reference"}):
            col = value["categorical"]
            if not isinstance(col, str) or not col:
                raise ValidationError("categorical must be a column name")
            ref = value.get("reference")
            if isinstance(ref, bool) or not (ref is None or isinstance(ref, (str, int, float))):
                raise ValidationError("reference must be a level of the column")
            return CategoricalTerm(col, ref)
        raise ValidationError("a term object is {\"column\", \"power\"}, {\"product\"} or "
                              "{\"categorical\"} with an optional \"reference\"; got keys "
                              + ", ".join(sorted(map(str, keys))))


class RestrictionSchema(Schema):
    class Meta:
        unknown = RAISE

    coefficients = fields.Dict(keys=Name(), values=Number(), required=True,
                               validate=validate.Length(min=1))
    equals = Number(load_default=0.0)


class HypothesisSchema(Schema):
    class Meta:
        unknown = RAISE

    label = fields.String(validate=validate.Length(max=200), allow_none=True,
                          load_default=None)
    restrictions = fields.List(fields.Nested(RestrictionSchema), required=True,
                               validate=validate.Length(min=1))


class RelationTermSchema(Schema):
    class Meta:
        unknown = RAISE

    column = Name(required=True)
    multiplier = Number(required=True)


class AliasSchema(Schema):
    class Meta:
        unknown = RAISE

    column = Name(required=True)
    relation = fields.List(fields.Nested(RelationTermSchema), required=True)
    description = fields.String()


class ModelSchema(Schema):
    """The compact model summary that /v1/fit returns with ``return_model: true``."""

    class Meta:
        unknown = RAISE

    version = fields.Integer(required=True, strict=True, validate=validate.Equal(1))
    names = fields.List(Name(), required=True, validate=validate.Length(min=1))
    intercept = StrictBoolean(required=True)
    estimates = fields.Raw(required=True)
    covariance = fields.Raw(required=True)
    covariance_kind = fields.String(required=True, validate=validate.OneOf(COVARIANCE_KINDS))
    residual_variance = NullableNumber(required=True)
    residual_df = Count(required=True)
    n_observations = Count(required=True)
    aliased = fields.List(fields.Nested(AliasSchema), load_default=list)
    covariance_root = fields.Raw(allow_none=True, load_default=None)


class SummarySchema(Schema):
    """A triangular or cross-products summary of the data, instead of rows."""

    class Meta:
        unknown = RAISE

    kind = fields.String(required=True,
                         validate=validate.OneOf(["triangular", "cross_products"]))
    n_observations = Count(required=True)
    column_names = fields.List(Name(), required=True, validate=validate.Length(min=1))
    r_factor = fields.Raw()
    xtx = fields.Raw()
    xty = fields.Raw()
    yty = Number()

    @validates_schema
    def _members(self, data: dict[str, Any], **kwargs: Any) -> None:
        wanted = ({"r_factor"} if data.get("kind") == "triangular"
                  else {"xtx", "xty", "yty"})
        other = ({"xtx", "xty", "yty"} if data.get("kind") == "triangular"
                 else {"r_factor"})
        errors: dict[str, list[str]] = {}
        absent = [f"{name} is required with kind {data.get('kind')}"
                  for name in sorted(wanted) if name not in data]
        for name in sorted(other & set(data)):
            errors[name] = [f"does not belong to kind {data.get('kind')}"]
        if absent:
            errors["_schema"] = absent
        if errors:
            raise ValidationError(errors)


class _Layout(Schema):
    """The data fields shared by every endpoint that can take rows."""

    class Meta:
        unknown = RAISE

    design_matrix = fields.Raw()
    response = fields.Raw()
    column_names = fields.List(Name())
    table = fields.Dict(keys=fields.String(validate=validate.Length(min=1, max=200)),
                        values=fields.Raw())
    response_column = Name()
    predictor_columns = fields.List(Name())
    terms = fields.List(TermField(), validate=validate.Length(min=1))
    intercept = StrictBoolean(load_default=True)
    levels = fields.List(Level(), validate=validate.Length(min=1), load_default=lambda: [0.95])
    weights = fields.Raw()
    missing = fields.String(validate=validate.OneOf(["reject", "drop_rows"]),
                            load_default="reject")
    rank_deficiency = fields.String(validate=validate.OneOf(["reject", "drop_aliased"]),
                                    load_default="reject")
    covariance = fields.String(validate=validate.OneOf(COVARIANCE_KINDS),
                               load_default="classical")
    summary = fields.Nested(SummarySchema)

    model_allowed = False

    @validates_schema(pass_original=True)
    def _one_layout(self, data: dict[str, Any], original: Any, **kwargs: Any) -> None:
        matrix = "design_matrix" in data or "response" in data
        table = "table" in data
        model = "model" in data
        if "summary" in data and self.model_allowed:
            raise ValidationError({"summary": [
                "is for /v1/fit: fit the summary there with return_model set to true, and "
                "send the model it returns here as model"]})
        if "summary" in data:
            clash = [name for name in ("design_matrix", "response", "table", "column_names",
                                       "response_column", "predictor_columns", "terms",
                                       "weights", "missing", "intercept", "model")
                     if isinstance(original, dict) and name in original]
            if clash:
                raise ValidationError({name: ["does not go with summary: the summary "
                                              "replaces the rows (its column_names say "
                                              "whether there is an intercept)"]
                                       for name in clash})
            return
        if model:
            clash = [name for name in ("design_matrix", "response", "table", "column_names",
                                       "response_column", "predictor_columns", "terms", "weights",
                                       "intercept", "missing", "rank_deficiency", "covariance")
                     if isinstance(original, dict) and name in original]
            if clash:
                raise ValidationError({name: ["does not go with model: the model summary "
                                              "replaces the data"] for name in clash})
            return
        if matrix and table:
            raise ValidationError("send either design_matrix and response, or table, not both",
                                  field_name="table")
        if not matrix and not table:
            what = ("a model summary (model), or the data as design_matrix and response, "
                    "or as table with response_column"
                    if self.model_allowed else
                    "the data as design_matrix and response, or as table with "
                    "response_column, or a summary of them")
            raise ValidationError(f"send {what}", field_name="_schema")
        # A missing member cannot be pointed at: its error points at the object
        # that lacks it ("" is the whole document) and names it.
        errors: dict[str, list[str]] = {}
        absent: list[str] = []
        if matrix:
            for name in ("design_matrix", "response"):
                if name not in data:
                    absent.append(f"{name} is required with the design_matrix layout")
            for name in ("response_column", "predictor_columns", "terms"):
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
            if "terms" in data and "predictor_columns" in data:
                errors["terms"] = ["send terms or predictor_columns, not both"]
        if absent:
            errors["_schema"] = absent
        if errors:
            raise ValidationError(errors)


class FitRequestSchema(_Layout):
    """POST /v1/fit."""

    simultaneous = fields.String(validate=validate.OneOf(SIMULTANEOUS), allow_none=True,
                                 load_default=None)
    hypotheses = fields.List(fields.Nested(HypothesisSchema), load_default=list)
    include = fields.List(fields.String(validate=validate.OneOf(["residuals", "influence"])),
                          load_default=list)
    return_model = StrictBoolean(load_default=False)


class PredictRequestSchema(_Layout):
    """POST /v1/predict: a model summary or the data, and the new rows."""

    model_allowed = True
    model = fields.Nested(ModelSchema)
    new_rows = fields.Raw()
    new_table = fields.Dict(keys=Name(), values=fields.Raw())
    new_weights = fields.Raw()
    kind = fields.String(validate=validate.OneOf(PREDICTION_KINDS), load_default="mean")

    @validates_schema
    def _new_data(self, data: dict[str, Any], **kwargs: Any) -> None:
        if ("new_rows" in data) == ("new_table" in data):
            raise ValidationError("send the new rows as exactly one of new_rows or new_table",
                                  field_name="_schema")
        if "new_weights" in data and data.get("kind") != "observation":
            raise ValidationError("weights of new rows matter only for kind observation",
                                  field_name="new_weights")


class TestRequestSchema(_Layout):
    """POST /v1/test: a model summary or the data, and the hypotheses."""

    model_allowed = True
    model = fields.Nested(ModelSchema)
    hypotheses = fields.List(fields.Nested(HypothesisSchema), required=True,
                             validate=validate.Length(min=1))


def load_envelope(schema: Schema, body: dict[str, Any]) -> dict[str, Any]:
    """``schema.load(body)``, walking only the fields the body holds.

    A request names a few of the envelope's many fields; marshmallow walks every
    declared one. The load runs on a copy of ``schema`` narrowed (``only``) to the fields
    present and the required ones, and the defaults of the absent fields are filled in
    afterwards: the same data and the same errors (the schema-level validators read no
    defaulted field), at a fraction of the work.
    """
    narrow, values, factories = _narrowed(schema, tuple(body))
    data = narrow.load(body)
    data.update(values)
    for name, factory in factories:
        data[name] = factory()
    return data


@functools.lru_cache(maxsize=256)
def _narrowed(schema: Schema, keys: tuple[str, ...]
              ) -> tuple[Schema, dict[str, Any], tuple[tuple[str, Any], ...]]:
    """For bodies with the members ``keys`` (in their order): the copy of ``schema``
    that walks the fields present and the required ones, the defaults of the absent
    fields that are plain values, and (name, factory) for those made afresh per load."""
    present = set(keys)
    walked = tuple(name for name, f in schema.load_fields.items()
                   if name in present or f.required)
    absent = [(name, f.load_default) for name, f in schema.load_fields.items()
              if name not in walked and f.load_default is not missing]
    values = {name: default for name, default in absent if not callable(default)}
    factories = tuple((name, default) for name, default in absent if callable(default))
    return type(schema)(only=walked), values, factories


def flatten_errors(messages: Any, prefix: tuple[str | int, ...] = ()) -> list[FieldError]:
    """marshmallow's nested error messages as a flat list of pointer errors."""
    out: list[FieldError] = []
    if isinstance(messages, dict):
        for key, value in messages.items():
            if key == "_schema":
                out.extend(flatten_errors(value, prefix))
            elif isinstance(value, dict) and set(value) <= {"key", "value"}:
                # A key cannot be pointed at (its object is); a value can.
                out.extend(flatten_errors(value.get("key", []), prefix))
                out.extend(flatten_errors(value.get("value", []), prefix + (key,)))
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
                elif text == "Missing data for required field." and prefix:
                    # An absent member cannot be pointed at: point at its parent.
                    out.append(FieldError(pointer(*prefix[:-1]), f"{prefix[-1]} is required"))
                    continue
                out.append(FieldError(pointer(*prefix), text))
    else:
        out.append(FieldError(pointer(*prefix), str(messages)))
    return out
