"""`record`: a frozen dataclass whose equality, hash and repr are shared functions (issue 22).

Python 3.11's `dataclass(frozen=True)` compiles six generated methods per class when its module
is imported (`__init__`, `__repr__`, `__eq__`, `__hash__`, `__setattr__`, `__delattr__`, each
an `exec` of generated source): about 1 ms a class, and a build imports some fifty of them on
every make. A `record` lets `dataclass` generate only `__init__` and the two frozen-attribute
guards; `__eq__`, `__hash__` and `__repr__` are the three functions below, shared by every
record, each reading the field names the class stored once. They behave as the generated ones
(Python 3.11's dataclasses.py is the reference; tests/test_records.py compares them):
- equal only to an instance of the very same class whose compared fields (`field(compare=...)`,
  default True) are equal as one tuple; anything else gives NotImplemented;
- the hash of the tuple of the hashed fields (`field(hash=...)`, default: the compared ones);
- repr `QualifiedName(name=value!r, ...)` over the repr fields, "..." for a record that
  contains itself.
`dataclasses.fields`, `replace`, `asdict` and frozen-ness work as for any frozen dataclass; only
`__dataclass_params__` says eq=False and repr=False (nothing in gapforge reads it).
"""

from __future__ import annotations

import dataclasses
import reprlib
from typing import Any, TypeVar, cast, dataclass_transform

T = TypeVar("T")


def _eq(self: Any, other: Any) -> Any:
    if other.__class__ is self.__class__:
        names = self.__class__.__record_compare__
        return tuple([getattr(self, n) for n in names]) == tuple([getattr(other, n) for n in names])
    return NotImplemented


def _hash(self: Any) -> int:
    return hash(tuple([getattr(self, n) for n in self.__class__.__record_hash__]))


@reprlib.recursive_repr()
def _repr(self: Any) -> str:
    inner = ", ".join(f"{n}={getattr(self, n)!r}" for n in self.__class__.__record_repr__)
    return f"{self.__class__.__qualname__}({inner})"


@dataclass_transform(frozen_default=True, field_specifiers=(dataclasses.field,))
def record(cls: type[T]) -> type[T]:
    """`@dataclass(frozen=True)`, with the shared equality, hash and repr (see the module)."""
    for name in ("__eq__", "__hash__", "__repr__"):
        if name in cls.__dict__:
            raise TypeError(f"{cls.__qualname__} defines {name}: use @dataclass(frozen=True)")
    made = dataclasses.dataclass(frozen=True, eq=False, repr=False)(cls)
    fields = dataclasses.fields(cast(Any, made))
    shared = {
        "__record_compare__": tuple(f.name for f in fields if f.compare),
        "__record_hash__": tuple(f.name for f in fields
                                 if (f.compare if f.hash is None else f.hash)),
        "__record_repr__": tuple(f.name for f in fields if f.repr),
        "__eq__": _eq,
        "__hash__": _hash,
        "__repr__": _repr,
    }
    for name, value in shared.items():
        setattr(made, name, value)
    return made
