"""SR content items encoded straight to DICOM bytes (explicit VR little endian, UTF-8 text).

An SR of a stress study holds a few hundred content items; building each as a pydicom Dataset and
letting pydicom encode it cost several times the export's time budget. The items use a dozen
attributes of fixed VR, so they are encoded here: each element in ascending tag order, values
padded to even length, sequences and items of undefined length with their delimiters (PS3.5 §7.5).
Coded items repeat (the same code, the same segment with the same finding), so the encoded bytes of
a code are cached. The result goes into the dataset as one raw Content Sequence element, which
pydicom writes as it is and decodes like any other when read. Tests read every object back with
pydicom and validate it with dciodvfy and dsrdump.
"""

from __future__ import annotations

import struct
from functools import cache

from reporting.codes import Code, code

_LONG_VRS = frozenset({b"SQ", b"UT", b"OB", b"UN"})
_UNDEFINED = 0xFFFFFFFF
ITEM_START = struct.pack("<HHI", 0xFFFE, 0xE000, _UNDEFINED)
ITEM_END = struct.pack("<HHI", 0xFFFE, 0xE00D, 0)
SEQUENCE_END = struct.pack("<HHI", 0xFFFE, 0xE0DD, 0)

CODE_VALUE = 0x00080100
CODING_SCHEME_DESIGNATOR = 0x00080102
CODE_MEANING = 0x00080104
MEASUREMENT_UNITS_CODE_SEQUENCE = 0x004008EA
RELATIONSHIP_TYPE = 0x0040A010
VALUE_TYPE = 0x0040A040
CONCEPT_NAME_CODE_SEQUENCE = 0x0040A043
CONTINUITY_OF_CONTENT = 0x0040A050
PERSON_NAME = 0x0040A123
TEXT_VALUE = 0x0040A160
CONCEPT_CODE_SEQUENCE = 0x0040A168
MEASURED_VALUE_SEQUENCE = 0x0040A300
NUMERIC_VALUE = 0x0040A30A
NUMERIC_VALUE_QUALIFIER_CODE_SEQUENCE = 0x0040A301
CONTENT_SEQUENCE = 0x0040A730


def element(tag: int, vr: bytes, value: bytes) -> bytes:
    """One data element: tag, VR, length and the value padded to even length."""
    if len(value) % 2:
        value += b"\0" if vr == b"UI" else b" "
    group, number = tag >> 16, tag & 0xFFFF
    if vr in _LONG_VRS:
        return struct.pack("<HH2s2xI", group, number, vr, len(value)) + value
    return struct.pack("<HH2sH", group, number, vr, len(value)) + value


def sequence(tag: int, items: list[bytes]) -> bytes:
    """A sequence of undefined length holding ``items`` (each the encoded elements of one item)."""
    head = struct.pack("<HH2s2xI", tag >> 16, tag & 0xFFFF, b"SQ", _UNDEFINED)
    return head + b"".join(ITEM_START + item + ITEM_END for item in items) + SEQUENCE_END


def _text(value: str) -> bytes:
    return value.encode("utf-8")


@cache
def coded(key: str) -> bytes:
    """The code under ``key`` as the elements of a code sequence item."""
    c: Code = code(key)
    return (
        element(CODE_VALUE, b"SH", _text(c.value))
        + element(CODING_SCHEME_DESIGNATOR, b"SH", _text(c.scheme.value))
        + element(CODE_MEANING, b"LO", _text(c.meaning))
    )


def content_item(
    relationship: str | None,
    value_type: str,
    name: str,
    *,
    continuity: bool = False,
    person: str | None = None,
    text: str | None = None,
    concept: str | None = None,
    measured: tuple[str, str] | None = None,
    no_value: str | None = None,
    children: list[bytes] | None = None,
) -> bytes:
    """One content item; ``measured`` is (DS value, unit key); elements in tag order.

    ``no_value`` (a code key) makes a NUM item without a value: an empty Measured Value Sequence
    (type 2) and the reason in the Numeric Value Qualifier Code Sequence (PS3.3 C.18.1, CID 42).
    """
    out = b""
    if relationship is not None:
        out += element(RELATIONSHIP_TYPE, b"CS", _text(relationship))
    out += element(VALUE_TYPE, b"CS", _text(value_type))
    out += sequence(CONCEPT_NAME_CODE_SEQUENCE, [coded(name)])
    if continuity:
        out += element(CONTINUITY_OF_CONTENT, b"CS", b"SEPARATE")
    if person is not None:
        out += element(PERSON_NAME, b"PN", _text(person))
    if text is not None:
        out += element(TEXT_VALUE, b"UT", _text(text))
    if concept is not None:
        out += sequence(CONCEPT_CODE_SEQUENCE, [coded(concept)])
    if measured is not None:
        value, unit = measured
        inner = sequence(MEASUREMENT_UNITS_CODE_SEQUENCE, [coded(unit)])
        inner += element(NUMERIC_VALUE, b"DS", _text(value))
        out += sequence(MEASURED_VALUE_SEQUENCE, [inner])
    elif no_value is not None:
        out += sequence(MEASURED_VALUE_SEQUENCE, [])
        out += sequence(NUMERIC_VALUE_QUALIFIER_CODE_SEQUENCE, [coded(no_value)])
    if children:
        out += sequence(CONTENT_SEQUENCE, children)
    return out
