"""Study data a lab records (issue 12, item 3): procedure, vasodilator agent and dose, image quality
per stage, referral question, the reader's impression and recommendations, other echo findings;
heart-rate recovery judged with the stress-echo cut-off; workload words in exercise studies; "% of
predicted" only where the heart-rate target is a criterion.
"""

from __future__ import annotations

import ast
import copy
import inspect
import io
import json
from enum import StrEnum
from pathlib import Path
from typing import Any

import jsonschema  # type: ignore[import-untyped, unused-ignore]
import pytest
import yaml
from conftest import NORMAL_17, study_dict
from pypdf import PdfReader

from reporting import procedure
from reporting.analysis import analyze
from reporting.deidentify import deidentify
from reporting.demo import demo_study_text
from reporting.errors import InputErrors
from reporting.export.record import record_json
from reporting.load import study_from_data
from reporting.model import Stage
from reporting.render import diagram, pdf_bytes
from reporting.render.fonts import MAP_FONTS
from reporting.render.narrative import build_narrative, conduct, narrative_text, text_blocks
from reporting.render.pdf.styles import paragraph_styles
from reporting.render.tables import haemodynamics_table
from reporting.results import Analysis
from reporting.settings import Settings, default_settings, load_settings

SCHEMAS = Path(__file__).resolve().parent.parent / "schemas"
HOSTILE = "<b>&</para> \"'<br/> &amp; ]]>"
"""Free text that breaks reportlab markup unless escaped."""


def _analysed(*, settings: Settings | None = None, **changes: Any) -> Analysis:
    return analyze(study_from_data(study_dict(**changes)), settings=settings)


def _pdf_text(analysis: Analysis) -> str:
    reader = PdfReader(io.BytesIO(pdf_bytes(analysis)))
    return " ".join(" ".join(page.extract_text() for page in reader.pages).split())


def _demo(name: str) -> dict[str, Any]:
    data: dict[str, Any] = yaml.safe_load(demo_study_text(f"{name}.yaml"))
    return data


def _record(analysis: Analysis) -> Any:
    return json.loads(record_json(analysis))


def _at(record: Any, path: str) -> Any:
    for key in path.split("."):
        record = record[key]
    return record


VASODILATOR: dict[str, Any] = {"protocol": "vasodilator"}

# (id, study changes, record path, expected record value)
VALID: list[tuple[str, dict[str, Any], str, Any]] = [
    (
        "referral-question",
        {"referral_question": "Ischaemia in the LAD territory?"},
        "study.referral_question",
        "Ischaemia in the LAD territory?",
    ),
    (
        "impression",
        {"impression": "  Normal study.  "},  # surrounding blanks are stripped
        "study.impression",
        "Normal study.",
    ),
    (
        "recommendations",
        {"recommendations": "No further test."},
        "study.recommendations",
        "No further test.",
    ),
    (
        "other-findings",
        {"other_findings": "Mild aortic stenosis."},
        "study.other_findings",
        "Mild aortic stenosis.",
    ),
    (
        "rhythm",
        {"procedure": {"baseline_rhythm": "atrial_fibrillation"}},
        "procedure.baseline_rhythm",
        "atrial_fibrillation",
    ),
    (
        "ecg",
        {"procedure": {"baseline_ecg": ["left_bundle_branch_block", "q_waves"]}},
        "procedure.baseline_ecg",
        ["left_bundle_branch_block", "q_waves"],
    ),
    (
        "beta-blocker",
        {"procedure": {"medications": {"beta_blocker": "taken"}}},
        "procedure.medications",
        {"beta_blocker": "taken", "rate_limiting_calcium_channel_blocker": None, "nitrate": None},
    ),
    (
        "stop-reasons",
        {"procedure": {"stop_reasons": ["target_heart_rate", "angina"]}},
        "procedure.stop_reasons",
        ["target_heart_rate", "angina"],
    ),
    (
        "complications",
        {"procedure": {"complications": ["none"]}},
        "procedure.complications",
        ["none"],
    ),
    (
        "arrhythmias",
        {"procedure": {"arrhythmias": ["ventricular_ectopy", "non_sustained_vt"]}},
        "procedure.arrhythmias",
        ["ventricular_ectopy", "non_sustained_vt"],
    ),
    (
        "adenosine",
        {**VASODILATOR, "vasodilator": {"agent": "adenosine", "dose_ug_kg_min": 140}},
        "procedure.vasodilator",
        {"agent": "adenosine", "dose_ug_kg_min": 140.0, "dose_mg": None, "dose_mg_kg": None},
    ),
    (
        "regadenoson",
        {**VASODILATOR, "vasodilator": {"agent": "regadenoson", "dose_mg": 0.4}},
        "procedure.vasodilator.dose_mg",
        0.4,
    ),
    (
        "dipyridamole-no-dose",  # the agent alone is allowed: the dose may not be at hand
        {**VASODILATOR, "vasodilator": {"agent": "dipyridamole"}},
        "procedure.vasodilator.agent",
        "dipyridamole",
    ),
    (
        "image-quality",
        {
            "stages": {
                "rest": {"wall_motion": NORMAL_17, "image_quality": "good"},
                "peak": {"wall_motion": NORMAL_17, "image_quality": "poor"},
            }
        },
        "procedure.image_quality",
        {"rest": "good", "peak": "poor"},
    ),
]


@pytest.mark.parametrize(
    ("changes", "path", "expected"), [v[1:] for v in VALID], ids=[v[0] for v in VALID]
)
def test_each_field_reaches_the_record(changes: dict[str, Any], path: str, expected: Any) -> None:
    assert _at(_record(_analysed(**changes)), path) == expected


def test_absent_fields_are_empty_in_the_record() -> None:
    record = _record(_analysed())
    assert record["procedure"] == {
        "baseline_rhythm": None,
        "baseline_ecg": [],
        "medications": None,
        "stop_reasons": [],
        "complications": [],
        "arrhythmias": [],
        "vasodilator": None,
        "image_quality": {},
    }
    for key in ("referral_question", "impression", "recommendations", "other_findings"):
        assert record["study"][key] is None


# (id, study changes, the one expected "location: problem" line)
INVALID: list[tuple[str, dict[str, Any], str]] = [
    # not one of the rhythms
    (
        "rhythm-misspelt",
        {"procedure": {"baseline_rhythm": "sinus_rythm"}},
        "study: procedure.baseline_rhythm: 'sinus_rythm' is not allowed; input should be 'sinus', "
        "'atrial_fibrillation', 'atrial_flutter', 'paced' or 'other'",
    ),
    # "normal" contradicts any ECG finding
    (
        "ecg-normal-and-q-waves",
        {"procedure": {"baseline_ecg": ["normal", "q_waves"]}},
        "study: procedure.baseline_ecg: 'normal' cannot be combined with other entries",
    ),
    # an empty list says nothing: leave the field out instead
    (
        "ecg-empty",
        {"procedure": {"baseline_ecg": []}},
        "study: procedure.baseline_ecg: give at least one entry, or leave the field out when not recorded",
    ),
    # a free-text answer where the vocabulary is closed
    (
        "beta-blocker-free-text",
        {"procedure": {"medications": {"beta_blocker": "stopped 2 days ago"}}},
        "study: procedure.medications.beta_blocker: 'stopped 2 days ago' is not allowed; input "
        "should be 'not_prescribed', 'taken' or 'withheld'",
    ),
    # a drug name is not a field: the medications are fixed classes
    (
        "medication-by-name",
        {"procedure": {"medications": {"metoprolol": "taken"}}},
        "study: procedure.medications: unknown field 'metoprolol'",
    ),
    # the same reason twice
    (
        "stop-reason-twice",
        {"procedure": {"stop_reasons": ["angina", "fatigue", "angina"]}},
        "study: procedure.stop_reasons: angina given more than once",
    ),
    # not a stopping reason of the vocabulary; the error names the list item
    (
        "stop-reason-unknown",
        {"procedure": {"stop_reasons": ["tired"]}},
        "study: procedure.stop_reasons.0: 'tired' is not allowed; input should be "
        "'target_heart_rate', 'protocol_complete', 'fatigue', 'dyspnoea', 'angina', "
        "'new_wall_motion_abnormality', 'st_change', 'hypertension', 'hypotension', 'arrhythmia', "
        "'side_effects', 'patient_request' or 'other'",
    ),
    # "none" and a complication contradict each other
    (
        "complication-none-and-syncope",
        {"procedure": {"complications": ["none", "syncope"]}},
        "study: procedure.complications: 'none' cannot be combined with other entries",
    ),
    # "none" and an arrhythmia contradict each other
    (
        "arrhythmia-none-and-vt",
        {"procedure": {"arrhythmias": ["sustained_vt", "none"]}},
        "study: procedure.arrhythmias: 'none' cannot be combined with other entries",
    ),
    # a vasodilator agent in a dobutamine study
    (
        "vasodilator-in-dobutamine-study",
        {"vasodilator": {"agent": "adenosine", "dose_ug_kg_min": 140}},
        "study: vasodilator: a vasodilator agent is recorded but the protocol is dobutamine; use "
        "protocol: vasodilator or remove it",
    ),
    # a product (brand) name instead of a generic name
    (
        "agent-not-generic",
        {**VASODILATOR, "vasodilator": {"agent": "Brandname"}},
        "study: vasodilator.agent: 'Brandname' is not allowed; input should be 'adenosine', "
        "'regadenoson' or 'dipyridamole'",
    ),
    # regadenoson is a fixed bolus in mg, never an infusion rate
    (
        "dose-in-the-wrong-unit",
        {**VASODILATOR, "vasodilator": {"agent": "regadenoson", "dose_ug_kg_min": 140}},
        "study: vasodilator: regadenoson is dosed in mg: give dose_mg, not dose_ug_kg_min",
    ),
    # a dose cannot be negative
    (
        "negative-dose",
        {**VASODILATOR, "vasodilator": {"agent": "regadenoson", "dose_mg": -1}},
        "study: vasodilator.dose_mg: -1 is below the allowed minimum 0.0",
    ),
    # a dose without its agent
    (
        "dose-without-agent",
        {**VASODILATOR, "vasodilator": {"dose_mg": 0.4}},
        "study: vasodilator: required field 'agent' is missing",
    ),
    # image quality is good, adequate or poor
    (
        "image-quality-excellent",
        {
            "stages": {
                "rest": {"wall_motion": NORMAL_17, "image_quality": "excellent"},
                "peak": {"wall_motion": NORMAL_17},
            }
        },
        "study: stages.rest.image_quality: 'excellent' is not allowed; input should be 'good', "
        "'adequate' or 'poor'",
    ),
    # longer than the field allows
    (
        "referral-question-too-long",
        {"referral_question": "?" * 2001},
        "study: referral_question: text is longer than 2000 characters",
    ),
    (
        "other-findings-too-long",
        {"other_findings": "y" * 5001},
        "study: other_findings: text is longer than 5000 characters",
    ),
]


@pytest.mark.parametrize(
    ("changes", "expected"), [v[1:] for v in INVALID], ids=[v[0] for v in INVALID]
)
def test_each_bad_field_gives_one_located_error(changes: dict[str, Any], expected: str) -> None:
    with pytest.raises(InputErrors) as caught:
        study_from_data(study_dict(**changes))
    assert [str(p) for p in caught.value.problems] == [expected]


def _full_demo_0004() -> Analysis:
    return analyze(study_from_data(_demo("DEMO-0004")))


def test_record_round_trips_and_validates_against_the_schema() -> None:
    analysis = _full_demo_0004()
    text = record_json(analysis)
    assert Analysis.model_validate_json(text) == analysis
    schema = json.loads((SCHEMAS / "record-1.schema.json").read_text(encoding="utf-8"))
    jsonschema.Draft202012Validator(schema).validate(json.loads(text))
    study_schema = json.loads((SCHEMAS / "study-1.schema.json").read_text(encoding="utf-8"))
    jsonschema.Draft202012Validator(study_schema).validate(
        json.loads(json.dumps(_demo("DEMO-0004"), default=str))
    )


def test_a_record_without_the_new_fields_still_loads() -> None:
    # records written before issue 12 have no procedure block and no reader's text
    record = _record(_analysed())
    del record["procedure"]
    for key in ("referral_question", "impression", "recommendations", "other_findings"):
        del record["study"][key]
    old = Analysis.model_validate(record)
    assert old.procedure.stop_reasons == [] and old.study.impression is None


def _enum_members_with_docstrings(cls: type[StrEnum]) -> dict[str, bool]:
    body = ast.parse(inspect.getsource(cls)).body[0]
    assert isinstance(body, ast.ClassDef)
    found: dict[str, bool] = {}
    statements = body.body
    for i, node in enumerate(statements):
        if isinstance(node, ast.Assign) and isinstance(node.targets[0], ast.Name):
            nxt = statements[i + 1] if i + 1 < len(statements) else None
            found[node.targets[0].id] = (
                isinstance(nxt, ast.Expr)
                and isinstance(nxt.value, ast.Constant)
                and isinstance(nxt.value.value, str)
            )
    return found


VOCABULARIES = [
    (procedure.BaselineRhythm, conduct.RHYTHM_WORDS),
    (procedure.BaselineEcg, conduct.ECG_WORDS),
    (procedure.MedicationUse, conduct.USE_WORDS),
    (procedure.StopReason, conduct.STOP_WORDS),
    (procedure.Complication, conduct.COMPLICATION_WORDS),
    (procedure.Arrhythmia, conduct.ARRHYTHMIA_WORDS),
    (procedure.VasodilatorAgent, conduct.AGENT_WORDS),
    (procedure.ImageQuality, conduct.QUALITY_WORDS),
]


@pytest.mark.parametrize(
    ("vocabulary", "words"), VOCABULARIES, ids=[v[0].__name__ for v in VOCABULARIES]
)
def test_every_member_has_a_docstring_and_report_words(
    vocabulary: type[StrEnum], words: dict[Any, str]
) -> None:
    documented = _enum_members_with_docstrings(vocabulary)
    assert set(documented) == {m.name for m in vocabulary}
    assert all(documented.values()), [name for name, ok in documented.items() if not ok]
    assert set(words) == set(vocabulary)


def test_every_agent_names_a_dose_field_of_the_model() -> None:
    fields = set(procedure.Vasodilator.model_fields)
    assert set(procedure.DOSE_FIELD) == set(procedure.VasodilatorAgent)
    assert set(procedure.DOSE_FIELD.values()) <= fields
    assert set(procedure.DOSE_UNITS) == fields - {"agent"}


# --- narrative and PDF ----------------------------------------------------------------------------


def test_narrative_gives_the_conduct_and_the_readers_text_in_their_sections() -> None:
    blocks = dict(text_blocks(narrative_text(_full_demo_0004())))
    assert blocks["Test conduct"] == [
        "Resting ECG: sinus rhythm, ST depression at rest.",
        "Beta-blocker withheld before the test; nitrate not prescribed.",
        "Exercise stopped for: fatigue, angina.",
        "Complications: none.",
        "Arrhythmias: ventricular ectopic beats.",
        "Image quality: good at rest, adequate at peak exercise.",
    ]
    data = _demo("DEMO-0004")
    # the reader's words are the impression; the computed findings follow under their own heading
    assert blocks["Impression"] == [data["impression"].strip()]
    assert blocks["Computed findings"][0].startswith("Positive for inducible ischaemia")
    assert blocks["Recommendations"] == [data["recommendations"].strip()]
    assert blocks["Other echocardiographic findings"] == [data["other_findings"]]


def test_vasodilator_sentence_gives_agent_dose_and_unit() -> None:
    analysis = _analysed(
        **VASODILATOR,
        vasodilator={"agent": "dipyridamole", "dose_mg_kg": 0.84},
        procedure={"stop_reasons": ["protocol_complete"]},
    )
    assert dict(text_blocks(narrative_text(analysis)))["Test conduct"] == [
        "Vasodilator: dipyridamole 0.84 mg/kg.",
        "Stress stopped for: protocol completed.",  # "Exercise stopped" only in exercise studies
    ]


def test_reader_sections_follow_the_computed_impression_and_are_left_out_when_absent() -> None:
    keys = [s.key for s in build_narrative(_full_demo_0004()).sections]
    assert keys[:4] == ["impression", "recommendations", "computed_findings", "stress"]
    keys = [s.key for s in build_narrative(_analysed()).sections]
    assert not {"computed_findings", "recommendations", "conduct", "other_findings"} & set(keys)


def test_pdf_shows_the_study_data() -> None:
    text = _pdf_text(_full_demo_0004())
    data = _demo("DEMO-0004")
    for expected in (
        f"Referral question: {data['referral_question']}",
        "Computed findings",
        data["impression"].strip(),
        "Recommendations",
        data["recommendations"].strip(),
        "Test conduct",
        "Resting ECG: sinus rhythm, ST depression at rest.",
        "Beta-blocker withheld before the test",
        "Exercise stopped for: fatigue, angina.",
        "Arrhythmias: ventricular ectopic beats.",
        "Image quality: good at rest, adequate at peak exercise.",
        "Other echocardiographic findings",
        data["other_findings"],
    ):
        assert expected in text, expected


@pytest.mark.parametrize(
    "field", ["referral_question", "impression", "recommendations", "other_findings"]
)
def test_free_text_is_escaped_in_the_pdf(field: str) -> None:
    # unescaped, "<b>&</para>" is reportlab markup and the PDF fails to build
    changes: dict[str, Any] = {field: HOSTILE}
    text = _pdf_text(_analysed(**changes))
    assert HOSTILE.strip() in text


# --- workload words -------------------------------------------------------------------------------

THREE_STAGES = {
    "rest": {"heart_rate_bpm": 70, "wall_motion": NORMAL_17},
    "low_dose": {"heart_rate_bpm": 100, "wall_motion": "111111 111111 1111 1"},
    "peak": {"heart_rate_bpm": 150, "wall_motion": "111211 111111 1111 1"},
}


@pytest.mark.parametrize(
    ("protocol", "low", "peak"),
    [
        # Exercise terms (common practice): workloads in exercise studies ...
        ("treadmill", "low workload", "peak exercise"),
        ("bicycle", "low workload", "peak exercise"),
        # ... and "low dose" for dobutamine only
        ("dobutamine", "low dose", "peak"),
    ],
    ids=["treadmill", "bicycle", "dobutamine"],
)
def test_stage_words_follow_the_protocol(protocol: str, low: str, peak: str) -> None:
    analysis = _analysed(protocol=protocol, stages=copy.deepcopy(THREE_STAGES))
    blocks = dict(text_blocks(narrative_text(analysis)))
    wall = blocks["Wall motion"]
    assert wall[1].startswith(f"{low.capitalize()}: normal wall motion")
    assert wall[2].startswith(f"{peak.capitalize()}: WMSI")
    assert f"at worst hypokinetic at {peak}." in " ".join(blocks["Impression"])
    titles = [s.title for s in diagram.map_specs(analysis)]
    assert f"Wall motion – {low}" in titles and f"Wall motion – {peak}" in titles
    pdf = _pdf_text(analysis)
    assert f"WMSI {low}" in pdf and f"WMSI {peak}" in pdf
    # the record keeps the stage keys whatever the words
    assert list(_record(analysis)["wmsi"]) == ["rest", "low_dose", "peak"]
    if protocol != "dobutamine":
        assert "low dose" not in pdf.lower()


# --- % of predicted -------------------------------------------------------------------------------


def _table_rows(analysis: Analysis) -> list[list[str]]:
    st = paragraph_styles(MAP_FONTS)
    table = haemodynamics_table(analysis, 500, st)
    return [[c if isinstance(c, str) else c.text for c in row] for row in table._cellvalues]


def test_percent_of_predicted_is_shown_at_stress_stages_only() -> None:
    # 70 bpm at rest is 43 % of 160 (220 - 60): meaningless as a criterion, so a dash
    rows = _table_rows(_analysed())
    column = rows[0].index("% of predicted")
    assert [r[0] for r in rows[1:]] == ["Rest", "Peak"]
    assert rows[1][column] == "–"
    assert rows[2][column] == "93 %"  # 150 / 160 = 93.75 %, printed rounded down


def test_percent_of_predicted_is_not_shown_for_vasodilator_stress() -> None:
    # Common practice: the heart-rate target does not apply to vasodilator stress
    analysis = _analysed(**VASODILATOR)
    assert "% of predicted" not in _table_rows(analysis)[0]
    assert "% of predicted" not in _pdf_text(analysis)
    assert "% of predicted" in _pdf_text(_analysed())  # a dobutamine study shows it


# --- heart-rate recovery --------------------------------------------------------------------------


def _exercise(recovery: int) -> dict[str, Any]:
    return {
        "duration_min": 9,
        "max_st_deviation_mm": 0,
        "angina_index": 0,
        "hr_recovery_1min_bpm": recovery,
    }


@pytest.mark.parametrize(
    ("recovery", "abnormal"),
    [
        (18, True),  # Watanabe J et al., Circulation 2001;104:1911: <= 18 bpm at 1 min abnormal
        (19, False),  # Watanabe 2001: above the cut-off
        (0, True),  # no fall at all
    ],
    ids=["at-cut-off", "above", "no-fall"],
)
def test_heart_rate_recovery_uses_the_stress_echo_cut_off(recovery: int, abnormal: bool) -> None:
    analysis = _analysed(protocol="treadmill", exercise=_exercise(recovery))
    s = analysis.stress
    assert s.hr_recovery_abnormal is abnormal
    assert s.hr_recovery_abnormal_max_bpm == default_settings().hr_recovery_abnormal_max_bpm
    assert s.hr_recovery_source is not None and "Watanabe" in s.hr_recovery_source


def test_a_lab_cut_off_is_used_and_named_as_a_lab_setting(tmp_path: Path) -> None:
    # Cole CR et al., NEJM 1999;341:1351: <= 12 bpm after a cool-down walk (a lab's choice)
    lab = tmp_path / "lab.yaml"
    lab.write_text("hr_recovery_abnormal_max_bpm: 12\n", encoding="utf-8")
    analysis = _analysed(settings=load_settings(lab), protocol="treadmill", exercise=_exercise(13))
    assert analysis.stress.hr_recovery_abnormal is False
    assert analysis.stress.hr_recovery_source is not None
    assert analysis.stress.hr_recovery_source.startswith(
        "Lab setting hr_recovery_abnormal_max_bpm = 12"
    )
    stress = dict(text_blocks(narrative_text(analysis)))["Stress and adequacy"]
    assert (
        "Heart-rate recovery 13 bpm in the first minute after exercise: normal, above the cut-off "
        "of 12 bpm (lab setting)." in stress
    )


# --- de-identification ----------------------------------------------------------------------------


def test_deidentified_record_drops_the_free_text_and_keeps_the_categories() -> None:
    analysis = _full_demo_0004()
    clean = deidentify(analysis, b"k" * 32, keep_text=False)
    for key in ("referral_question", "impression", "recommendations", "other_findings"):
        assert getattr(analysis.study, key) is not None
        assert getattr(clean.study, key) is None
    assert clean.procedure == analysis.procedure
    assert Stage.PEAK in clean.procedure.image_quality
