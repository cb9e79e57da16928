"""Small record classes for the modules every command loads, without the `dataclasses` module.

`@dataclass` writes each class's methods as source text and compiles it while the module loads: four
to six functions a class, so 27 classes cost `benchlog analyze` about 20-30 ms of its start-up, against
about 160 ms for the whole of a 1 M edge capture's work (this 2-core machine, CPU time of the imports,
three runs). A `Slotted` subclass names its fields in `__slots__` (in order) and writes its own
`__init__`; the class gets what `@dataclass(slots=True)` would give it, from plain functions shared by
every class: `__repr__`, `__match_args__` (positional patterns), `__eq__` comparing the fields in order
between instances of the same class, `__hash__` (None when the instances can change), and, with
`frozen=True`, no assignment after `__init__` (`object.__setattr__` there, as `@dataclass` does).

    class Pair(Slotted, frozen=True):
        __slots__ = ("a", "b")

        def __init__(self, a: int, b: int = 0) -> None:
            object.__setattr__(self, "a", a)
            object.__setattr__(self, "b", b)

`eq=False` keeps identity comparison (or a class's own `__eq__`, which is always kept).
"""

from __future__ import annotations

from operator import attrgetter
from typing import Any


class FrozenFieldError(AttributeError):
    """An assignment to a field of a frozen record (what `dataclasses.FrozenInstanceError` says)."""


def _values(self: Slotted) -> tuple[Any, ...]:
    return type(self)._get(self)


def _repr(self: Slotted) -> str:
    fields = ", ".join(f"{k}={getattr(self, k)!r}" for k in type(self).__slots__)
    return f"{type(self).__qualname__}({fields})"


def _eq(self: Slotted, other: object) -> bool:
    if other.__class__ is not self.__class__:
        return NotImplemented
    return _values(self) == _values(other)  # type: ignore[arg-type]


def _hash(self: Slotted) -> int:
    return hash(_values(self))


def _frozen_setattr(self: Slotted, name: str, value: object) -> None:
    raise FrozenFieldError(f"cannot assign to field {name!r}")


def _frozen_delattr(self: Slotted, name: str) -> None:
    raise FrozenFieldError(f"cannot delete field {name!r}")


def _getstate(self: Slotted) -> tuple[Any, ...]:
    return _values(self)


def _setstate(self: Slotted, state: tuple[Any, ...]) -> None:
    for name, value in zip(type(self).__slots__, state, strict=True):
        object.__setattr__(self, name, value)


class Slotted:
    """Base of a record class; see the module doc."""

    __slots__ = ()
    _get: Any

    def __init_subclass__(cls, *, frozen: bool = False, eq: bool = True, **kwargs: Any) -> None:
        super().__init_subclass__(**kwargs)
        names = cls.__dict__.get("__slots__")
        if not isinstance(names, tuple):
            raise TypeError(f"{cls.__qualname__}: name the fields in a __slots__ tuple")
        if len(names) == 1:
            one = attrgetter(names[0])
            cls._get = staticmethod(lambda obj: (one(obj),))
        else:
            cls._get = staticmethod(attrgetter(*names)) if names else staticmethod(lambda obj: ())
        cls.__match_args__ = names
        if "__repr__" not in cls.__dict__:
            cls.__repr__ = _repr
        if eq and "__eq__" not in cls.__dict__:
            cls.__eq__ = _eq
            cls.__hash__ = _hash if frozen else None
        if frozen:
            cls.__setattr__ = _frozen_setattr
            cls.__delattr__ = _frozen_delattr
            cls.__getstate__ = _getstate
            cls.__setstate__ = _setstate

    def _replace(self, **changes: Any) -> Any:
        """A copy with `changes` (field names) applied, through `__init__` (`dataclasses.replace`)."""
        values = {k: getattr(self, k) for k in type(self).__slots__}
        unknown = set(changes) - set(values)
        if unknown:
            raise TypeError(f"{type(self).__qualname__} has no field {sorted(unknown)[0]!r}")
        values.update(changes)
        return type(self)(**values)
