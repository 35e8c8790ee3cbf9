"""Warnings the numerical core attaches to a result: a stable code and a plain message.

Also :func:`direct_init`, which the core's frozen result records share.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

__all__ = ["Notice", "direct_init"]


def direct_init(cls: type) -> type:
    """Give a frozen dataclass an ``__init__`` that fills the instance dict directly.

    The generated ``__init__`` of a frozen dataclass sets each field through
    ``object.__setattr__`` (past the frozen ``__setattr__``), several times slower than
    a store into ``self.__dict__``; a fit builds a dozen records of up to a dozen
    fields. The replacement takes the same parameters in the same order, with the same
    defaults; equality, hashing, ``repr``, ``dataclasses.replace`` and pickling are the
    dataclass's own. Apply it above ``@dataclass(frozen=True)``, on classes without
    ``__post_init__``, default factories or fields left out of ``__init__``.
    """
    params, stores, defaults = [], [], {}
    for f in dataclasses.fields(cls):
        if not f.init or f.default_factory is not dataclasses.MISSING or f.kw_only:
            raise TypeError(f"direct_init: field {f.name!r} of {cls.__name__} is not a plain "
                            "positional field")
        if f.default is dataclasses.MISSING:
            params.append(f.name)
        else:
            defaults[f"_default_{f.name}"] = f.default
            params.append(f"{f.name}=_default_{f.name}")
        stores.append(f"    _fields_[{f.name!r}] = {f.name}")
    if hasattr(cls, "__post_init__") or "_fields_" in params:
        raise TypeError(f"direct_init: {cls.__name__} needs the dataclass __init__")
    source = (f"def __init__(self, {', '.join(params)}):\n    _fields_ = self.__dict__\n"
              + "\n".join(stores) + "\n")
    exec(source, defaults)  # noqa: S102 - the source is built from the field names above
    init = defaults["__init__"]
    init.__qualname__ = f"{cls.__qualname__}.__init__"
    init.__module__ = cls.__module__
    cls.__init__ = init
    return cls


@direct_init
@dataclass(frozen=True)
class Notice:
    """A warning. ``column`` names the design column it concerns, if any."""

    code: str
    message: str
    column: str | None = None
