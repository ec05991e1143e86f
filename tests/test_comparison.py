"""Prior-study comparison (reporting.comparison): hand-worked pairs of studies, file mode
(``report --prior``), store mode (the prior chosen by the store) and the PDF paragraph.

Every expected category below is worked by hand from the rule in reporting/comparison.py's
docstring (common practice): a territory is compared by whether it was ischaemic in each study and,
when it was both times, by how many of its segments were ischaemic. Standard 17-segment map
(Cerqueira MD et al., Circulation 2002;105:539): LAD 1 2 7 8 13 14 17, RCA 3 4 9 10 15,
LCx 5 6 11 12 16.
"""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from conftest import analysed, stages
from pypdf import PdfReader
from store_support import PASSWORD, cheap_argon2, study_data, write_study

from reporting.cli import main
from reporting.comparison import TerritoryChange, compare, with_comparison
from reporting.errors import InputError
from reporting.results import Analysis, NoteKind
from reporting.scoring import WallMotionResponse

__all__ = ["cheap_argon2"]

N17 = "111111 111111 1111 1"
N16 = "111111 111111 1111"
IMPROVED, UNCHANGED, WORSENED, RESOLVED, NEW, NONE = (
    TerritoryChange.IMPROVED,
    TerritoryChange.UNCHANGED,
    TerritoryChange.WORSENED,
    TerritoryChange.RESOLVED,
    TerritoryChange.NEW,
    TerritoryChange.NONE,
)
NORMAL, ISCH, NA, FIXED = (
    WallMotionResponse.NORMAL,
    WallMotionResponse.ISCHEMIC,
    WallMotionResponse.NOT_ASSESSABLE,
    WallMotionResponse.FIXED,
)


def scores(abnormal: dict[int, str], model: int = 17) -> str:
    """A wall-motion string: normal except the given segments."""
    return "".join(abnormal.get(n, "1") for n in range(1, model + 1))


def study(
    sid: str, date: str, rest: str = N17, peak: str = N17, patient: str = "P-1", model: int = 17
) -> Analysis:
    changes: dict[str, Any] = {
        "study": {"id": sid, "date": date},
        "patient": {"id": patient, "age_years": 60, "sex": "female"},
        "stages": stages(rest=rest, peak=peak),
    }
    if model != 17:
        changes["segment_model"] = model
    return analysed(**changes)


# (id, prior rest, prior peak, current rest, current peak, territories, changed segments)
PAIRS = [
    # LAD normal then, 7 and 13 hypokinetic at peak now: new ischaemia, two changed segments.
    (
        "new",
        N17,
        N17,
        N17,
        scores({7: "2", 13: "2"}),
        {"LAD": NEW, "LCx": NONE, "RCA": NONE},
        [(7, NORMAL, ISCH), (13, NORMAL, ISCH)],
    ),
    # the reverse: ischaemia then, none now.
    (
        "resolved",
        N17,
        scores({7: "2", 13: "2"}),
        N17,
        N17,
        {"LAD": RESOLVED, "LCx": NONE, "RCA": NONE},
        [(7, ISCH, NORMAL), (13, ISCH, NORMAL)],
    ),
    # LAD ischaemic both times: 3 segments then (7 13 14), 1 now (7): improved.
    (
        "improved",
        N17,
        scores({7: "2", 13: "2", 14: "2"}),
        N17,
        scores({7: "2"}),
        {"LAD": IMPROVED, "LCx": NONE, "RCA": NONE},
        [(13, ISCH, NORMAL), (14, ISCH, NORMAL)],
    ),
    # 1 segment then (7), 3 now (7 13 14): worsened.
    (
        "worsened",
        N17,
        scores({7: "2"}),
        N17,
        scores({7: "2", 13: "2", 14: "2"}),
        {"LAD": WORSENED, "LCx": NONE, "RCA": NONE},
        [(13, NORMAL, ISCH), (14, NORMAL, ISCH)],
    ),
    # 2 segments both times, other segments (7 13 then, 8 14 now): unchanged extent, 4 changed.
    (
        "unchanged",
        N17,
        scores({7: "2", 13: "2"}),
        N17,
        scores({8: "2", 14: "2"}),
        {"LAD": UNCHANGED, "LCx": NONE, "RCA": NONE},
        [(7, ISCH, NORMAL), (8, NORMAL, ISCH), (13, ISCH, NORMAL), (14, NORMAL, ISCH)],
    ),
    # RCA scar (3 akinetic at rest and peak: fixed, not ischaemia) then; 3 worse at peak now from
    # hypokinetic at rest: ischaemic, so RCA new; the response changed fixed -> ischemic.
    (
        "fixed-to-ischemic",
        scores({3: "3"}),
        scores({3: "3"}),
        scores({3: "2"}),
        scores({3: "3"}),
        {"LAD": NONE, "LCx": NONE, "RCA": NEW},
        [(3, FIXED, ISCH)],
    ),
    # RCA (3 4 9 10 15) not visualised at rest or peak now: non-diagnostic, so RCA is left out;
    # its segments changed from normal to not assessable.
    (
        "non-diagnostic",
        N17,
        N17,
        scores(dict.fromkeys((3, 4, 9, 10, 15), "x")),
        scores(dict.fromkeys((3, 4, 9, 10, 15), "x")),
        {"LAD": NONE, "LCx": NONE},
        [(n, NORMAL, NA) for n in (3, 4, 9, 10, 15)],
    ),
]


@pytest.mark.parametrize(
    ("prior_rest", "prior_peak", "rest", "peak", "territories", "changed"),
    [p[1:] for p in PAIRS],
    ids=[p[0] for p in PAIRS],
)
def test_hand_worked_pairs(
    prior_rest: str,
    prior_peak: str,
    rest: str,
    peak: str,
    territories: dict[str, TerritoryChange],
    changed: list[tuple[int, WallMotionResponse, WallMotionResponse]],
) -> None:
    prior = study("S-1", "2025-03-12", prior_rest, prior_peak)
    current = study("S-2", "2026-03-12", rest, peak)
    comparison, _ = compare(current, prior)
    assert comparison.prior_study_id == "S-1"
    assert comparison.prior_date is not None and comparison.prior_date.isoformat() == "2025-03-12"
    assert {t.value: c for t, c in comparison.territories.items()} == territories
    assert [
        (c.number, c.prior_response, c.response) for c in comparison.changed_segments
    ] == changed
    # WMSI per stage then and now, taken from each study's own analysis
    assert {s: (p.prior, p.current) for s, p in comparison.wmsi.items()} == {
        s: (prior.wmsi.get(s), current.wmsi.get(s)) for s in ("rest", "peak")
    }


def test_wmsi_then_and_now_hand_worked() -> None:
    # peak now: 15 segments scored 1 and two scored 2 → (15 + 4) / 17; then all 1 → 1.00
    comparison, _ = compare(
        study("S-2", "2026-03-12", peak=scores({7: "2", 13: "2"})), study("S-1", "2025-03-12")
    )
    assert comparison.wmsi["peak"].prior == pytest.approx(1.0)
    assert comparison.wmsi["peak"].current == pytest.approx(19 / 17)


def test_non_diagnostic_territory_is_named_in_a_note() -> None:
    hidden = scores(dict.fromkeys((3, 4, 9, 10, 15), "x"))
    current = with_comparison(
        study("S-2", "2026-03-12", hidden, hidden), study("S-1", "2025-03-12")
    )
    notes = [n.text for n in current.notes if n.kind is NoteKind.COMPARISON]
    assert notes == ["RCA: not compared (non-diagnostic in this study)."]


def test_different_segment_models_compare_no_segments() -> None:
    # prior 16 segments, LAD ischaemic (7); now 17 segments, LAD ischaemic (7 13): the counts are
    # of different segment sets, so LAD is left out; nothing is compared segment by segment.
    prior = study("S-1", "2025-03-12", N16, scores({7: "2"}, 16), model=16)
    current = with_comparison(study("S-2", "2026-03-12", peak=scores({7: "2", 13: "2"})), prior)
    assert current.comparison is not None
    assert current.comparison.changed_segments == []
    assert {t.value: c for t, c in current.comparison.territories.items()} == {
        "LCx": NONE,
        "RCA": NONE,
    }
    kinds = [n.kind for n in current.notes if n.source == "common practice"]
    assert kinds == [NoteKind.SEGMENTS_NOT_COMPARED, NoteKind.COMPARISON]


@pytest.mark.parametrize(
    ("prior_changes", "message"),
    [
        ({"patient": "P-2"}, "belongs to patient P-2, not P-1"),  # bad: another patient
        ({"date": "2026-03-12"}, "is dated 2026-03-12, not before this study"),  # bad: same day
        ({"date": "2027-01-01"}, "is dated 2027-01-01, not before this study"),  # bad: later
        ({"sid": "S-2"}, "is the same study (S-2)"),  # bad: the study itself
    ],
    ids=["other-patient", "same-day", "later", "same-study"],
)
def test_prior_must_be_an_earlier_study_of_the_same_patient(
    prior_changes: dict[str, str], message: str
) -> None:
    args = {"sid": "S-1", "date": "2025-03-12", "patient": "P-1", **prior_changes}
    with pytest.raises(InputError, match=re.escape(message)):
        compare(study("S-2", "2026-03-12"), study(**args))


# --- file mode ----------------------------------------------------------------------------------


def _pair_files(folder: Path) -> tuple[Path, Path]:
    prior = study_data("DEMO-0001")
    current = study_data("DEMO-0001")
    current["study"].update(id="DEMO-0101", date="2027-04-02")
    current["stages"]["peak"]["wall_motion"] = scores({7: "2", 13: "2"})
    return write_study(folder, prior), write_study(folder, current)


def _pdf_text(path: Path) -> str:
    return " ".join(" ".join(p.extract_text() for p in PdfReader(path).pages).split())


def test_report_with_a_prior_study_file_or_record(tmp_path: Path) -> None:
    prior, current = _pair_files(tmp_path / "in")
    runner = CliRunner()
    first = runner.invoke(main, ["report", str(prior), "-o", str(tmp_path / "prior")])
    assert first.exit_code == 0, first.output
    record = tmp_path / "prior" / "DEMO-0001.record.json"
    for given in (prior, record):
        out = tmp_path / f"out-{given.suffix}"
        result = runner.invoke(
            main, ["report", str(current), "--prior", str(given), "-o", str(out)]
        )
        assert result.exit_code == 0, result.output
        data = json.loads((out / "DEMO-0101.record.json").read_text())["comparison"]
        assert data["prior_study_id"] == "DEMO-0001" and data["prior_date"] == "2026-10-14"
        assert data["territories"] == {"LAD": "new", "LCx": "none", "RCA": "none"}
        assert [s["number"] for s in data["changed_segments"]] == [7, 13]
        text = _pdf_text(out / "DEMO-0101.pdf")
        assert "Compared with the study of 2026-10-14 (DEMO-0001)." in text
        assert "LAD new ischaemia" in text and "Change since the prior study" in text


def test_report_without_prior_has_null_comparison_and_no_paragraph(tmp_path: Path) -> None:
    _, current = _pair_files(tmp_path / "in")
    result = CliRunner().invoke(main, ["report", str(current), "-o", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    assert (
        json.loads((tmp_path / "out" / "DEMO-0101.record.json").read_text())["comparison"] is None
    )
    assert "Compared with" not in _pdf_text(tmp_path / "out" / "DEMO-0101.pdf")


def test_report_refuses_a_prior_of_another_patient(tmp_path: Path) -> None:
    _, current = _pair_files(tmp_path / "in")
    other = study_data("DEMO-0002")  # bad: another patient's study
    other_path = write_study(tmp_path / "in", other)
    result = CliRunner().invoke(
        main, ["report", str(current), "--prior", str(other_path), "-o", str(tmp_path / "out")]
    )
    assert result.exit_code == 1
    assert result.output.strip() == (
        f"Error: --prior {other_path}: belongs to patient LV-100877, not LV-100231: only studies "
        "of the same patient are compared"
    )
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())


def test_report_refuses_a_record_of_another_format(tmp_path: Path) -> None:
    _, current = _pair_files(tmp_path / "in")
    bad = tmp_path / "old.json"
    bad.write_text(json.dumps({"schema_version": 99, "generator": "x"}))  # bad: unknown format
    result = CliRunner().invoke(
        main, ["report", str(current), "--prior", str(bad), "-o", str(tmp_path / "out")]
    )
    assert result.exit_code == 1
    assert f"Error: --prior {bad}: record schema_version 99 is not supported" in result.output


# --- store mode ---------------------------------------------------------------------------------


def _store(tmp_path: Path) -> str:
    db = str(tmp_path / "s.db")
    r = CliRunner().invoke(
        main,
        ["store", "init", "--db", db, "--admin", "alice", "--password-stdin"],
        input=PASSWORD + "\n",
    )
    assert r.exit_code == 0, r.output
    return db


def _as_alice(db: str, *args: str) -> None:
    r = CliRunner().invoke(
        main,
        ["store", *args, "--db", db, "--as", "alice", "--password-stdin"],
        input=PASSWORD + "\n",
    )
    assert r.exit_code == 0, r.output


def _stored(db: str, tmp_path: Path, sid: str, version: int = 1) -> tuple[dict[str, Any], str]:
    out = tmp_path / f"show-{sid}-{version}"
    r = CliRunner().invoke(
        main, ["store", "show", sid, "--version", str(version), "-o", str(out), "--db", db]
    )
    assert r.exit_code == 0, r.output
    record = json.loads((out / f"{sid}.v{version}.record.json").read_text())
    return record, _pdf_text(out / f"{sid}.v{version}.pdf")


def test_store_compares_with_the_latest_earlier_signed_study_of_the_same_patient(
    tmp_path: Path,
) -> None:
    db = _store(tmp_path)
    folder = tmp_path / "in"
    older = study_data("DEMO-0001")
    older["study"].update(id="OLD-1", date="2026-01-05")
    signed_prior = study_data("DEMO-0001")  # the one expected
    signed_prior["study"]["id"] = "PRIOR-1"
    unsigned_later = study_data("DEMO-0001")  # later than the prior, never signed: not a prior
    unsigned_later["study"].update(id="UNSIGNED-1", date="2026-12-01")
    other_patient = study_data("DEMO-0001")  # signed, later, but another patient
    other_patient["study"].update(id="OTHER-1", date="2027-01-10")
    other_patient["patient"]["id"] = "LV-999999"
    current = study_data("DEMO-0001")
    current["study"].update(id="NOW-1", date="2027-04-02")
    current["stages"]["peak"]["wall_motion"] = scores({7: "2", 13: "2"})
    paths = [
        write_study(folder, d)
        for d in (older, signed_prior, unsigned_later, other_patient, current)
    ]
    _as_alice(db, "import", *map(str, paths))
    for sid in ("OLD-1", "PRIOR-1", "OTHER-1"):
        _as_alice(db, "sign", sid)

    # unsigned: `store show` renders it with the store's prior
    record, text = _stored(db, tmp_path, "NOW-1")
    assert record["comparison"]["prior_study_id"] == "PRIOR-1"
    assert "Compared with the study of 2026-10-14 (PRIOR-1)." in text
    # signed: the stored record and PDF carry the same comparison
    _as_alice(db, "sign", "NOW-1")
    record, text = _stored(db, tmp_path, "NOW-1")
    assert record["comparison"]["prior_study_id"] == "PRIOR-1"
    assert record["comparison"]["territories"]["LAD"] == "new"
    assert "Compared with the study of 2026-10-14 (PRIOR-1)." in text
    # the first study of the patient has no prior
    first, text = _stored(db, tmp_path, "OLD-1")
    assert first["comparison"] is None and "Compared with" not in text


def test_deidentified_comparison_keeps_the_link_and_drops_the_date() -> None:
    from reporting.deidentify import deidentify, pseudonymous_study_id

    key = b"an invented key for tests only, 32+ bytes"
    current = with_comparison(
        study("S-2", "2026-03-12", peak=scores({7: "2"})), study("S-1", "2025-03-12")
    )
    out = deidentify(current, key).comparison
    assert out is not None
    # allow-list: prior_study_id generalised as study.id is, prior_date dropped, the rest kept
    assert out.prior_study_id == pseudonymous_study_id(key, "S-1")
    assert out.prior_date is None
    assert out.territories == current.comparison.territories  # type: ignore[union-attr]
    assert out.changed_segments == current.comparison.changed_segments  # type: ignore[union-attr]
    assert "2025-03-12" not in out.model_dump_json()
