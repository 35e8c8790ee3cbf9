"""The envelope of the most common /v1/fit body (design_matrix and response, nothing
else) skips marshmallow (service/api/schemas.py, load_envelope): it must give what
the full load gives, data and errors, nulls and extra fields included."""

from __future__ import annotations

import pytest
from marshmallow import ValidationError

from service.api import schemas
from service.api.schemas import flatten_errors, load_envelope

MATRIX = [[1.0, 2.0], [3.0, 5.0], [4.0, 1.0]]
RESPONSE = [1.0, 2.0, 4.0]


def outcome(load):
    try:
        return "data", load()
    except ValidationError as err:
        return "errors", [(e.pointer, e.message) for e in flatten_errors(err.messages)]


@pytest.mark.parametrize("body", [
    {"design_matrix": MATRIX, "response": RESPONSE},
    {"response": RESPONSE, "design_matrix": MATRIX},
    {"design_matrix": None, "response": RESPONSE},
    {"design_matrix": MATRIX, "response": None},
    {"design_matrix": "x", "response": 3},
    {"design_matrix": MATRIX, "response": RESPONSE, "bogus": 1},
    {"design_matrix": MATRIX, "response": RESPONSE, "intercept": False},
])
@pytest.mark.parametrize("schema", [schemas.FitRequestSchema(), schemas.PredictRequestSchema(),
                                    schemas.TestRequestSchema()],
                         ids=lambda s: type(s).__name__)
def test_bare_fit_body_loads_as_marshmallow_does(schema, body):
    fast = outcome(lambda: load_envelope(schema, body))
    assert fast == outcome(lambda: schema.load(body))
    if fast[0] == "data":
        assert fast[1]["design_matrix"] is body["design_matrix"]
