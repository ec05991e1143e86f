"""The base of the project's closed vocabularies: a StrEnum whose ``value`` is read at C speed.

pydantic's JSON serializer reads ``member.value`` for every enum value and every enum dict key it
writes, some 250 times for one analysis record. On Python 3.11 ``Enum.value`` is a descriptor
written in Python (two Python calls per read), which was half the time of writing a record. Here
``value`` is a plain property over :func:`operator.attrgetter`, which returns the same object
without running Python code. Everything else (members, equality, hashing, ``str()``, pickling,
JSON schemas) is StrEnum's own; only ``value`` read on the class itself gives the property
(StrEnum raises AttributeError there), which nothing reads.
"""

from enum import StrEnum
from operator import attrgetter
from typing import TYPE_CHECKING


class Vocabulary(StrEnum):
    """A closed vocabulary: a StrEnum (one docstring per member) with a fast ``value``."""

    if not TYPE_CHECKING:  # mypy would read the assignment as a member; Enum.value's typing stands
        value = property(attrgetter("_value_"))
