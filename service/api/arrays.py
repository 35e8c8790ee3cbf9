"""Bulk numbers from decoded JSON to float arrays, checked by numpy in one pass.

A list of JSON numbers becomes a float64 array through one ``numpy.array`` call;
shape, type and finiteness are then whole-array checks. Only when that pass fails
does the code walk the values, to point at the offending ones. ``null`` is a missing
value (NaN here); whether it is allowed is the caller's decision.
"""

from __future__ import annotations

import math

import numpy as np

from .problems import ApiProblem, FieldError, pointer

__all__ = ["as_vector", "as_matrix", "invalid", "check_unique", "surely_finite", "MAX_POINTED"]

MAX_POINTED = 10
_NUMBER_TYPES = (int, float)


def invalid(errors: list[FieldError], detail: str | None = None) -> ApiProblem:
    return ApiProblem(422, "Invalid request", detail or errors[0].message, "invalid_request",
                      errors[:MAX_POINTED])


def check_unique(values: list, where: tuple[str | int, ...], what: str = "") -> dict:
    """Each value's position; a 422 pointing at the first value that repeats an earlier one.

    ``what`` names the kind of value in the message ("repeats level 0.9 ...").
    """
    seen: dict = {}
    for i, value in enumerate(values):
        if value in seen:
            shown = f"{value:g}" if isinstance(value, float) else repr(value)
            raise invalid([FieldError(pointer(*where, i), f"repeats {what}{shown} (also at "
                                      f"{pointer(*where, seen[value])})")])
        seen[value] = i
    return seen


def _object_cells(arr: np.ndarray, where: tuple[str | int, ...]) -> np.ndarray:
    """Convert an object array of numbers and None to float, pointing at anything else."""
    kinds = np.frompyfunc(lambda v: v is None or (type(v) in _NUMBER_TYPES), 1, 1)(arr)
    ok = kinds.astype(bool)
    if not ok.all():
        errors = []
        for index in zip(*np.nonzero(~ok)):
            value = arr[index]
            what = type(value).__name__ if not isinstance(value, bool) else "a boolean"
            errors.append(FieldError(pointer(*where, *map(int, index)),
                                     f"must be a number or null, not {what}"))
            if len(errors) >= MAX_POINTED:
                break
        raise invalid(errors)
    try:
        return arr.astype(float)
    except OverflowError:
        pass
    flat = arr.ravel()
    out = np.empty(flat.shape)
    for i, v in enumerate(flat):
        try:
            out[i] = np.nan if v is None else float(v)
        except OverflowError:
            out[i] = np.inf
    return out.reshape(arr.shape)


def surely_finite(arr: np.ndarray) -> bool:
    """True when every value of the float array ``arr`` is finite, from one pass: its sum
    of squares is NaN or infinite when a value is. False says only "look closer": the
    sum also overflows for values beyond about 1e154."""
    return math.isfinite(np.vdot(arr, arr))


def _finite(out: np.ndarray, where: tuple[str | int, ...]) -> np.ndarray:
    if surely_finite(out):
        return out
    bad = np.isinf(out)
    if bad.any():
        errors = [FieldError(pointer(*where, *map(int, ix)), "must be a finite number")
                  for ix in zip(*np.nonzero(bad))]
        raise invalid(errors)
    return out


def _holds_booleans(value: list, arr: np.ndarray) -> bool:
    """Whether a numeric array came from a list with ``true`` or ``false`` among its numbers.

    numpy reads a boolean among numbers as 1 or 0, so only the cells equal to 0 or 1
    can hold one: their Python values are looked at, nothing else.
    """
    size = arr.size
    if np.count_nonzero(arr) == size and np.count_nonzero(arr - 1) == size:
        return False  # no cell is 0 or 1 (x - 1 is 0 only for x equal to 1)
    flat = arr.reshape(-1)
    candidates = np.flatnonzero((flat == 0) | (flat == 1))
    if not candidates.size:
        return False
    if arr.ndim == 1:
        return any(type(value[i]) is bool for i in candidates.tolist())
    width = arr.shape[1]
    return any(type(value[i // width][i % width]) is bool for i in candidates.tolist())


def _convert(value: list, where: tuple[str | int, ...]) -> np.ndarray:
    try:
        arr = np.array(value)
    except (ValueError, OverflowError):
        arr = np.array(value, dtype=object) if _is_rectangular(value) else None
        if arr is None:
            raise _ragged(value, where) from None
    if arr.dtype.kind in "fiu" and arr.ndim <= 2 and not _holds_booleans(value, arr):
        return _finite(arr if arr.dtype.char == "d" else arr.astype(float), where)
    if arr.dtype.kind == "b":
        raise invalid([FieldError(pointer(*where), "must hold numbers, not booleans")])
    if arr.dtype.kind != "O":
        arr = np.array(value, dtype=object)
        if arr.ndim == 1 and arr.size and isinstance(arr[0], list):
            raise _ragged(value, where)
    return _finite(_object_cells(arr, where), where)


def _is_rectangular(value: object) -> bool:
    if not isinstance(value, list) or not value or not isinstance(value[0], list):
        return isinstance(value, list)
    width = len(value[0])
    return all(isinstance(r, list) and len(r) == width for r in value)


def _ragged(value: object, where: tuple[str | int, ...]) -> ApiProblem:
    if isinstance(value, list) and value and isinstance(value[0], list):
        width = len(value[0])
        for i, row in enumerate(value):
            if not isinstance(row, list):
                return invalid([FieldError(pointer(*where, i), "must be a list of numbers")])
            if len(row) != width:
                return invalid([FieldError(pointer(*where, i),
                                           f"has {len(row)} values; row 0 has {width}")])
            for j, cell in enumerate(row):
                if isinstance(cell, (list, dict)):
                    return invalid([FieldError(pointer(*where, i, j), "must be a number")])
    return invalid([FieldError(pointer(*where), "must be a flat list of numbers")])


def as_vector(value: object, where: tuple[str | int, ...]) -> np.ndarray:
    """A JSON list of numbers (or nulls) as a float array; a 422 problem otherwise.

    numpy reads ``true`` among numbers as 1.0: a list holding one takes the slower path
    that looks at every value's type, so the boolean is pointed at instead.
    """
    if isinstance(value, np.ndarray) and value.dtype == np.float64 and value.ndim == 1:
        # A column already read by a table parser (CSV, Arrow): NaN is a missing value.
        if not value.size:
            raise invalid([FieldError(pointer(*where), "must not be empty")])
        return _finite(value, where)
    if not isinstance(value, list):
        raise invalid([FieldError(pointer(*where), "must be a list of numbers")])
    if not value:
        raise invalid([FieldError(pointer(*where), "must not be empty")])
    arr = _convert(value, where)
    if arr.ndim != 1:
        raise invalid([FieldError(pointer(*where), "must be a flat list of numbers")])
    return arr


def as_matrix(value: object, where: tuple[str | int, ...]) -> np.ndarray:
    """A JSON list of rows (lists of numbers or nulls) as an (n, k) float array."""
    if not isinstance(value, list) or (value and not isinstance(value[0], list)):
        raise invalid([FieldError(pointer(*where), "must be a list of rows, each a list of numbers")])
    if not value:
        raise invalid([FieldError(pointer(*where), "must not be empty")])
    arr = _convert(value, where)
    if arr.ndim != 2:
        if arr.ndim == 1 and arr.dtype == object:
            raise _ragged(value, where)
        raise invalid([FieldError(pointer(*where), "must be a list of rows, each a list of numbers")])
    return arr
