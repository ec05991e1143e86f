"""HL7 v2.5.1 ORU^R01: parsed and validated with hl7apy, plus our own checks (DICOM PS3.3, PS3.16).

hl7apy's STRICT level refuses long OBX-5 values and its TOLERANT level accepts wrong types, so the
message is parsed tolerant, ``validate()`` is called, and OBX-5 is checked against OBX-2 here.
"""

from __future__ import annotations

import base64
import re
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from hl7apy import get_default_encoding_chars
from hl7apy.consts import VALIDATION_LEVEL
from hl7apy.parser import parse_message
from hl7apy.v2_5_1 import ST
from interop_cases import (
    AT,
    CORRECTED,
    DEMO,
    FINAL,
    ORDER,
    PDF,
    UNSIGNED,
    demo_data,
    ordered,
    perfusion_not_seen,
    with_data,
)

from reporting.cli import main
from reporting.codes import HL7_SYSTEMS, code
from reporting.interop.hl7 import escape, oru_message
from reporting.interop.release import Release

RELEASES = [(UNSIGNED, "P"), (FINAL, "F"), (CORRECTED, "C")]
NASTY = "Brennan | Quill^feather & Sons ~ back\\slash"  # every HL7 delimiter in one name


def unescape(text: str) -> str:
    """Decode HL7 escapes (written here, independently of the exporter)."""
    names = {"F": "|", "S": "^", "T": "&", "R": "~", "E": "\\", ".br": "\n"}
    return re.sub(r"\\(F|S|T|R|E|\.br)\\", lambda m: names[m.group(1)], text)


def segments(message: str) -> list[list[str]]:
    return [s.split("|") for s in message.split("\r") if s]


def field(segment: list[str], n: int) -> str:
    """Field ``n`` as HL7 numbers it (MSH counts the separator itself as MSH-1)."""
    index = n - 1 if segment[0] == "MSH" else n
    return segment[index] if index < len(segment) else ""


def obx(message: str) -> list[list[str]]:
    return [s for s in segments(message) if s[0] == "OBX"]


@pytest.mark.parametrize("name", ["DEMO-0001", "DEMO-0002", "DEMO-0003", "DEMO-0004"])
def test_hl7apy_parses_and_validates_the_message(name: str) -> None:
    message = oru_message(ordered(name), PDF, FINAL, at=AT)
    parsed = parse_message(message, validation_level=VALIDATION_LEVEL.TOLERANT, find_groups=True)
    assert parsed.validate() is True
    assert parsed.msh.msh_9.to_er7() == "ORU^R01^ORU_R01"
    assert parsed.msh.msh_12.to_er7() == "2.5.1"


def test_segments_are_cr_separated_in_order() -> None:
    message = oru_message(ordered(), PDF, UNSIGNED, at=AT)
    assert "\n" not in message and message.endswith("\r")
    kinds = [s[0] for s in segments(message)]
    assert kinds[:4] == ["MSH", "PID", "ORC", "OBR"]
    assert set(kinds[4:]) == {"NTE", "OBX"}
    assert kinds.index("OBX") > max(i for i, k in enumerate(kinds) if k == "NTE")


@pytest.mark.parametrize(("release", "status"), RELEASES, ids=["P", "F", "C"])
def test_result_status_follows_the_release(release: Release, status: str) -> None:
    # HL7 tables 0123/0085: P preliminary, F final, C corrected (DICOM PS3.3 and PS3.5)
    message = oru_message(ordered(), PDF, release, at=AT)
    obr = next(s for s in segments(message) if s[0] == "OBR")
    assert field(obr, 25) == status
    assert {field(o, 11) for o in obx(message)} == {status}


def test_order_numbers_travel_in_orc_and_obr() -> None:
    message = oru_message(ordered(), PDF, UNSIGNED, at=AT)
    rows = {s[0]: s for s in segments(message)}
    for name in ("ORC", "OBR"):
        assert field(rows[name], 2) == ORDER["placer_order_number"]
        assert field(rows[name], 3) == ORDER["filler_order_number"]
    assert field(rows["PID"], 3) == "LV-100877"


def test_every_obx_value_matches_its_value_type() -> None:
    a = ordered()
    message = oru_message(a, PDF, FINAL, at=AT)
    kinds: dict[str, int] = {}
    for o in obx(message):
        kind, value = field(o, 2), field(o, 5)
        kinds[kind] = kinds.get(kind, 0) + 1
        if kind == "NM":
            float(value)  # a number, nothing else
            assert field(o, 6).endswith("^UCUM")
        elif kind == "CWE":
            parts = value.split("^")
            assert len(parts) == 3 and parts[2] in HL7_SYSTEMS.values() and parts[0]
        elif kind == "FT":
            assert value and "\n" not in value and "\r" not in value
        elif kind == "ED":
            parts = value.split("^")
            assert parts[1:4] == ["AP", "PDF", "Base64"]
            assert base64.b64decode(parts[4]) == PDF
        else:
            pytest.fail(f"unexpected value type {kind}")
    assert kinds["ED"] == 1 and kinds["FT"] == 1
    assert kinds["CWE"] == sum(len(s.wall_motion) for s in a.segments)  # all perfusion seen
    wmsi = [o for o in obx(message) if field(o, 3).startswith("125202^")]
    assert [float(field(o, 5)) for o in wmsi] == list(a.wmsi.values())


def test_stage_and_segment_are_in_the_sub_id() -> None:
    a = ordered()
    by_number = {s.number: s for s in a.segments}
    seen = 0
    perfusion = code("perfusion").value
    for o in obx(oru_message(a, PDF, UNSIGNED, at=AT)):
        if field(o, 2) != "CWE" or field(o, 3).startswith(perfusion + "^"):
            continue
        stage_n, segment_n = (int(x) for x in field(o, 4).split("."))
        stage = a.stages[
            [s.value for s in a.stages].index(["rest", "low_dose", "peak", "recovery"][stage_n - 1])
        ]
        assert stage.value in field(o, 3)
        score = by_number[segment_n].wall_motion[stage]
        expected = code("wall_motion.x" if score is None else f"wall_motion.{score}")
        assert field(o, 5).split("^")[0] == expected.value
        seen += 1
    assert seen == sum(len(s.wall_motion) for s in a.segments)


def test_conclusion_is_the_pdfs_impression_with_line_breaks_escaped() -> None:
    from reporting.interop.words import conclusion_text

    a = ordered()
    ft = next(o for o in obx(oru_message(a, PDF, UNSIGNED, at=AT)) if field(o, 2) == "FT")
    assert "\\.br\\" in field(ft, 5)
    assert unescape(field(ft, 5)) == conclusion_text(a)


def test_free_text_with_delimiters_round_trips() -> None:
    data = demo_data()
    data["patient"]["name"] = NASTY
    data["order"] = ORDER
    message = oru_message(with_data(data), PDF, UNSIGNED, at=AT)
    parsed = parse_message(message, validation_level=VALIDATION_LEVEL.TOLERANT, find_groups=True)
    assert parsed.validate() is True
    pid = next(s for s in segments(message) if s[0] == "PID")
    assert unescape(field(pid, 5)) == NASTY
    # hl7apy's own escaping (its ST datatype) agrees where no backslash is involved
    plain = NASTY.replace("\\", "/")
    assert escape(plain) == ST(plain).to_er7(get_default_encoding_chars("2.5.1"))


@pytest.mark.parametrize(
    "text",
    ["a|b", "a^b&c", "x~y", "back\\slash \\F\\ literal", "line one\nline two", ""],
    ids=["field", "component", "repetition", "escape-char", "newline", "empty"],
)
def test_escape_round_trip(text: str) -> None:
    assert unescape(escape(text, formatted=True)) == text
    assert not set("|^&~\r\n") & set(escape(text, formatted=True))


def test_no_placeholder_anywhere() -> None:
    message = oru_message(ordered(), PDF, FINAL, at=AT)
    assert ".invalid" not in message


def test_hl7_command_writes_the_message(tmp_path: Path) -> None:
    out = tmp_path / "m.hl7"
    result = CliRunner().invoke(main, ["hl7", str(DEMO / "DEMO-0001.yaml"), "-o", str(out)])
    assert result.exit_code == 0, result.output
    text = out.read_bytes().decode("utf-8")
    assert text.startswith("MSH|^~\\&|") and "\r" in text and "\n" not in text
    obr: Any = next(s for s in segments(text) if s[0] == "OBR")
    assert field(obr, 25) == "P"  # file mode is never signed


def test_a_segment_not_visualised_for_perfusion_is_said_not_left_out() -> None:
    # HL7 v2.5.1 7.4.2: OBX-2 gives the value type of OBX-5 per observation; a perfusion score
    # that could not be read is sent as the coded finding "Not visualized" (DICOM PS3.16 CID 3703,
    # DCM 122288) under the same observation id and sub-id, so the receiver sees every segment.
    a = perfusion_not_seen()
    rows = [o for o in obx(oru_message(a, PDF, FINAL, at=AT)) if field(o, 4).startswith("3.")]
    perfusion = [o for o in rows if field(o, 3).startswith(code("perfusion").value + "^")]
    assert len(perfusion) == 17
    unseen = [o for o in perfusion if field(o, 4) == "3.17"]
    assert [(field(o, 2), field(o, 5).split("^")[:3]) for o in unseen] == [
        ("CWE", ["122288", "Not visualized", "DCM"])
    ]
    assert all(field(o, 2) == "NM" for o in perfusion if o not in unseen)
    message = oru_message(a, PDF, FINAL, at=AT)
    parsed = parse_message(message, validation_level=VALIDATION_LEVEL.TOLERANT, find_groups=True)
    assert parsed.validate() is True  # hl7apy's HL7 v2.5.1 structure and datatype checks
