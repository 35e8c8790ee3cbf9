"""The envelope load walks only the fields a body holds (service/api/schemas.py,
load_envelope): it must give what marshmallow's full load gives, data and errors."""

from __future__ import annotations

import itertools
import random

import pytest
from marshmallow import ValidationError

from service.api import schemas
from service.api.schemas import flatten_errors, load_envelope

# Valid and invalid values for each field of the three envelopes, and unknown fields.
VALUES = {
    "design_matrix": [[[1, 2], [3, 4]], "x"],
    "response": [[1, 2]],
    "column_names": [["a", "b"], [""], "a"],
    "table": [{"a": [1], "b": [2]}, {"": [1]}],
    "response_column": ["a", 3],
    "predictor_columns": [["b"]],
    "terms": [["b"], [], [{"x": 1}]],
    "intercept": [False, 1],
    "levels": [[0.9], [], [1.5]],
    "weights": [[1, 1], "b"],
    "missing": ["drop_rows", "x"],
    "rank_deficiency": ["drop_aliased", 1],
    "covariance": ["hc1", "bad"],
    "summary": [{"kind": "triangular", "n_observations": 5, "column_names": ["a"],
                 "r_factor": [[1]]}, {"kind": "cross_products"}],
    "simultaneous": ["bonferroni", "x"],
    "hypotheses": [[{"restrictions": [{"coefficients": {"a": 1}}]}], [{"label": 3}]],
    "include": [["residuals"], ["x"]],
    "return_model": [True, 0],
    "model": [{"version": 1}],
    "new_rows": [[[1]]],
    "new_table": [{"a": [1]}],
    "new_weights": [[1]],
    "kind": ["observation", "zz"],
    "bogus": [1],
}


def outcome(load):
    try:
        return "data", load()
    except ValidationError as err:
        return "errors", [(e.pointer, e.message) for e in flatten_errors(err.messages)]


def bodies(seed: int = 20240601, count: int = 400):
    rng = random.Random(seed)
    yield {}
    for _ in range(count):
        names = rng.sample(sorted(VALUES), rng.randint(1, 5))
        yield {name: rng.choice(VALUES[name]) for name in names}
    for a, b in itertools.combinations(["design_matrix", "response", "table", "model",
                                        "summary", "hypotheses"], 2):
        yield {a: VALUES[a][0], b: VALUES[b][0]}


@pytest.mark.parametrize("schema", [schemas.FitRequestSchema(), schemas.PredictRequestSchema(),
                                    schemas.TestRequestSchema()],
                         ids=lambda s: type(s).__name__)
def test_narrowed_load_matches_the_full_load(schema):
    for body in bodies():
        assert outcome(lambda: load_envelope(schema, body)) == \
            outcome(lambda: schema.load(body)), body
