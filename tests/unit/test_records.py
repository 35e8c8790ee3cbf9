"""service.stats.records.record: a frozen dataclass whose __init__ sets its fields at once.

Every behaviour is checked against the same class made by @dataclass(frozen=True)
(the Python standard library's dataclasses), which record must match.
"""

from __future__ import annotations

import copy
import dataclasses
import inspect
import pickle

import pytest

from service.stats.records import record


@record
class Point:
    """A record with a default."""

    x: float
    y: float
    label: str | None = None


@dataclasses.dataclass(frozen=True)
class Reference:
    x: float
    y: float
    label: str | None = None


def test_signature_and_defaults_match_the_dataclass():
    assert str(inspect.signature(Point)) == str(inspect.signature(Reference))
    assert Point(1.0, 2.0).label is None
    assert Point(1.0, y=2.0, label="a") == Point(x=1.0, y=2.0, label="a")


def test_the_fields_are_the_dataclass_fields_and_the_instance_dictionary():
    p = Point(1.0, 2.0, "a")
    assert [f.name for f in dataclasses.fields(p)] == ["x", "y", "label"]
    assert vars(p) == {"x": 1.0, "y": 2.0, "label": "a"}
    assert dataclasses.asdict(p) == dataclasses.asdict(Reference(1.0, 2.0, "a"))


def test_equality_repr_and_hash_are_the_dataclass_ones():
    p = Point(1.0, 2.0)
    assert repr(p) == repr(Reference(1.0, 2.0)).replace("Reference", "Point")
    assert p == Point(1.0, 2.0) and p != Point(1.0, 3.0)
    assert hash(p) == hash(Point(1.0, 2.0))


def test_assignment_is_refused():
    p = Point(1.0, 2.0)
    with pytest.raises(dataclasses.FrozenInstanceError):
        p.x = 3.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        p.other = 3.0


def test_replace_copy_and_pickle_keep_the_values():
    p = Point(1.0, 2.0, "a")
    assert dataclasses.replace(p, y=5.0) == Point(1.0, 5.0, "a")
    assert copy.copy(p) == p and copy.deepcopy(p) == p
    assert pickle.loads(pickle.dumps(p)) == p


@pytest.mark.parametrize("call", [
    lambda cls: cls(1.0),
    lambda cls: cls(1.0, 2.0, "a", "b"),
    lambda cls: cls(1.0, 2.0, x=3.0),
    lambda cls: cls(1.0, 2.0, colour="red"),
])
def test_wrong_arguments_are_a_type_error_as_for_the_dataclass(call):
    with pytest.raises(TypeError):
        call(Reference)
    with pytest.raises(TypeError):
        call(Point)


def test_unsupported_fields_are_refused_when_the_class_is_made():
    with pytest.raises(TypeError, match="plain fields only"):
        @record
        class WithFactory:
            items: list = dataclasses.field(default_factory=list)

    with pytest.raises(TypeError, match="__post_init__"):
        @record
        class WithPostInit:
            x: float

            def __post_init__(self):
                pass
