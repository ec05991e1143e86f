"""The referring-doctor PDF and write_report (reporting.render): text, structure, safety, stability.

Assertions are on text and structure extracted with pypdf, not on bytes, except the byte-stability
check that reportlab's invariant mode exists for.
"""

from __future__ import annotations

import io
import json
import logging
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import pytest
import yaml
from pypdf import PdfReader

import reporting.render.report as render_report
from reporting.analysis import analyze
from reporting.demo import demo_study_text
from reporting.errors import InputError
from reporting.export.record import record_json
from reporting.files import write_atomic
from reporting.load import study_from_data
from reporting.render import pdf_bytes, write_report
from reporting.render.fonts import body_fonts
from reporting.render.narrative import summary
from reporting.results import Analysis
from reporting.segments import Territory

DEMOS = ["DEMO-0001", "DEMO-0002", "DEMO-0003", "DEMO-0004", "DEMO-0005"]
HOSTILE = "<b>&</para> Ωμέγα Привет مرحبا 你好 😀🫀 \"'<br/> &amp; ]]> "


def _data(name: str) -> dict[str, Any]:
    data: dict[str, Any] = yaml.safe_load(demo_study_text(f"{name}.yaml"))
    return data


def _analysis(name: str) -> Analysis:
    return analyze(study_from_data(_data(name)))


def _text(pdf: bytes) -> str:
    reader = PdfReader(io.BytesIO(pdf))
    return " ".join(" ".join(page.extract_text() for page in reader.pages).split())


@pytest.mark.parametrize("name", DEMOS)
def test_demo_pdf_states_wmsi_territories_and_conclusion(name: str) -> None:
    analysis = _analysis(name)
    pdf = pdf_bytes(analysis)
    reader = PdfReader(io.BytesIO(pdf))
    assert 1 <= len(reader.pages) <= 2
    text = _text(pdf)
    for value in analysis.wmsi.values():
        assert f"{value:.2f}" in text
    for territory in ("LAD", "LCx", "RCA"):
        assert territory in text
    assert summary(analysis) in text
    assert analysis.study.id in text
    assert f"Page 1 of {len(reader.pages)}" in text
    for caution in analysis.cautions:
        assert caution in text
    assert reader.metadata is not None
    assert reader.metadata.title == f"Stress echocardiography report {analysis.study.id}"
    assert reader.metadata.subject == summary(analysis)


def test_header_tables_and_sign_off_content() -> None:
    text = _text(pdf_bytes(_analysis("DEMO-0002")))
    for expected in (
        "Larkspur Valley Heart Clinic, Echo Laboratory",
        "Odalys Fenwick-Marr",
        "2026-10-15",
        "Exertional dyspnoea and typical angina; diabetes, hypertension.",
        "Report status: PRELIMINARY",
        "Preliminary report: not yet signed",
        "Signature",
        "22848",  # rate–pressure product at peak: 136 × 168
        "88 %",  # peak heart rate as % of predicted (136 / 154)
        "reversible 7, 8, 13, 14, 17",
        "Wall motion – peak",
        "Perfusion – peak",
    ):
        assert expected in text, expected


def test_exercise_results_beside_the_haemodynamics_of_an_exercise_study() -> None:
    # Duke treadmill score: Mark DB et al., NEJM 1991; heart-rate recovery <= 18 bpm at 1 minute is
    # abnormal in stress echo: Watanabe J et al., Circulation 2001;104:1911
    text = _text(pdf_bytes(_analysis("DEMO-0004")))
    for expected in (
        "Exercise time",
        "7.5 min",
        "Max ST deviation",
        "2 mm",
        "1 – non-limiting",
        "HR recovery, 1st min",
        "18 bpm (abnormal, cut-off ≤ 18)",
        "−6.5 (intermediate risk)",
        "9.2 METs",
    ):
        assert expected in text, expected
    data = _data("DEMO-0004")
    data["exercise"]["hr_recovery_1min_bpm"] = 19  # above the cut-off (Watanabe 2001)
    assert "19 bpm (normal, cut-off ≤ 18)" in _text(pdf_bytes(analyze(study_from_data(data))))


def test_no_exercise_table_without_an_exercise_test() -> None:
    text = _text(pdf_bytes(_analysis("DEMO-0002")))
    assert "Exercise time" not in text and "HR recovery" not in text


def test_same_input_gives_the_same_bytes() -> None:
    first = pdf_bytes(_analysis("DEMO-0002"))
    second = pdf_bytes(_analysis("DEMO-0002"))
    assert first == second


def test_letter_paper_and_unknown_paper() -> None:
    reader = PdfReader(io.BytesIO(pdf_bytes(_analysis("DEMO-0001"), paper="Letter")))
    box = reader.pages[0].mediabox
    assert (round(float(box.width)), round(float(box.height))) == (612, 792)
    with pytest.raises(InputError, match="paper"):
        pdf_bytes(_analysis("DEMO-0001"), paper="A3")


def test_hostile_text_in_every_free_text_field_of_the_study_renders() -> None:
    data = _data("DEMO-0002")
    short = (HOSTILE + "W" * 200)[:200]  # fields limited to 200 characters
    long = HOSTILE + "W" * 300 + " " + HOSTILE
    data["study"].update(lab=short, reader=short, sonographer=short, referring_physician=short)
    data["patient"]["name"] = short
    data["indication"] = long
    data["comments"] = f"{long}\n{long}"
    data["contrast"]["agent"] = short
    for stage in data["stages"].values():
        stage["symptoms"] = long
    pdf = pdf_bytes(analyze(study_from_data(data)))
    text = _text(pdf)
    assert "<b>&</para>" in text  # shown literally, not taken as markup
    if body_fonts().regular == "DejaVuSans":  # the fallback font covers Latin only
        assert "Привет" in text and "Ωμέγα" in text


def test_hostile_text_in_every_string_of_the_analysis_renders() -> None:
    analysis = _analysis("DEMO-0003")
    word = "X" * 300
    nasty = f"{HOSTILE}{word} {HOSTILE}"
    study = analysis.study.model_copy(
        update={
            k: nasty
            for k in (
                "lab",
                "lab_address",
                "reader",
                "sonographer",
                "referring_physician",
                "indication",
                "comments",
            )
        }
    )
    patient = analysis.patient.model_copy(update={"name": nasty, "id": nasty})
    haemo = {s: h.model_copy(update={"symptoms": nasty}) for s, h in analysis.haemodynamics.items()}
    notes = [n.model_copy(update={"text": nasty}) for n in analysis.notes]
    hostile = analysis.model_copy(
        update={
            "study": study,
            "patient": patient,
            "haemodynamics": haemo,
            "notes": notes,
            "contrast_used": True,
            "contrast_agent": nasty,
            "territory_map": analysis.territory_map.model_copy(update={"title": nasty}),
        }
    )
    text = _text(pdf_bytes(hostile))
    assert "<b>&</para>" in text
    assert summary(hostile) in text


def test_every_segment_unseen_at_peak_still_renders_with_a_clear_statement() -> None:
    data = _data("DEMO-0002")
    data["stages"]["peak"]["wall_motion"] = "x" * 17
    data["stages"]["peak"]["perfusion"] = "x" * 17
    analysis = analyze(study_from_data(data))
    text = _text(pdf_bytes(analysis))
    assert "wall motion not scored yet (no segment has a score)" in text
    assert "Non-diagnostic for ischaemia" in text
    assert "WMSI not computed" in text


@pytest.mark.parametrize("model", [16, 18])
def test_16_and_18_segment_studies_render(model: int) -> None:
    data = _data("DEMO-0004")
    data["segment_model"] = model
    data["stages"]["rest"]["wall_motion"] = "1" * model
    data["stages"]["peak"]["wall_motion"] = "111211" + "1" * (model - 6)
    analysis = analyze(study_from_data(data))
    pdf = pdf_bytes(analysis)
    text = _text(pdf)
    assert f"{model}-segment model" in text
    assert f"{model} segments" in text  # the whole-LV row of the territory table
    assert len(PdfReader(io.BytesIO(pdf)).pages) <= 2


def test_write_report_writes_record_maps_and_pdf(tmp_path: Path) -> None:
    analysis = _analysis("DEMO-0002")
    paths = write_report(analysis, tmp_path)
    names = [p.name for p in paths]
    assert names == [
        "DEMO-0002.record.json",
        "DEMO-0002.wall_motion-rest.svg",
        "DEMO-0002.wall_motion-low_dose.svg",
        "DEMO-0002.wall_motion-peak.svg",
        "DEMO-0002.segments.svg",
        "DEMO-0002.response.svg",
        "DEMO-0002.perfusion-rest.svg",
        "DEMO-0002.perfusion-peak.svg",
        "DEMO-0002.pdf",
    ]
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(names)  # no temporary files left
    assert (tmp_path / "DEMO-0002.record.json").read_text("utf-8") == record_json(analysis)
    assert json.loads((tmp_path / "DEMO-0002.record.json").read_text("utf-8"))["study"]["id"]
    for path in paths:
        if path.suffix == ".svg":
            ET.parse(path)
    assert (tmp_path / "DEMO-0002.pdf").read_bytes().startswith(b"%PDF-")


def test_write_report_leaves_nothing_behind_when_a_write_fails(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    def failing(path: Path, data: bytes | str) -> None:
        if path.suffix == ".pdf":
            raise OSError("disk full")
        write_atomic(path, data)

    monkeypatch.setattr(render_report, "write_atomic", failing)
    with pytest.raises(OSError, match="disk full"):
        write_report(_analysis("DEMO-0002"), tmp_path)
    assert list(tmp_path.iterdir()) == []


def test_write_report_keeps_files_that_were_there_before(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    analysis = _analysis("DEMO-0001")
    write_report(analysis, tmp_path)
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}

    def failing(path: Path, data: bytes | str) -> None:
        raise OSError("read-only")

    monkeypatch.setattr(render_report, "write_atomic", failing)
    with pytest.raises(OSError):
        write_report(analysis, tmp_path)
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir()} == before


def test_deidentified_record_renders_with_the_year_only() -> None:
    analysis = _analysis("DEMO-0002")
    study = analysis.study.model_copy(update={"date": None, "deidentified": True})
    patient = analysis.patient.model_copy(update={"name": None, "birth_date": None})
    text = _text(pdf_bytes(analysis.model_copy(update={"study": study, "patient": patient})))
    assert "Study date 2026 " in text
    assert "2026-10-15" not in text
    assert "de-identified" in text


def test_lab_templates_reach_the_pdf(tmp_path: Path) -> None:
    (tmp_path / "narrative.txt.j2").write_text(
        "Lab impression\n{{ summary }}\nReviewed under the Brackenridge protocol.\n",
        encoding="utf-8",
    )
    analysis = _analysis("DEMO-0004")
    text = _text(pdf_bytes(analysis, templates_dir=tmp_path))
    assert "Lab impression" in text
    assert "Reviewed under the Brackenridge protocol." in text
    for caution in analysis.cautions:  # the cautions never depend on a lab template
        assert caution in text


EDGE_STUDIES: dict[str, dict[str, Any]] = {
    # only a resting stage: nothing to compare, so the study cannot answer the question
    "rest-only": {
        "schema_version": 1,
        "study": {"id": "EDGE-1", "date": "2026-01-05"},
        "protocol": "dobutamine",
        "stages": {"rest": {"wall_motion": "1" * 17}},
    },
    # perfusion scored without any wall-motion scores
    "perfusion-only": {
        "schema_version": 1,
        "study": {"id": "EDGE-2", "date": "2026-01-05"},
        "protocol": "vasodilator",
        "contrast": {"administration": "infusion"},
        "stages": {"rest": {"perfusion": "1" * 17}, "peak": {"perfusion": "11122" + "1" * 12}},
    },
    # 5-point scale with an aneurysmal segment, no age (targets cannot be computed)
    "five-point-no-age": {
        "schema_version": 1,
        "study": {"id": "EDGE-3", "date": "2026-01-05"},
        "protocol": "pacing",
        "wall_motion_scale": 5,
        "stages": {
            "rest": {"wall_motion": "5" + "1" * 16},
            "peak": {"wall_motion": "5" + "2" * 16, "heart_rate_bpm": 120},
        },
    },
}


@pytest.mark.parametrize("case", sorted(EDGE_STUDIES))
def test_unusual_studies_render(case: str) -> None:
    analysis = analyze(study_from_data(EDGE_STUDIES[case]))
    text = _text(pdf_bytes(analysis))
    assert summary(analysis) in text


def test_rest_only_study_says_why_it_is_non_diagnostic() -> None:
    analysis = analyze(study_from_data(EDGE_STUDIES["rest-only"]))
    # A study with no stress stage says "no stress images", not "stress not adequate" (issue 12).
    assert summary(analysis) == "Non-diagnostic for ischaemia: no stress images were recorded."
    assert "no stress images" in _text(pdf_bytes(analysis))
    assert "stress not adequate" not in _text(pdf_bytes(analysis))


def _kinetics_demo(folder: Path) -> Analysis:
    """DEMO-0006 (vasodilator perfusion with time-intensity curves), copied with its curve file."""
    from importlib import resources

    from reporting.analysis import analyze_file

    demo = resources.files("reporting.data").joinpath("demo")
    names = [p.name for p in demo.iterdir() if p.name.startswith("DEMO-0006.")]
    assert "DEMO-0006.yaml" in names, "DEMO-0006 is the demo study with time-intensity curves"
    for name in names:
        (folder / name).write_bytes(demo.joinpath(name).read_bytes())
    return analyze_file(folder / "DEMO-0006.yaml")


def test_kinetic_reserve_map_table_and_narrative(tmp_path: Path) -> None:
    # Wei K et al., Circulation 1998 (A·β ∝ flow); reserve = stress ÷ rest (Vogel R et al., Heart 2009)
    analysis = _kinetics_demo(tmp_path)
    assert analysis.kinetics is not None
    paths = write_report(analysis, tmp_path / "out")
    reserve_svg = tmp_path / "out" / f"{analysis.study.id}.kinetic_reserve.svg"
    assert reserve_svg in paths
    root = ET.parse(reserve_svg).getroot()
    assert len([e for e in root.iter() if e.get("class") == "segment"]) == 17
    text = _text((tmp_path / "out" / f"{analysis.study.id}.pdf").read_bytes())
    assert "Flow reserve (A·β)" in text
    assert "Replenishment kinetics" in text
    lad = analysis.kinetics.territory_reserve[Territory.LAD]
    assert lad.A_beta_reserve is not None
    assert f"LAD: A·β (flow) reserve {lad.A_beta_reserve:.2f}" in text


def test_pdf_heart_rate_figures_agree_with_a_just_missed_target() -> None:
    # Age 55, 220 − age: target 0.85 × 165 = 140.25 bpm; a peak of 140 bpm (84.8 %) misses it, so
    # the answer box, the haemodynamics table and the narrative print 84 % and a target of 141 bpm.
    data = _data("DEMO-0001")
    data["patient"]["age_years"] = 55
    data["stages"]["peak"]["heart_rate_bpm"] = 140
    analysis = analyze(study_from_data(data))
    assert not analysis.stress.adequate
    text = _text(pdf_bytes(analysis))
    assert "peak heart rate 140 bpm, 84 % of predicted; stress not adequate" in text
    assert "140 84 %" in text  # the peak row of the haemodynamics table
    assert "target 141 bpm" in text and "the target of 141 bpm (85 %) was not reached" in text
    assert "target 140 bpm" not in text and "85 % of predicted" not in text


def test_text_the_font_cannot_show_is_named_in_a_warning(caplog: pytest.LogCaptureFixture) -> None:
    # The body font has no CJK glyphs: the name prints as replacement marks, so the loss is logged
    # (naming the field, not the text, which identifies the patient) and the report still renders.
    data = _data("DEMO-0002")
    data["patient"]["name"] = "Quillon 山田花子"  # invented
    analysis = analyze(study_from_data(data))
    with caplog.at_level(logging.WARNING, logger="reporting.render"):
        text = _text(pdf_bytes(analysis))
    assert summary(analysis) in text and "Quillon" in text
    lost = [r for r in caplog.records if r.levelno == logging.WARNING]
    assert len(lost) == 1, [r.getMessage() for r in lost]
    message = lost[0].getMessage()
    assert "patient.name" in message and "4 characters" in message
    assert "山田花子" not in message


def test_no_warning_when_every_character_can_be_shown(caplog: pytest.LogCaptureFixture) -> None:
    with caplog.at_level(logging.WARNING, logger="reporting.render"):
        pdf_bytes(_analysis("DEMO-0002"))
    assert not [r for r in caplog.records if r.levelno >= logging.WARNING]
