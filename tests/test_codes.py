"""The code table (data/codes.csv) against its published sources, and the order identity block."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any, cast

import pytest
from interop_cases import ORDER, demo_data
from pydicom.sr._cid_dict import cid_concepts
from pydicom.sr._concepts_dict import concepts
from pydicom.sr.codedict import codes as pydicom_codes

from reporting.codes import FHIR_SYSTEMS, Scheme, code, code_table, fhir_system
from reporting.errors import InputErrors, problems_of
from reporting.load import study_from_data
from reporting.segments import SegmentModel, segments_of
from reporting.settings import Settings, default_settings, load_settings

# Per-segment wall-motion LOINC codes, HL7 Europe imaging report implementation guide [C].
PUBLISHED_LOINC = {
    1: "18121-4", 2: "18122-2", 3: "78192-2", 4: "18123-0", 5: "78193-0", 6: "78194-8",
    7: "18129-7", 8: "18130-5", 9: "78195-5", 10: "18131-3", 11: "78196-3", 12: "78197-1",
    13: "18119-8", 14: "18120-6", 15: "18127-1", 16: "18128-9", 17: "78198-9",
}  # fmt: skip
PYDICOM_CHECKED = [r for r in code_table().values() if r.code.scheme in (Scheme.DCM, Scheme.SCT)]


def _meanings(scheme: str, value: str) -> set[str]:
    """Every meaning pydicom's concept dictionary gives ``value`` in ``scheme``."""
    by_name = cast(dict[str, dict[str, tuple[str, list[int]]]], concepts[scheme])
    return {
        meaning
        for by_value in by_name.values()
        for v, (meaning, _cids) in by_value.items()
        if v == value
    }


def _cid_values(cid: int) -> set[tuple[str, str]]:
    """(scheme, value) of every concept in DICOM context group ``cid``, as pydicom lists it."""
    out = set()
    for scheme, names in cid_concepts[cid].items():
        for name in names:
            c = getattr(getattr(pydicom_codes, scheme), name)
            out.add((scheme, c.value))
    return out


@pytest.mark.parametrize("row", PYDICOM_CHECKED, ids=[r.key for r in PYDICOM_CHECKED])
def test_every_dcm_and_sct_code_is_in_pydicoms_dictionary_with_its_meaning(row: Any) -> None:
    # pydicom.sr.codedict, generated from DICOM PS3.16 (DICOM PS3.3 and PS3.5): value AND meaning
    c = row.code
    assert c.meaning in _meanings(c.scheme.value, c.value), (c, _meanings(c.scheme.value, c.value))
    assert row.source.startswith("pydicom.sr.codedict")


def test_facts_codes_are_the_ones_pydicom_names() -> None:
    # DICOM PS3.3: WMSI is DCM 125202; the wall-motion findings sit in CID 3703/3704
    assert (code("wmsi").value, code("wmsi").scheme) == ("125202", Scheme.DCM)
    for score in "1234x":
        c = code(f"wall_motion.{score}")
        assert (c.scheme.value, c.value) in _cid_values(3703)  # CID 3703 wall motion
    aneurysm = code("wall_motion.5")
    assert (aneurysm.scheme.value, aneurysm.value) in _cid_values(3704)  # CID 3704 morphology


@pytest.mark.parametrize("stage", ["rest", "low_dose", "peak", "recovery"])
def test_stages_come_from_cid_3207(stage: str) -> None:
    # the published standard: CID 3207 stress test procedure phase
    c = code(f"stage.{stage}")
    assert (c.scheme.value, c.value) in _cid_values(3207)


def test_seventeen_segments_come_from_cid_3717_one_code_each() -> None:
    # the published standard: CID 3717 LV myocardial wall 17-segment model
    seventeen = [code(f"segment.{s.name}") for s in segments_of(SegmentModel.SEVENTEEN)]
    assert {(c.scheme.value, c.value) for c in seventeen} == _cid_values(3717)
    for model in SegmentModel:  # every segment of every model has a code
        values = [code(f"segment.{s.name}").value for s in segments_of(model)]
        assert len(set(values)) == len(values) == int(model)


def test_wall_motion_loinc_codes_are_the_published_list() -> None:
    # HL7 Europe imaging report guide, per-segment wall motion codes (DICOM PS3.16 TID 5200)
    names = [s.name for s in segments_of(SegmentModel.SEVENTEEN)]
    table = {n: code(f"wall_motion_loinc.{name}").value for n, name in enumerate(names, start=1)}
    assert table == PUBLISHED_LOINC
    assert code("lvef").value == "10230-1"  # LOINC LVEF, the published standard


def test_every_row_has_a_source_and_a_real_system() -> None:
    for row in code_table().values():
        assert row.source.strip() and row.code.meaning.strip() and row.code.value.strip()
        system = fhir_system(row.code.scheme, None)
        if row.code.scheme is Scheme.LOCAL:
            assert system is None  # no system until the lab configures one
        else:
            assert system == FHIR_SYSTEMS[row.code.scheme]
    # FHIR code system URIs, the published standard
    assert FHIR_SYSTEMS == {
        Scheme.LN: "http://loinc.org",
        Scheme.SCT: "http://snomed.info/sct",
        Scheme.DCM: "http://dicom.nema.org/resources/ontology/DCM",
        Scheme.UCUM: "http://unitsofmeasure.org",
    }
    assert fhir_system(Scheme.LOCAL, "https://echo.lab-one.org/codes") == (
        "https://echo.lab-one.org/codes"
    )


@pytest.mark.parametrize(
    "uri",
    [
        "https://segreport.invalid/fhir",  # RFC 2606 reserved: a placeholder
        "http://example.org/codes",  # RFC 2606 reserved: a placeholder
        "codes/local",  # relative: not a system URI
        "ftp://lab.org/codes",  # not http(s) or urn
    ],
)
def test_settings_refuse_placeholder_or_relative_system_uris(uri: str) -> None:
    data = default_settings().model_dump() | {"lab_code_system_uri": uri}
    with pytest.raises(ValueError, match="not a placeholder"):
        Settings.model_validate(data)


def test_a_placeholder_uri_in_a_settings_file_is_located_at_its_setting(tmp_path: Path) -> None:
    # The problem names the setting, without pydantic's "Value error, " prefix.
    path = tmp_path / "lab.yaml"
    path.write_text("lab_code_system_uri: https://lab.invalid/codes\n", encoding="utf-8")
    with pytest.raises(InputErrors) as caught:
        load_settings(path)
    assert [str(p) for p in problems_of(caught.value)] == [
        f"{path}: lab_code_system_uri: must be an absolute http(s) or urn: URI the lab controls, "
        "not a placeholder; got 'https://lab.invalid/codes'"
    ]


def _problems(order: dict[str, Any]) -> list[str]:
    data = demo_data()
    data["order"] = order
    with pytest.raises(InputErrors) as caught:
        study_from_data(data)
    return [str(p) for p in problems_of(caught.value)]


@pytest.mark.parametrize(
    ("field", "value", "words"),
    [
        # 17 characters: DICOM SH allows 16 (DICOM PS3.3 and PS3.5)
        (
            "accession_number",
            "A" * 17,
            "is 17 characters; DICOM Accession Number (SH) holds at most 16 (refused, not cut)",
        ),
        # 23 characters: HL7 v2.5.1 ORC-2 allows 22
        ("placer_order_number", "P" * 23, "HL7 Placer Order Number (ORC-2) holds at most 22"),
        # a backslash is DICOM's value separator
        ("accession_number", "A\\B", "holds a backslash or control character"),
        # a leading zero in a UID component is not allowed (PS3.5 9.1)
        ("study_instance_uid", "1.2.03", "is not a DICOM UID"),
        # 65 characters: UI allows 64
        ("study_instance_uid", "1." + "2" * 63, "is not a DICOM UID"),
    ],
    ids=["accession-17", "placer-23", "backslash", "uid-leading-zero", "uid-65"],
)
def test_order_values_too_long_or_malformed_are_refused_with_their_location(
    field: str, value: str, words: str
) -> None:
    problems = _problems({**ORDER, field: value})
    assert len(problems) == 1
    assert problems[0].startswith(f"study: order.{field}: ")
    assert words in problems[0]


def test_a_full_order_is_accepted_and_kept_as_given() -> None:
    data = demo_data()
    data["order"] = ORDER
    study = study_from_data(data)
    assert study.order is not None
    assert study.order.model_dump(exclude_none=True) == ORDER
    assert re.fullmatch(r"[0-9.]+", study.order.study_instance_uid or "")
