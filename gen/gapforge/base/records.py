"""`record`: a frozen dataclass built without compiling generated methods (issue 22).

Python 3.11's `dataclass(frozen=True)` compiles six generated methods per class when its module
is imported (`__init__`, `__repr__`, `__eq__`, `__hash__`, `__setattr__`, `__delattr__`, each
an `exec` of generated source): about 1 ms a class, and a build imports some fifty of them on
every make. A `record` lets `dataclass` collect the fields only; `__eq__`, `__hash__` and
`__repr__` are the three functions below, shared by every record and reading the field names
the class stored once, and `__init__`, `__setattr__` and `__delattr__` are closures over the
class. They behave as the generated ones (Python 3.11's dataclasses.py is the reference;
tests/test_records.py runs both side by side):
- `__init__` binds positional then keyword arguments, fills defaults and fresh factory values,
  calls `__post_init__()`, and raises Python's own TypeError words;
- assigning or deleting a field raises FrozenInstanceError;
- equal only to an instance of the very same class whose compared fields (`field(compare=...)`,
  default True) are equal as one tuple; anything else gives NotImplemented;
- the hash of the tuple of the hashed fields (`field(hash=...)`, default: the compared ones);
- repr `QualifiedName(name=value!r, ...)` over the repr fields, "..." for a record that
  contains itself.
`dataclasses.fields`, `replace` and `asdict` work as for any dataclass; `__dataclass_params__`
says init, repr, eq and frozen False (nothing in gapforge reads it), and `inspect.signature`
shows `(*args, **kwargs)`. A class that needs more (its own dunder methods, a dataclass base,
`init=False`, keyword-only or InitVar fields) is refused here and keeps `@dataclass(frozen=True)`.
"""

from __future__ import annotations

import dataclasses
import inspect
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


def _missing(names: list[str]) -> str:
    """Python's own words for missing positional arguments."""
    if len(names) == 1:
        return f"missing 1 required positional argument: {names[0]}"
    listed = (" and ".join(names) if len(names) == 2
              else ", ".join(names[:-1]) + ", and " + names[-1])
    return f"missing {len(names)} required positional arguments: {listed}"


def _plain_init(cls: type, fields: tuple[dataclasses.Field[Any], ...]) -> Any:
    """`__init__` for fields that all go to it positionally or by name, without `exec`.

    As the generated one: positional arguments first, then keywords; a default value, or the
    factory's fresh value, for a field not given; `__post_init__()` last when the class has
    one; the same TypeError for too many, missing, repeated or unknown arguments."""
    names = tuple(f.name for f in fields)
    defaults = {f.name: f.default for f in fields if f.default is not dataclasses.MISSING}
    factories = {f.name: f.default_factory for f in fields
                 if f.default_factory is not dataclasses.MISSING}
    post_init = hasattr(cls, "__post_init__")
    setter = object.__setattr__
    count = len(names)
    required = count - len(defaults) - len(factories)  # defaults follow the required fields
    takes = (f"from {required + 1} to {count + 1} positional arguments" if required < count
             else f"{count + 1} positional argument{'s' if count else ''}")

    def __init__(self: Any, *args: Any, **kwargs: Any) -> None:
        given = len(args)
        if given > count:
            raise TypeError(f"{cls.__qualname__}.__init__() takes {takes} but {given + 1} "
                            f"{'was' if given == 0 else 'were'} given")
        for name in kwargs:
            if name not in names:
                raise TypeError(f"{cls.__qualname__}.__init__() got an unexpected keyword "
                                f"argument {name!r}")
            if names.index(name) < given:
                raise TypeError(f"{cls.__qualname__}.__init__() got multiple values for "
                                f"argument {name!r}")
        for name, value in zip(names, args, strict=False):
            setter(self, name, value)
        missing = []
        for name in names[given:]:
            if name in kwargs:
                setter(self, name, kwargs[name])
            elif name in defaults:
                setter(self, name, defaults[name])
            elif name in factories:
                setter(self, name, factories[name]())
            else:
                missing.append(repr(name))
        if missing:
            raise TypeError(f"{cls.__qualname__}.__init__() {_missing(missing)}")
        if post_init:
            self.__post_init__()

    return __init__


def _frozen_guards(cls: type, names: tuple[str, ...]) -> tuple[Any, Any]:
    """`__setattr__` and `__delattr__` as dataclass(frozen=True) makes them, without `exec`."""

    def __setattr__(self: Any, name: str, value: Any) -> None:
        if type(self) is cls or name in names:
            raise dataclasses.FrozenInstanceError(f"cannot assign to field {name!r}")
        super(cls, self).__setattr__(name, value)  # type: ignore[arg-type]

    def __delattr__(self: Any, name: str) -> None:
        if type(self) is cls or name in names:
            raise dataclasses.FrozenInstanceError(f"cannot delete field {name!r}")
        super(cls, self).__delattr__(name)  # type: ignore[arg-type]

    return __setattr__, __delattr__


@dataclass_transform(frozen_default=True, field_specifiers=(dataclasses.field,))
def record(cls: type[T]) -> type[T]:
    """`@dataclass(frozen=True)`, with the shared equality, hash and repr (see the module)."""
    for name in ("__eq__", "__hash__", "__repr__", "__init__", "__setattr__", "__delattr__"):
        if name in cls.__dict__:
            raise TypeError(f"{cls.__qualname__} defines {name}: use @dataclass(frozen=True)")
    if any(dataclasses.is_dataclass(base) for base in cls.__mro__[1:]):
        raise TypeError(f"{cls.__qualname__}: a record derives from no dataclass")
    if not cls.__doc__:  # dataclass would call inspect.signature for one: the class's fields
        cls.__doc__ = f"{cls.__name__}({', '.join(inspect.get_annotations(cls))})"
    made = dataclasses.dataclass(init=False, repr=False, eq=False)(cls)
    fields = dataclasses.fields(cast(Any, made))
    pseudo = cast(Any, made).__dataclass_fields__.values()
    if any(repr(getattr(f, "_field_type", None)) == "_FIELD_INITVAR" for f in pseudo):
        # review rev3b: an InitVar was accepted here and its class failed at construction
        raise TypeError(f"{cls.__qualname__}: a record has no InitVar pseudo-fields")
    if any(not f.init or f.kw_only for f in fields):
        raise TypeError(f"{cls.__qualname__}: a record's fields are all plain __init__ "
                        "arguments (no init=False, no keyword-only)")
    names = tuple(f.name for f in fields)
    setattr_, delattr_ = _frozen_guards(made, names)
    shared = {
        "__record_compare__": tuple(f.name for f in fields if f.compare),
        "__record_hash__": tuple(f.name for f in fields
                                 if (f.compare if f.hash is None else f.hash)),
        "__record_repr__": tuple(f.name for f in fields if f.repr),
        "__init__": _plain_init(made, fields),
        "__setattr__": setattr_,
        "__delattr__": delattr_,
        "__eq__": _eq,
        "__hash__": _hash,
        "__repr__": _repr,
    }
    for name, value in shared.items():
        if callable(value) and name in ("__init__", "__setattr__", "__delattr__"):
            value.__qualname__ = f"{cls.__qualname__}.{name}"
        setattr(made, name, value)
    return made
