"""Unnamed design_matrix columns: their names and pointers are made once per width, and
each request still gets a dict of its own (decode adds the intercept's pointer to it)."""

from __future__ import annotations

from service.api.decode import decode_fit
from service.settings import load

BODY = {"design_matrix": [[1.0, 2.0], [2.0, 1.5], [3.0, 4.0], [4.0, 3.0]],
        "response": [1.0, 2.0, 2.5, 4.0]}


def test_a_request_without_intercept_gets_no_intercept_pointer_from_an_earlier_one():
    settings = load()
    with_intercept = decode_fit(dict(BODY), settings).column_pointers
    without = decode_fit({**BODY, "intercept": False}, settings).column_pointers
    assert with_intercept == {"x1": "/design_matrix/0/0", "x2": "/design_matrix/0/1",
                              "intercept": "/intercept"}
    assert without == {"x1": "/design_matrix/0/0", "x2": "/design_matrix/0/1"}
    assert with_intercept is not without


def test_named_columns_point_at_their_names():
    pointers = decode_fit({**BODY, "column_names": ["a/b", "c"]}, load()).column_pointers
    assert pointers == {"a/b": "/column_names/0", "c": "/column_names/1",
                        "intercept": "/intercept"}


def test_options_without_hypotheses_are_shared_and_with_hypotheses_are_not():
    settings = load()
    first = decode_fit(dict(BODY), settings).options
    again = decode_fit({**BODY, "levels": [0.95]}, settings).options
    assert first is again
    other = decode_fit({**BODY, "levels": [0.9]}, settings).options
    assert other.levels == (0.9,) and other is not first
    tested = decode_fit({**BODY, "hypotheses": [{"restrictions": [
        {"coefficients": {"x1": 1.0}}]}]}, settings).options
    assert len(tested.hypotheses) == 1 and tested.levels == (0.95,)
