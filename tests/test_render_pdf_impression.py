"""The reader's words and the two audiences in the referring-doctor PDF (issue 13, items 1 and 3).

Text is extracted with pypdf and compared with whitespace collapsed (line breaks fall where the
layout puts them).
"""

from __future__ import annotations

import io
import re
from typing import Any

import pytest
import yaml
from pypdf import PdfReader

from reporting.analysis import analyze
from reporting.demo import demo_study_names, demo_study_text
from reporting.impression import confirm_impression
from reporting.load import study_from_data
from reporting.render import pdf_bytes
from reporting.render.narrative import summary

WORDS = "Inferior ischaemia at a good workload; the angina was the patient's usual pain."


def _data(name: str) -> dict[str, Any]:
    data: dict[str, Any] = yaml.safe_load(demo_study_text(f"{name}.yaml"))
    return data


def _text(pdf: bytes) -> str:
    reader = PdfReader(io.BytesIO(pdf))
    return " ".join(" ".join(page.extract_text() for page in reader.pages).split())


def test_reader_impression_verbatim_with_the_computed_findings_when_they_differ() -> None:
    data = _data("DEMO-0004") | {"impression": WORDS}
    data.pop("impression_basis_sha256")
    analysis = analyze(study_from_data(data))
    text = _text(pdf_bytes(analysis))
    assert WORDS in text
    assert f"Computed findings: {summary(analysis)}" in text
    assert "Impression not yet confirmed against the computed findings." in text


def test_no_computed_findings_line_when_the_reader_accepted_them() -> None:
    data = _data("DEMO-0001")
    analysis = analyze(study_from_data(data))
    study = confirm_impression(study_from_data(data | {"impression": summary(analysis)}), analysis)
    accepted = analyze(study)
    text = _text(pdf_bytes(accepted))
    assert summary(accepted) in text
    assert "Computed findings:" not in text
    assert "not yet confirmed" not in text and "earlier findings" not in text


def test_stale_impression_is_marked_after_a_score_change() -> None:
    data = _data("DEMO-0004")
    current = _text(pdf_bytes(analyze(study_from_data(data))))
    assert "earlier findings" not in current
    data["stages"]["peak"]["wall_motion"] = "111311 111211 1111 1"  # segment 4 now akinetic
    text = _text(pdf_bytes(analyze(study_from_data(data))))
    assert "Impression written against earlier findings" in text
    assert "awaiting the reader's confirmation" in text
    # the reader's words are still printed as written
    assert data["impression"].strip() in text


def test_long_reader_impression_is_printed_in_full_below_the_box() -> None:
    # 40 paragraphs cannot sit in the answer box (a table row cannot break across pages)
    paragraphs = [f"Paragraph {i} of the reader's long impression." for i in range(40)]
    data = _data("DEMO-0002") | {"impression": "\n".join(paragraphs)}
    analysis = analyze(study_from_data(data))
    text = _text(pdf_bytes(analysis))
    assert all(p in text for p in paragraphs)
    assert summary(analysis) in text
    assert "The reader's impression follows under Impression." in text


def _referrer_body(text: str) -> str:
    """The PDF text without the Methods line and the curve caption (where sources may stand)."""
    text = re.sub(r"Methods\. Sources: .*?(Report status:)", r"\1", text)
    return re.sub(r"One panel per segment.*?own scale\.", "", text)


@pytest.mark.parametrize("name", [n.removesuffix(".yaml") for n in demo_study_names()])
def test_referrer_pages_carry_no_citations_or_formulas_outside_methods(name: str) -> None:
    text = _text(pdf_bytes(analyze(study_from_data(_data(name)))))
    assert "Methods. Sources: " in text
    body = _referrer_body(text)
    for marker in ("et al", "220 − age", "y(t) =", "NEJM", "Circulation 19", "Circulation 20"):
        assert marker not in body, marker


def test_methods_line_names_the_sources_the_record_keeps() -> None:
    analysis = analyze(study_from_data(_data("DEMO-0004")))
    text = _text(pdf_bytes(analysis))
    start = text.index("Methods. Sources: ")
    methods = text[start : text.index("Report status:", start)]
    for criterion in analysis.conclusion.risk_criteria:
        assert " ".join(criterion.source.split()).rstrip(".") in methods
    assert "Mark DB et al., NEJM 1991" in methods  # Duke treadmill score


def test_reader_notes_reach_the_pdf_only_when_kept() -> None:
    data = _data("DEMO-0005")
    analysis = analyze(study_from_data(data))
    prompt = next(n.text for n in analysis.notes if n.kind == "suggest_contrast")
    assert " ".join(prompt.split()) not in _text(pdf_bytes(analysis))
    kept = analyze(study_from_data(data | {"kept_notes": ["suggest_contrast"]}))
    text = _text(pdf_bytes(kept))
    assert " ".join(prompt.split()) in text
    unseen = next(n.text for n in kept.notes if n.kind == "not_visualised")
    assert " ".join(unseen.split()) not in text  # another kind stays with the reader


def test_unknown_kept_note_kind_is_refused() -> None:
    from reporting.errors import ReportingError

    # a misspelt kind would silently keep nothing
    with pytest.raises(ReportingError, match="kept_notes"):
        study_from_data(_data("DEMO-0005") | {"kept_notes": ["suggest_contrst"]})
