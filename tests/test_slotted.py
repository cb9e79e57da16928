"""`Slotted` record classes behave as `@dataclass(slots=True)` classes do: the standard library's
dataclasses are the reference, class for class."""

from __future__ import annotations

import copy
import dataclasses
import pickle
import sys
from dataclasses import dataclass

import pytest

from benchlog._slotted import FrozenFieldError, Slotted


@dataclass(frozen=True, slots=True)
class RefFrozen:
    a: int
    b: str = "x"
    c: tuple[int, ...] = ()


class MyFrozen(Slotted, frozen=True):
    __slots__ = ("a", "b", "c")

    def __init__(self, a: int, b: str = "x", c: tuple[int, ...] = ()) -> None:
        object.__setattr__(self, "a", a)
        object.__setattr__(self, "b", b)
        object.__setattr__(self, "c", c)


@dataclass(slots=True)
class RefMutable:
    n: int = 0
    names: list[str] = dataclasses.field(default_factory=list)


class MyMutable(Slotted):
    __slots__ = ("n", "names")

    def __init__(self, n: int = 0, names: list[str] | None = None) -> None:
        self.n = n
        self.names = [] if names is None else names


class MyIdentity(Slotted, frozen=True, eq=False):
    __slots__ = ("v",)

    def __init__(self, v: int) -> None:
        object.__setattr__(self, "v", v)


def _pairs():
    return [
        (RefFrozen(1), MyFrozen(1)),
        (RefFrozen(2, "y", (1, 2)), MyFrozen(2, "y", (1, 2))),
        (RefMutable(), MyMutable()),
        (RefMutable(3, ["a"]), MyMutable(3, ["a"])),
    ]


def test_repr_equality_and_hashing_are_a_dataclasss():
    for ref, mine in _pairs():
        assert repr(mine) == repr(ref).replace(type(ref).__qualname__, type(mine).__qualname__)
        assert mine == copy.copy(mine) and not (mine != copy.copy(mine))
        assert (mine == ref) is False  # another class: not equal, as between two dataclasses
        assert type(mine).__match_args__ == type(ref).__match_args__
        assert (type(mine).__hash__ is None) == (type(ref).__hash__ is None)
    assert hash(MyFrozen(1, "y")) == hash(MyFrozen(1, "y"))
    assert MyFrozen(1) != MyFrozen(2) and RefFrozen(1) != RefFrozen(2)
    one = MyIdentity(1)
    assert one == one and one != MyIdentity(1) and hash(one) == hash(one)  # eq=False: identity


def test_frozen_fields_cannot_change_and_mutable_ones_can():
    ref, mine = RefFrozen(1), MyFrozen(1)
    for obj, error in ((ref, dataclasses.FrozenInstanceError), (mine, FrozenFieldError)):
        with pytest.raises(error):
            obj.a = 2
        with pytest.raises(error):
            del obj.a
        with pytest.raises(AttributeError):  # both are AttributeErrors, as callers may catch
            obj.b = "z"
    m = MyMutable()
    m.n += 1
    assert m.n == 1
    with pytest.raises(AttributeError):
        m.other = 1  # slots: no other attributes
    assert not hasattr(mine, "__dict__")


def test_pattern_matching_pickling_and_replacing():
    match MyFrozen(5, "q"):
        case MyFrozen(a, b):
            assert (a, b) == (5, "q")
        case _:
            pytest.fail("positional pattern did not match")
    for _, mine in _pairs():
        assert pickle.loads(pickle.dumps(mine)) == mine
        assert copy.deepcopy(mine) == mine
    assert MyFrozen(1, "y")._replace(a=3) == MyFrozen(3, "y")
    assert dataclasses.replace(RefFrozen(1, "y"), a=3) == RefFrozen(3, "y")
    with pytest.raises(TypeError):
        MyFrozen(1)._replace(d=1)


def test_the_analyze_commands_modules_load_without_dataclasses(tmp_path):
    # what the record classes are for: `benchlog analyze` does not compile dataclass methods at start-up
    import subprocess

    code = (
        "import sys\n"
        "from benchlog.views.cli import cmd_analyze\n"
        "cmd_analyze.freeze_loaded_modules()\n"
        "print('dataclasses' in sys.modules)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
