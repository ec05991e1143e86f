"""The reader's impression against a hash of the computed findings (reporting.impression).

Same study → same hash; key and stage order, free text and wording do not enter it; a changed score
does, and marks a confirmed impression stale until the reader confirms it again. The hash is
checked against an independent computation from hashlib and json (the documented canonical form),
and the demo study DEMO-0004 carries a hash written once, so a change of the canonical form on any
platform shows here.
"""

from __future__ import annotations

import copy
import hashlib
import json
from typing import Any

import pytest
import yaml

from reporting.analysis import analyze
from reporting.demo import demo_study_names, demo_study_text
from reporting.export.record import record_dict
from reporting.impression import (
    canonical_bytes,
    confirm_impression,
    findings_basis,
    findings_sha256,
    impression_is_stale,
    needs_confirmation,
)
from reporting.load import study_from_data
from reporting.model import Study
from reporting.results import Analysis, ImpressionStatus

WORDS = "Inferior ischaemia; refer for angiography."


def _data(name: str) -> dict[str, Any]:
    data: dict[str, Any] = yaml.safe_load(demo_study_text(f"{name}.yaml"))
    return data


def _analyse(data: dict[str, Any]) -> Analysis:
    return analyze(study_from_data(data))


def _reversed(value: Any, keep: bool = False) -> Any:
    """The same data with every mapping's keys in reverse order (``stages`` keeps protocol order,
    which this version of the loader requires)."""
    if isinstance(value, dict):
        keys = list(value) if keep else list(reversed(list(value)))
        return {k: _reversed(value[k], k == "stages") for k in keys}
    if isinstance(value, list):
        return [_reversed(v) for v in value]
    return value


@pytest.mark.parametrize("name", [n.removesuffix(".yaml") for n in demo_study_names()])
def test_same_study_gives_the_same_hash_whatever_the_key_order(name: str) -> None:
    data = _data(name)
    first = _analyse(data)
    assert _analyse(copy.deepcopy(data)).findings_sha256 == first.findings_sha256
    assert _analyse(_reversed(data)).findings_sha256 == first.findings_sha256
    # free text never enters the basis
    edited = data | {"comments": "Different words.", "impression": WORDS}
    assert _analyse(edited).findings_sha256 == first.findings_sha256


@pytest.mark.parametrize("name", [n.removesuffix(".yaml") for n in demo_study_names()])
def test_hash_is_sha256_of_the_documented_canonical_json(name: str) -> None:
    analysis = _analyse(_data(name))
    basis = findings_basis(analysis)
    # independent serialisation: the documented json.dumps arguments, then hashlib
    text = json.dumps(basis, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    assert hashlib.sha256(text.encode("utf-8")).hexdigest() == analysis.findings_sha256
    assert canonical_bytes(basis) == text.encode("ascii")

    def no_float(token: str) -> float:
        raise AssertionError(f"a float in the basis: {token}")  # floats round per platform

    json.loads(text, parse_float=no_float)
    assert basis["basis"] == "segreport-findings-1"
    assert [s["number"] for s in basis["segments"]] == sorted(s.number for s in analysis.segments)


def test_demo_hash_written_once_still_matches() -> None:
    # DEMO-0004 keeps the hash computed when the demo was written: a changed canonical form,
    # platform or library would make it stale
    analysis = _analyse(_data("DEMO-0004"))
    assert analysis.study.impression_basis_sha256 == analysis.findings_sha256
    assert analysis.impression_status is ImpressionStatus.CURRENT
    assert not impression_is_stale(analysis)


def test_changed_score_marks_the_impression_stale_until_confirmed() -> None:
    data = _data("DEMO-0004")
    data["stages"]["peak"]["wall_motion"] = "111311 111211 1111 1"  # segment 4 now akinetic
    changed = _analyse(data)
    assert changed.findings_sha256 != changed.study.impression_basis_sha256
    assert changed.impression_status is ImpressionStatus.STALE
    assert impression_is_stale(changed) and needs_confirmation(changed)
    assert record_dict(changed)["impression_status"] == "stale"

    study = study_from_data(data)
    confirmed = confirm_impression(study, changed)
    assert confirmed.impression_basis_sha256 == changed.findings_sha256
    assert confirmed.computed_impression == changed.computed_impression
    again = analyze(confirmed)
    assert again.impression_status is ImpressionStatus.CURRENT
    assert not impression_is_stale(again)


def test_confirmed_study_round_trips_through_its_file_form() -> None:
    data = _data("DEMO-0001") | {"impression": WORDS}
    study = study_from_data(data)
    analysis = analyze(study)
    assert analysis.impression_status is ImpressionStatus.UNCONFIRMED
    confirmed = confirm_impression(study, analysis)
    # the entry page saves the study as JSON (model_dump, nulls left out)
    saved = json.loads(json.dumps(confirmed.model_dump(mode="json", exclude_none=True)))
    reloaded = Study.model_validate(saved)
    assert reloaded.impression_basis_sha256 == analysis.findings_sha256
    assert analyze(reloaded).impression_status is ImpressionStatus.CURRENT


@pytest.mark.parametrize(
    ("extra", "status"),
    [
        ({}, ImpressionStatus.NONE),
        ({"impression": WORDS}, ImpressionStatus.UNCONFIRMED),
        ({"recommendations": "Repeat in a year."}, ImpressionStatus.UNCONFIRMED),
        # a hash of other findings: stale even before any edit
        ({"impression": WORDS, "impression_basis_sha256": "0" * 64}, ImpressionStatus.STALE),
    ],
    ids=["no-words", "impression-only", "recommendations-only", "foreign-hash"],
)
def test_impression_status(extra: dict[str, str], status: ImpressionStatus) -> None:
    assert _analyse(_data("DEMO-0001") | extra).impression_status is status


def test_confirming_with_another_study_analysis_is_refused() -> None:
    study = study_from_data(_data("DEMO-0001"))
    other = _analyse(_data("DEMO-0002"))
    with pytest.raises(ValueError, match="does not belong"):
        confirm_impression(study, other)


def test_basis_hash_must_be_lower_case_hex() -> None:
    from reporting.errors import ReportingError

    # upper-case hex would never equal the computed digest: refused at load
    with pytest.raises(ReportingError, match="impression_basis_sha256"):
        study_from_data(_data("DEMO-0001") | {"impression_basis_sha256": "A" * 64})


def test_findings_hash_of_a_record_is_recomputable() -> None:
    analysis = _analyse(_data("DEMO-0003"))
    assert findings_sha256(analysis) == analysis.findings_sha256
    assert analysis.computed_impression.splitlines()[0].startswith("Viability:")


def test_derived_values_are_made_on_first_use_only() -> None:
    # An analysis used for tables, QA or agreement never words its findings: the computed
    # impression and the findings hash are cached properties, made when first read (common
    # practice: functools.cached_property keeps the value in the instance's __dict__).
    analysis = _analyse(_data("DEMO-0002"))
    assert "computed_impression" not in vars(analysis)
    assert "findings_sha256" not in vars(analysis)
    text = analysis.computed_impression
    assert vars(analysis)["computed_impression"] == text
    assert record_dict(analysis)["findings_sha256"] == vars(analysis)["findings_sha256"]


def test_a_study_with_a_basis_is_hashed_at_analysis() -> None:
    confirmed = confirm_impression(
        study_from_data(_data("DEMO-0001") | {"impression": WORDS}),
        _analyse(_data("DEMO-0001")),
    )
    analysis = analyze(confirmed)
    assert analysis.impression_status is ImpressionStatus.CURRENT
    assert vars(analysis)["findings_sha256"] == confirmed.impression_basis_sha256


def test_a_record_read_back_keeps_its_written_derived_values() -> None:
    # A signed record is never reworded by a later version of the wording: the values it was
    # written with are the ones read back, even where today's wording or hash would differ.
    written = record_dict(_analyse(_data("DEMO-0002")))
    written |= {"computed_impression": "Words of an earlier version.", "findings_sha256": "0" * 64}
    read = Analysis.model_validate_json(json.dumps(written))
    assert read.computed_impression == "Words of an earlier version."
    assert read.findings_sha256 == "0" * 64
    assert record_dict(read) == written
    # a record without them (as written before they existed) makes them from its own values
    older = {
        k: v for k, v in written.items() if k not in ("computed_impression", "findings_sha256")
    }
    remade = Analysis.model_validate(older)
    assert remade.findings_sha256 == findings_sha256(remade)


@pytest.mark.parametrize("key", ["computed_impression", "findings_sha256"])
def test_a_record_with_a_derived_value_that_is_not_text_is_refused(key: str) -> None:
    written = record_dict(_analyse(_data("DEMO-0002"))) | {key: 7}
    with pytest.raises(ValueError, match=f"{key}: expected text, got int"):
        Analysis.model_validate(written)


def test_a_copy_that_may_change_the_findings_makes_them_again() -> None:
    # The derived values kept on an analysis must never outlive what they were made from.
    analysis = _analyse(_data("DEMO-0002"))
    made = (analysis.computed_impression, analysis.findings_sha256)
    kept = analysis.model_copy(update={"impression_status": ImpressionStatus.NONE})
    assert (vars(kept)["computed_impression"], vars(kept)["findings_sha256"]) == made
    other = _analyse(_data("DEMO-0003"))
    changed = analysis.model_copy(update={"segments": other.segments})
    assert "computed_impression" not in vars(changed) and "findings_sha256" not in vars(changed)
    assert changed.findings_sha256 == findings_sha256(changed) != analysis.findings_sha256
