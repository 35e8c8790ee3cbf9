"""Frozen records built in one step: the many small result objects of a fit.

A fit of a few columns builds some fifteen frozen dataclasses (the solution, the
coefficient rows and their intervals, the statistics, the verdict, ...). The
``__init__`` that :func:`dataclasses.dataclass` writes for a frozen class sets each
field through ``object.__setattr__`` (the class's own ``__setattr__`` refuses), at
about 80 ns a field; :func:`record` gives the same class an ``__init__`` that fills
the instance dictionary in one call instead.
"""

from __future__ import annotations

import dataclasses
from typing import TypeVar

__all__ = ["record"]

T = TypeVar("T")


def record(cls: type[T]) -> type[T]:
    """``@dataclass(frozen=True)``, with an ``__init__`` that sets every field at once.

    The signature (positional or keyword, defaults included), equality, repr, hash,
    :func:`dataclasses.replace`, pickling and the refusal of assignment are the
    dataclass's own. Not supported (TypeError): default factories, ``init=False``
    fields and ``__post_init__``.
    """
    cls = dataclasses.dataclass(frozen=True)(cls)
    if hasattr(cls, "__post_init__"):
        raise TypeError(f"{cls.__name__}: record does not run __post_init__")
    namespace: dict[str, object] = {"_set": object.__setattr__}
    params = []
    for f in dataclasses.fields(cls):
        if not f.init or f.default_factory is not dataclasses.MISSING:
            raise TypeError(f"{cls.__name__}.{f.name}: record takes plain fields only")
        if f.default is dataclasses.MISSING:
            params.append(f.name)
        else:
            namespace[f"_default_{f.name}"] = f.default
            params.append(f"{f.name}=_default_{f.name}")
    names = [f.name for f in dataclasses.fields(cls)]
    entries = ", ".join(f"{name!r}: {name}" for name in names)
    source = (f"def __init__(self, {', '.join(params)}):\n"
              f"    _set(self, '__dict__', {{{entries}}})\n")
    # The source is made of this class's own field names (identifiers), never of input:
    # dataclasses writes its __init__ the same way.
    exec(source, namespace)  # noqa: S102
    init = namespace["__init__"]
    init.__qualname__ = f"{cls.__qualname__}.__init__"
    init.__annotations__ = {**{f.name: f.type for f in dataclasses.fields(cls)}, "return": None}
    cls.__init__ = init
    return cls
