"""Booleans among bulk numbers are pointed at, whatever numpy would make of them.

numpy turns ``[1.5, True]`` into ``[1.5, 1.0]`` and ``[2, True]`` into ``[2, 1]``;
service/api/arrays.py looks at the Python values of the cells equal to 0 or 1 only.
These pin that both readings are caught at the right pointer, and that 0/1 numbers
(a dummy column) are not taken for booleans.
"""

from __future__ import annotations

import pytest

from service.api.arrays import as_matrix, as_vector
from service.api.problems import ApiProblem


@pytest.mark.parametrize("values, where", [
    ([1.5, 2.5, True], "/v/2"),
    ([2, 3, False, 4], "/v/2"),  # integers: numpy makes an int array
    ([True, 0.0, 1.0], "/v/0"),
])
def test_a_boolean_in_a_vector_is_pointed_at(values, where):
    with pytest.raises(ApiProblem) as caught:
        as_vector(values, ("v",))
    assert caught.value.status == 422
    assert [e.pointer for e in caught.value.errors] == [where]


def test_a_boolean_in_a_later_row_of_a_matrix_is_pointed_at():
    rows = [[1.0, 0.0, 7.5], [0.0, 1.0, 2.5], [1.0, 1, False]]
    with pytest.raises(ApiProblem) as caught:
        as_matrix(rows, ("m",))
    assert [e.pointer for e in caught.value.errors] == ["/m/2/2"]


def test_zero_one_numbers_are_numbers():
    dummy = [0, 1, 1, 0, 1.0, 0.0]
    assert as_vector(dummy, ("v",)).tolist() == [0.0, 1.0, 1.0, 0.0, 1.0, 0.0]
    rows = [[1.0, 0], [0.0, 1], [1, 1]]
    assert as_matrix(rows, ("m",)).tolist() == [[1.0, 0.0], [0.0, 1.0], [1.0, 1.0]]
