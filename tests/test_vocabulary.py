"""Closed vocabularies behave exactly as Python's StrEnum, with ``value`` read at C speed.

The oracle is the standard library's own StrEnum: a twin enum declared from it must give the same
values, strings, JSON and schema (``reporting.vocabulary``).
"""

from __future__ import annotations

import enum
import importlib
import pickle
import pkgutil

import pytest
from pydantic import BaseModel

import reporting
from reporting.model import Stage
from reporting.vocabulary import Vocabulary


def _package_enums() -> list[type[enum.StrEnum]]:
    for module in pkgutil.walk_packages(reporting.__path__, "reporting."):
        # __main__ runs the command line; the migrations run only inside alembic
        if not module.name.endswith("__main__") and ".migrations" not in module.name:
            importlib.import_module(module.name)
    found: list[type[enum.StrEnum]] = []
    pending: list[type] = [enum.StrEnum]
    while pending:
        for sub in pending.pop().__subclasses__():
            pending.append(sub)
            if sub.__module__.startswith("reporting.") and sub is not Vocabulary:
                found.append(sub)
    return found


def test_every_closed_vocabulary_of_the_package_has_the_fast_value() -> None:
    enums = _package_enums()
    assert len(enums) >= 50  # the package's vocabularies, found by walking every module
    slow = [f"{e.__module__}.{e.__qualname__}" for e in enums if not issubclass(e, Vocabulary)]
    assert not slow, f"declare these as Vocabulary, not StrEnum: {slow}"
    for vocabulary in enums:
        for member in vocabulary:
            assert member.value is member._value_ and member.value == str(member)


_Twin = enum.StrEnum("_Twin", {m.name: m.value for m in Stage})  # the standard library's StrEnum


class _Ours(BaseModel):
    one: Stage
    per_stage: dict[Stage, int]


class _Theirs(BaseModel):
    one: _Twin
    per_stage: dict[_Twin, int]


def test_values_strings_and_json_are_stdlib_strenums() -> None:
    for ours, theirs in zip(Stage, _Twin, strict=True):
        assert (ours.name, ours.value, str(ours), f"{ours}", hash(ours)) == (
            theirs.name,
            theirs.value,
            str(theirs),
            f"{theirs}",
            hash(theirs),
        )
        assert type(ours.value) is type(theirs.value) is str
        assert Stage(theirs.value) is ours and pickle.loads(pickle.dumps(ours)) is ours
    ours_model = _Ours(one=Stage.PEAK, per_stage={s: i for i, s in enumerate(Stage)})
    theirs_model = _Theirs(one=_Twin.PEAK, per_stage={s: i for i, s in enumerate(_Twin)})
    assert ours_model.model_dump_json() == theirs_model.model_dump_json()
    assert ours_model.model_dump(mode="json") == theirs_model.model_dump(mode="json")


def test_a_vocabulary_is_still_a_closed_set() -> None:
    with pytest.raises(ValueError):
        Stage("stress")  # not a member: refused as by any Enum
    assert "value" not in Stage.__members__  # the fast value is a property, not a member
