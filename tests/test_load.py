"""A gallery of bad study files: each gives located errors, exit code 1 and no output file."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
import yaml
from click.testing import CliRunner
from conftest import NORMAL_17, stages, study_dict

from reporting.cli import main
from reporting.errors import InputError, InputErrors


def _yaml(data: dict[str, Any]) -> str:
    return yaml.safe_dump(data, sort_keys=False)


def _with(path: list[str], value: Any) -> str:
    data = study_dict()
    target = data
    for key in path[:-1]:
        target = target.setdefault(key, {})
    target[path[-1]] = value
    return _yaml(data)


GOOD = _yaml(study_dict())
BOMB = "a: &a [x, x, x, x, x, x, x, x, x]\nb: &b [*a, *a, *a, *a, *a, *a, *a, *a, *a]\nc: &c [*b, *b, *b, *b, *b, *b, *b, *b]\n"

# (case id, file name, content, expected location, expected problem fragment)
GALLERY: list[tuple[str, str, str | bytes, str, str]] = [
    # 16 characters where the 17-segment model needs 17.
    (
        "short-string",
        "s.yaml",
        _with(["stages", "rest", "wall_motion"], "111111 111111 1111"),
        "stages.rest.wall_motion",
        "16 scores given; the 17-segment model needs 17",
    ),
    # Scores written ring by ring with one basal score left out: the group at fault is named,
    # not "none for segment 17" (ring sizes 6, 6, 4, 1: Cerqueira MD et al., Circulation 2002).
    (
        "basal-group-short",
        "s.yaml",
        _with(["stages", "rest", "wall_motion"], "11111 111111 1111 1"),
        "stages.rest.wall_motion",
        "17: the basal group '11111' has 5 scores, not 6 (segments 1–6); use x for not visualised",
    ),
    (
        "apical-group-short",
        "s.yaml",
        _with(["stages", "peak", "perfusion"], "111111 111111 111 1"),
        "stages.peak.perfusion",
        "the apical group '111' has 3 scores, not 4 (segments 13–16)",
    ),
    # A mapping naming segment 18 in a 17-segment study.
    (
        "segment-18",
        "s.yaml",
        _with(["stages", "peak", "wall_motion"], {**{n: 1 for n in range(1, 18)}, 18: 1}),
        "stages.peak.wall_motion",
        "segment 18 does not exist in the 17-segment model",
    ),
    # Wall-motion scores stop at 4 (Lang 2015).
    (
        "score-7",
        "s.yaml",
        _with(["stages", "peak", "wall_motion"], "117111 111111 1111 1"),
        "stages.peak.wall_motion",
        "segment 3: wall-motion score 7 is out of range",
    ),
    # Perfusion scores stop at 3.
    (
        "perfusion-4",
        "s.yaml",
        _with(["stages", "peak", "perfusion"], "411111 111111 1111 1"),
        "stages.peak.perfusion",
        "segment 1: perfusion score 4 is out of range (1–3)",
    ),
    # 5 = aneurysmal only on the declared 5-point scale.
    (
        "score-5-on-4-point",
        "s.yaml",
        _with(["stages", "peak", "wall_motion"], "511111 111111 1111 1"),
        "stages.peak.wall_motion",
        "score 5 (aneurysmal) needs wall_motion_scale: 5",
    ),
    # A letter that is neither a digit nor x.
    (
        "letter-in-scores",
        "s.yaml",
        _with(["stages", "rest", "wall_motion"], "11a111 111111 1111 1"),
        "stages.rest.wall_motion",
        "character 3 is 'a'",
    ),
    # "stress" is not one of the four stages.
    (
        "unknown-stage",
        "s.yaml",
        _with(["stages", "stress"], {"heart_rate_bpm": 100}),
        "stages.stress",
        "unknown stage",
    ),
    # Text where a number belongs.
    (
        "text-for-number",
        "s.yaml",
        _with(["stages", "rest", "heart_rate_bpm"], "fast"),
        "stages.rest.heart_rate_bpm",
        "'fast' is not a number",
    ),
    # Physiologically impossible heart rate.
    (
        "heart-rate-400",
        "s.yaml",
        _with(["stages", "peak", "heart_rate_bpm"], 400),
        "stages.peak.heart_rate_bpm",
        "above the allowed maximum 260",
    ),
    ("empty-file", "s.yaml", "", "s.yaml", "file is empty"),
    ("binary-file", "s.yaml", b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR", "s.yaml", "binary file"),
    ("not-utf8", "s.yaml", "study: caf\xe9\n".encode("latin-1"), "s.yaml", "not UTF-8 text"),
    # Alias expansion ("billion laughs") is refused outright.
    ("yaml-bomb", "s.yaml", BOMB, "line 2", "anchors and aliases are not allowed"),
    ("yaml-syntax", "s.yaml", "study: {id: [\n", "line 2", "invalid YAML"),
    # The same segment twice in one mapping.
    (
        "duplicate-segment-yaml",
        "s.yaml",
        GOOD.replace("wall_motion: 111111 111111 1111 1", "wall_motion: {1: 1, 1: 2}", 1),
        "line",
        "key 1 appears twice",
    ),
    (
        "duplicate-segment-json",
        "s.json",
        json.dumps(study_dict()).replace(
            '"wall_motion": "111111 111111 1111 1"', '"wall_motion": {"1": 1, "01": 2}', 1
        ),
        "stages.rest.wall_motion",
        "segment 1 is scored twice",
    ),
    (
        "duplicate-key-json",
        "s.json",
        '{"schema_version": 1, "schema_version": 1}',
        "s.json",
        "key 'schema_version' appears twice",
    ),
    ("json-syntax", "s.json", '{"schema_version": 1,', "line 1", "invalid JSON"),
    ("top-level-list", "s.json", "[1, 2, 3]", "s.json", "must hold a mapping"),
    (
        "missing-id",
        "s.yaml",
        _with(["study"], {"date": "2026-10-14"}),
        "study",
        "required field 'id' is missing",
    ),
    # Ids become file names: anything that could escape the output folder is refused.
    ("path-like-id", "s.yaml", _with(["study", "id"], "../x"), "study.id", "id '../x' must be"),
    ("slash-id", "s.yaml", _with(["study", "id"], "a/b"), "study.id", "must be 1–64 letters"),
    ("dot-dot-id", "s.yaml", _with(["study", "id"], ".."), "study.id", "not '.' or '..'"),
    (
        "misspelt-field",
        "s.yaml",
        _with(["pateint"], {"age_years": 50}),
        "s.yaml",
        "unknown field 'pateint'",
    ),
    (
        "schema-version-2",
        "s.yaml",
        _with(["schema_version"], 2),
        "schema_version",
        "2 is not allowed",
    ),
    (
        "unknown-protocol",
        "s.yaml",
        _with(["protocol"], "swimming"),
        "protocol",
        "'swimming' is not allowed",
    ),
    ("bad-date", "s.yaml", _with(["study", "date"], "2026-13-45"), "study.date", "not a date"),
    (
        "born-after-study",
        "s.yaml",
        _with(["patient", "birth_date"], "2027-01-01"),
        "patient.birth_date",
        "birth date is after the study date",
    ),
    ("no-stages", "s.yaml", _with(["stages"], {}), "stages", "at least one stage is needed"),
    ("wrong-extension", "s.txt", GOOD, "s.txt", "unknown file type"),
    # Deep nesting would exhaust the parser's stack (a crash, not an error) if it were parsed.
    # (newer libyaml builds stop very deep input at their own limit first: either message is located)
    ("deep-yaml", "s.yaml", "a: " + "[" * 50_000 + "]" * 50_000 + "\n", "line 1", "nest"),
    (
        "deeper-than-64",
        "s.yaml",
        "a: " + "[" * 100 + "]" * 100 + "\n",
        "line 1",
        "nested more than 64 levels deep",
    ),
    ("deep-json", "s.json", "[" * 100_000 + "]" * 100_000, "s.json", "nested too deeply"),
    # YAML accepts the shape of a date but not an impossible one: reported at its field and line.
    (
        "impossible-date",
        "s.yaml",
        GOOD.replace("'2026-10-14'", "2026-02-30"),
        "line 4: study.date",
        "'2026-02-30' is not a date (use YYYY-MM-DD)",
    ),
    # An explicit tag YAML cannot build: the text it was written as, refused at its field.
    (
        "unknown-boolean",
        "s.yaml",
        GOOD.replace("schema_version: 1", "schema_version: !!bool maybe"),
        "line 1: schema_version",
        "'maybe' is not allowed",
    ),
    # Beyond Python's digit limit for int(): still located at the field, not the whole file.
    (
        "huge-integer",
        "s.json",
        json.dumps(study_dict()).replace('"schema_version": 1', '"schema_version": ' + "9" * 5000),
        "line 1: schema_version",
        "is not allowed",
    ),
    (
        "huge-integer-yaml",
        "s.yaml",
        GOOD.replace("heart_rate_bpm: 70", "heart_rate_bpm: " + "9" * 5000),
        "stages.rest.heart_rate_bpm",
        "has too many digits to be a number here",
    ),
    # YAML reads 0012 as the octal number 10: ids must be text.
    (
        "octal-id",
        "s.yaml",
        GOOD.replace("id: T-0001", "id: 0012"),
        "study.id",
        "read as a number; put the id in quotes",
    ),
    (
        "boolean-score",
        "s.yaml",
        _with(["stages", "peak", "wall_motion"], {**{n: 1 for n in range(1, 17)}, 17: True}),
        "stages.peak.wall_motion",
        "true/false",
    ),
    (
        "boolean-schema-version",
        "s.yaml",
        _with(["schema_version"], True),
        "schema_version",
        "true/false is not allowed",
    ),
    (
        "nan-heart-rate",
        "s.json",
        json.dumps(study_dict()).replace('"heart_rate_bpm": 70', '"heart_rate_bpm": NaN'),
        "stages.rest.heart_rate_bpm",
        "not a",
    ),
    (
        "nan-lvef",
        "s.json",
        json.dumps(study_dict()).replace('"heart_rate_bpm": 70', '"lvef_percent": NaN'),
        "stages.rest.lvef_percent",
        "not a finite number",
    ),
    (
        "empty-stage",
        "s.yaml",
        _with(["stages", "peak"], None),
        "stages.peak",
        "expected a mapping of fields",
    ),
    # An age from the birth date is checked like a given age.
    (
        "age-226",
        "s.yaml",
        _with(["patient"], {"birth_date": "1800-01-01"}),
        "patient.birth_date",
        "gives an age of 226 years",
    ),
    (
        "age-disagrees",
        "s.yaml",
        _with(["patient"], {"birth_date": "1960-01-01", "age_years": 40}),
        "patient.age_years",
        "disagrees with the birth date",
    ),
    ("folder-named-yaml", "dir.yaml", "", "dir.yaml", "is a folder"),
    # Second-review cases: raw checks must not crash on values pydantic rejects.
    (
        "birth-datetime",
        "s.yaml",
        _with(["patient"], {"birth_date": "1960-01-01 08:00:00"}),
        "patient.birth_date",
        "",
    ),
    (
        "float-model-with-error",
        "s.yaml",
        _yaml(
            study_dict(
                segment_model=17.0,
                stages={
                    **stages(rest=NORMAL_17, peak=NORMAL_17),
                    "rest": {"heart_rate_bpm": 5, "wall_motion": NORMAL_17},
                },
            )
        ),
        "stages.rest.heart_rate_bpm",
        "below the allowed minimum",
    ),
    (
        "superscript-key",
        "s.yaml",
        _with(["stages", "peak", "perfusion"], {"\u00b2": 1}),
        "stages.peak.perfusion",
        "",
    ),
    ("huge-literal", "s.yaml", _with(["schema_version"], "[" * 3000), "schema_version", "…"),
    (
        "missing-map-file",
        "s.yaml",
        _with(["territory_map"], "nowhere.yaml"),
        "nowhere.yaml",
        "cannot read territory map",
    ),
]


@pytest.mark.parametrize(
    "name,content,location,problem", [c[1:] for c in GALLERY], ids=[c[0] for c in GALLERY]
)
def test_bad_input_is_located_and_writes_nothing(
    tmp_path: Path, name: str, content: str | bytes, location: str, problem: str
) -> None:
    study = tmp_path / name
    if name == "dir.yaml":
        study.mkdir()
    elif isinstance(content, bytes):
        study.write_bytes(content)
    else:
        study.write_text(content, encoding="utf-8")
    out = tmp_path / "record.json"
    result = CliRunner().invoke(main, ["analyze", str(study), "-o", str(out)])
    assert result.exit_code == 1, result.output
    lines = result.stderr.strip().splitlines()
    assert lines and all(line.startswith("Error: ") for line in lines), result.stderr
    assert any(location in line and problem in line for line in lines), result.stderr
    assert "Traceback" not in result.output
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir() if p.name != name and p.name != "nowhere.yaml"] == []


def test_every_problem_is_listed_at_once(tmp_path: Path) -> None:
    data = study_dict()
    data["protocol"] = "swimming"
    data["stages"]["rest"]["heart_rate_bpm"] = "fast"
    data["stages"]["peak"]["wall_motion"] = "117111 111111 1111 9"
    study = tmp_path / "s.yaml"
    study.write_text(_yaml(data))
    result = CliRunner().invoke(main, ["validate", str(study)])
    assert result.exit_code == 1
    errors = [line for line in result.stderr.splitlines() if line.startswith("Error: ")]
    assert len(errors) == 4, result.stderr
    lines = _yaml(data).splitlines()
    peak = lines.index("  peak:")
    line = next(i for i in range(peak, len(lines)) if "wall_motion:" in lines[i]) + 1
    assert (
        f"Error: {study}: line {line}: stages.peak.wall_motion: segment 17: wall-motion score 9 "
        "is out of range" in result.stderr
    )


def test_validate_lists_each_file(tmp_path: Path) -> None:
    good, bad = tmp_path / "good.yaml", tmp_path / "bad.yaml"
    good.write_text(GOOD)
    bad.write_text(_with(["protocol"], "swimming"))
    result = CliRunner().invoke(main, ["validate", str(good), str(bad)])
    assert result.exit_code == 1
    assert f"ok: {good}" in result.stdout
    assert f"Error: {bad}: line 8: protocol:" in result.stderr
    assert "1 of 2 file(s) have problems." in result.stderr


def test_field_errors_do_not_hide_whole_study_problems(tmp_path: Path) -> None:
    # A field error (heart rate), a model-level error (17 scores in an 18-segment study) and an
    # age problem are all reported in one run.
    data = study_dict(segment_model=18, patient={"birth_date": "2030-01-01"})
    data["stages"]["rest"]["heart_rate_bpm"] = 999
    data["stages"]["rest"]["wall_motion"] = "111111 111111 111111"
    study = tmp_path / "s.yaml"
    study.write_text(_yaml(data))
    result = CliRunner().invoke(main, ["validate", str(study)])
    assert result.exit_code == 1
    text = result.stderr
    assert "stages.rest.heart_rate_bpm: 999 is above the allowed maximum 260" in text
    assert "stages.peak.wall_motion: 17 scores given; the 18-segment model needs 18" in text
    assert "patient.birth_date: birth date is after the study date" in text
    assert len([line for line in text.splitlines() if line.startswith("Error: ")]) == 3


PEEK_CASES = [
    ("schema_version: 1\nstudy: {id: T-1, date: 2026-01-01}\n", "T-1"),
    ("study:\n  date: 2026-01-01\n  id: 'ABC'\n", "ABC"),
    ("study:\n  id: 0012\n", None),  # a number to YAML, refused on loading
    ("patient: {id: P-1}\nstudy: {id: S-9}\n", "S-9"),
    ("study:\n  nested: {id: no}\n  list: [{id: no}]\n  id: yes-1\n", "yes-1"),
    ("study: [a, id, T-1]\n", None),
    ("a: &x T-2\nstudy: {id: *x}\n", None),
    ("study: {id: [a]}\n", None),
    ("study: {id: T-3\n", "T-3"),  # stops at the id: a later syntax error is found on loading
    # a list or mapping as a key (refused on loading) must not shift keys and values
    ("study:\n  ? [a]\n  : id\n  id2: X\n  id: REAL\n", None),
    ("study:\n  ? {id: FAKE}\n  : 1\n  id: REAL\n", None),
]


@pytest.mark.parametrize("text,expected", PEEK_CASES, ids=[str(i) for i in range(len(PEEK_CASES))])
def test_peeking_at_the_id_agrees_with_loading(text: str, expected: str | None) -> None:
    from reporting.documents import peek_yaml_text

    assert peek_yaml_text(text, ("study", "id")) == expected


def _nested(depth: int, mapping: bool) -> object:
    value: object = "x"
    for level in range(depth):
        value = {f"k{level}": value} if mapping and level % 2 else [value]
    return value


@pytest.mark.parametrize("depth", [10, 63, 64, 65, 90])
@pytest.mark.parametrize("flow", [True, False], ids=["flow", "block"])
@pytest.mark.parametrize("mapping", [True, False], ids=["mixed", "lists"])
def test_cheap_depth_bound_never_misses_deep_nesting(depth: int, flow: bool, mapping: bool) -> None:
    # The pre-check may only skip the token scan when nesting cannot exceed the limit.
    from reporting.documents import MAX_NESTING, _needs_event_check

    text = yaml.safe_dump({"a": _nested(depth, mapping)}, default_flow_style=flow, width=10_000)
    if depth + 1 > MAX_NESTING:
        assert _needs_event_check(text)


@pytest.mark.parametrize(
    "text",
    [
        "a:\n"
        + "".join("\ufeff" + " " * i + "k:\n" for i in range(1, 100)),  # a BOM at each line start
        "a: " + "[k: " * 40 + "x" + "]" * 40 + "\n",  # each flow pair opens two levels
        "a:\n" + "".join(" " * (2 * i) + "- k:\n" for i in range(40)),  # indentless ladder
    ],
    ids=["bom-indent", "flow-pairs", "ladder"],
)
def test_nesting_limit_cannot_be_dodged(text: str) -> None:
    # Second-review cases: each nests deeper than the limit in fewer tokens than levels.
    from reporting.documents import parse_yaml

    with pytest.raises(InputError, match="nested more than 64 levels deep"):
        parse_yaml(text, "s.yaml")


def test_symlink_loop_is_a_located_error(tmp_path: Path) -> None:
    (tmp_path / "loop").symlink_to(tmp_path / "loop")
    study = tmp_path / "s.yaml"
    study.write_text(
        _yaml(study_dict(perfusion_curves="loop", contrast={"administration": "infusion"}))
    )
    result = CliRunner().invoke(main, ["analyze", str(study)])
    assert result.exit_code == 1
    assert "perfusion_curves" in result.stderr and "Traceback" not in result.output


# --- stages in any order, every problem with its line (#12 item 4) --------------------------------


def _record(tmp_path: Path, name: str, text: str) -> dict[str, Any]:
    study = tmp_path / name
    study.write_text(text, encoding="utf-8")
    result = CliRunner().invoke(main, ["analyze", str(study)])
    assert result.exit_code == 0, result.stderr
    return dict(json.loads(result.stdout))


FOUR_STAGES = study_dict(
    protocol="dobutamine",
    stages=stages(
        rest=NORMAL_17,
        low_dose="111111 111111 1111 1",
        peak="111111 111111 2211 1",  # apical segments worse at peak: ischaemic
        recovery="111111 111111 2111 1",
    ),
)


@pytest.mark.parametrize(
    "name,text",
    [
        # JSON written with sorted keys: low_dose, peak, recovery, rest.
        ("s.json", json.dumps(FOUR_STAGES, sort_keys=True, indent=1)),
        ("s.yaml", yaml.safe_dump(FOUR_STAGES, sort_keys=True)),
        # Reversed by hand.
        (
            "s.yaml",
            _yaml({**FOUR_STAGES, "stages": dict(reversed(FOUR_STAGES["stages"].items()))}),
        ),
    ],
    ids=["json-sorted-keys", "yaml-sorted-keys", "yaml-reversed"],
)
def test_stage_names_fix_the_order(tmp_path: Path, name: str, text: str) -> None:
    # Oracle: the same study written in protocol order.
    expected = _record(tmp_path, "ordered.yaml", _yaml(FOUR_STAGES))
    got = _record(tmp_path, name, text)
    assert list(got["wmsi"]) == ["rest", "low_dose", "peak", "recovery"]
    assert got["segments"] == expected["segments"] and got["conclusion"] == expected["conclusion"]
    assert got["conclusion"]["ischemia"] is True


# A study with one problem on each marked line; the marker names the field reported there.
MANY_PROBLEMS = """\
schema_version: 1
study:
  id: T-0001
  date: 2026-02-30            # PROBLEM study.date: February has no 30th (YAML cannot build it)
patient:
  age_years: 61
  sex: f                      # PROBLEM patient.sex: an abbreviation, not one of the words
  height_cm: 17O              # PROBLEM patient.height_cm: letter O typed for a zero
protocol: treadmill
stages:
  peak:                       # (listed before rest: allowed, the names fix the order)
    heart_rate_bpm: 1{digits}  # PROBLEM stages.peak.heart_rate_bpm: too many digits for int()
    wall_motion: {{1: 1, 2: 7}}  # PROBLEM stages.peak.wall_motion: score 7 and 15 segments missing
  rest:
    systolic_bp_mmhg: !!bool perhaps   # PROBLEM stages.rest.systolic_bp_mmhg: not a boolean YAML knows
    wall_motion: 111111 111111 1111 1
    perfusion: 111111 111111 1111 9    # PROBLEM stages.rest.perfusion: perfusion scores stop at 3
""".format(digits="0" * 5000)


def test_validate_lists_every_problem_with_its_line(tmp_path: Path) -> None:
    study = tmp_path / "s.yaml"
    study.write_text(MANY_PROBLEMS, encoding="utf-8")
    result = CliRunner().invoke(main, ["validate", str(study)])
    assert result.exit_code == 1
    errors = [line for line in result.stderr.splitlines() if line.startswith("Error: ")]
    expected = [
        (number, line.split("# PROBLEM ")[1].split(":")[0])
        for number, line in enumerate(MANY_PROBLEMS.splitlines(), start=1)
        if "# PROBLEM " in line
    ]
    for number, field in expected:
        assert any(e.startswith(f"Error: {study}: line {number}: {field}: ") for e in errors), (
            number,
            field,
            result.stderr,
        )
    # The wall-motion line has two problems (score 7, missing segments); no problem is unlined.
    assert len(errors) == len(expected) + 1
    numbers = [int(e.split(": line ")[1].split(":")[0]) for e in errors]
    assert numbers == sorted(numbers)  # in file order


def test_json_problems_have_lines_too(tmp_path: Path) -> None:
    data = study_dict()
    data["study"]["date"] = "2026-02-30"  # impossible date
    data["stages"]["rest"]["heart_rate_bpm"] = "fast"  # text for a number
    text = json.dumps(data, indent=2)
    lines = text.splitlines()
    study = tmp_path / "s.json"
    study.write_text(text, encoding="utf-8")
    result = CliRunner().invoke(main, ["validate", str(study)])
    date_line = next(i for i, line in enumerate(lines, 1) if '"date"' in line)
    rate_line = next(i for i, line in enumerate(lines, 1) if '"fast"' in line)
    assert f"Error: {study}: line {date_line}: study.date: '2026-02-30' is not a date" in (
        result.stderr
    )
    assert (
        f"Error: {study}: line {rate_line}: stages.rest.heart_rate_bpm: 'fast' is not a number"
        in (result.stderr)
    )


def test_data_without_a_file_has_no_lines() -> None:
    # The entry page validates JSON it was sent: locations stay plain field paths.
    from reporting.load import study_from_data

    data = study_dict()
    data["protocol"] = "swimming"  # not a protocol
    with pytest.raises(InputErrors) as info:
        study_from_data(data, source="study")
    assert [p.location for p in info.value.problems] == ["study: protocol"]
