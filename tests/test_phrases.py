"""The phrase library: loading (valid, unknown slot, bad YAML, too big) and filling slots."""

from __future__ import annotations

import string
from pathlib import Path

import pytest

from reporting.analysis import analyze
from reporting.errors import InputError, InputErrors
from reporting.load import load_study
from reporting.phrases import (
    MAX_PHRASES_BYTES,
    NOT_AVAILABLE,
    SLOTS,
    built_in_library,
    filled_library,
    load_library,
)

DEMO = Path(__file__).resolve().parents[1] / "reporting" / "data" / "demo"


def _write(tmp_path: Path, text: str, name: str = "phrases.yaml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def _problems(exc: pytest.ExceptionInfo[BaseException]) -> list[str]:
    error = exc.value
    found = error.problems if isinstance(error, InputErrors) else (error,)
    return [f"{p.location}: {p.problem}" for p in found if isinstance(p, InputError)]


def test_built_in_library_loads_and_uses_only_known_slots() -> None:
    library = built_in_library()
    codes = [p.code for p in library.phrases]
    assert ".normal" in codes and ".rec-angio" in codes
    assert len(codes) == len(set(codes))
    for phrase in library.phrases:
        assert set(phrase.slots()) <= set(SLOTS)


def test_valid_file_loads(tmp_path: Path) -> None:
    path = _write(
        tmp_path,
        "phrases:\n"
        "  - code: .lab-1\n    title: Lab one\n    field: recommendations\n"
        "    text: Review in the {territory} clinic; a brace {{ stays.\n",
    )
    library = load_library(path)
    assert [p.code for p in library.phrases] == [".lab-1"]
    assert library.phrases[0].slots() == ["territory"]


@pytest.mark.parametrize(
    ("text", "where", "problem"),
    [
        # a slot the analysis cannot fill: located at the phrase's text
        (
            "phrases:\n  - {code: .a, title: A, text: 'WMSI {wmsi_top}'}\n",
            "phrases.0.text",
            "unknown slot {wmsi_top}; the slots are ",
        ),
        # a brace never closed
        (
            "phrases:\n  - {code: .a, title: A, text: 'WMSI {wmsi_peak'}\n",
            "phrases.0.text",
            "malformed braces",
        ),
        # a format spec would let the file change how numbers print
        (
            "phrases:\n  - {code: .a, title: A, text: 'WMSI {wmsi_peak:.3f}'}\n",
            "phrases.0.text",
            "slot {wmsi_peak} takes no format or conversion",
        ),
        # the same code twice: typing it would be ambiguous
        (
            "phrases:\n  - {code: .a, title: A, text: x}\n  - {code: .a, title: B, text: y}\n",
            "phrases.1.code",
            "code .a is already used by phrase 0",
        ),
        # a code without the leading dot cannot be told from ordinary words
        (
            "phrases:\n  - {code: normal, title: A, text: x}\n",
            "phrases.0.code",
            "String should match pattern",
        ),
        # a key the library does not know (a typo of 'text')
        (
            "phrases:\n  - {code: .a, title: A, txt: x}\n",
            "phrases.0",
            "",
        ),
        # not a list of phrases at all
        ("phrases: 3\n", "phrases", "Input should be a valid list"),
    ],
    ids=[
        "unknown-slot",
        "open-brace",
        "format-spec",
        "repeated-code",
        "code-no-dot",
        "unknown-key",
        "not-a-list",
    ],
)
def test_bad_library_is_refused_with_location(
    tmp_path: Path, text: str, where: str, problem: str
) -> None:
    path = _write(tmp_path, text)
    with pytest.raises((InputError, InputErrors)) as exc:
        load_library(path)
    lines = _problems(exc)
    assert any(line.startswith(f"{path}: {where}") and problem in line for line in lines), lines


def test_bad_yaml_is_located_by_line(tmp_path: Path) -> None:
    # an unclosed flow mapping: not YAML
    path = _write(tmp_path, "phrases:\n  - {code: .a, title: A\n")
    with pytest.raises(InputError) as exc:
        load_library(path)
    assert exc.value.location.startswith(f"{path}: line ")
    assert "invalid YAML" in exc.value.problem


def test_too_big_file_is_refused(tmp_path: Path) -> None:
    # larger than the bound: refused before parsing, however valid it would be
    line = "  - {code: .a, title: A, text: " + "x" * 100 + "}\n"
    path = _write(tmp_path, "phrases:\n" + line * (MAX_PHRASES_BYTES // len(line) + 1))
    with pytest.raises(InputError) as exc:
        load_library(path)
    assert exc.value.problem.endswith(f"a phrase file is at most {MAX_PHRASES_BYTES:,}")


def test_wrong_suffix_is_refused(tmp_path: Path) -> None:
    # a phrase file is YAML; a .txt name is probably the wrong file
    path = _write(tmp_path, "phrases: []\n", name="phrases.txt")
    with pytest.raises(InputError, match="unknown file type"):
        load_library(path)


def test_slots_filled_from_the_analysis() -> None:
    analysis = analyze(load_study(DEMO / "DEMO-0002.yaml"))
    filled = {p.code: p for p in filled_library(built_in_library(), analysis)}
    # oracle: the record's own numbers, formatted independently of the phrase module
    territories = [t.value for t in analysis.conclusion.ischemic_territories]
    assert territories, "the demo study is meant to show ischaemia"
    angio = filled[".rec-angio"]
    assert territories[0] in angio.text and "{" not in angio.text
    wmsi_peak = next(v for s, v in analysis.wmsi.items() if s.value == "peak")
    assert f"{wmsi_peak:.2f}" in filled[".normal"].text
    for phrase in filled.values():
        assert not any(name for _, name, _, _ in string.Formatter().parse(phrase.text) if name)


def test_missing_slot_value_is_marked_not_guessed() -> None:
    analysis = analyze(load_study(DEMO / "DEMO-0002.yaml"))
    assert not analysis.conclusion.viable_segments
    viable = next(p for p in filled_library(built_in_library(), analysis) if p.code == ".viable")
    assert viable.missing == ["viable_segments"]
    assert NOT_AVAILABLE.format(name="viable segments") in viable.text
