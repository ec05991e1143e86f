"""Batch processing: a generated folder of 200 valid and 10 broken studies (all invented)."""

from __future__ import annotations

import json
import os
import random
import signal
from collections.abc import Callable
from pathlib import Path
from typing import Any

import jsonschema  # type: ignore[import-untyped, unused-ignore]
import pytest
import yaml

from reporting import batch
from reporting.batch import BatchInterrupted, BatchOptions, Status, find_studies, run_batch
from reporting.batch import study as batch_study
from reporting.errors import ReportingError
from reporting.export import tables

SCHEMA = Path(__file__).parent.parent / "schemas" / "record-1.schema.json"
VALID = 200
PROTOCOLS = ["dobutamine", "treadmill", "bicycle", "vasodilator", "pacing"]
FIRST = ["Orla", "Tamsin", "Bertil", "Ysolde", "Caius", "Marit", "Idris", "Soraya"]
LAST = ["Fenwick-Ashgrove", "Quillon", "Brackenridge", "Marlowe-Tess", "Vantreight"]


def make_study(i: int, rng: random.Random) -> dict[str, Any]:
    """An invented, valid study; the mix covers protocols, segment models, perfusion and old age."""
    model = rng.choice([16, 17, 17, 17, 18])
    protocol = PROTOCOLS[i % len(PROTOCOLS)]
    stage_names = ["rest", "low_dose", "peak"] if protocol == "dobutamine" else ["rest", "peak"]
    if i % 7 == 0:
        stage_names.append("recovery")
    stages: dict[str, Any] = {}
    for n, stage in enumerate(stage_names):
        scores = "".join(rng.choice("1111111223x") for _ in range(model))
        data: dict[str, Any] = {
            "heart_rate_bpm": 60 + 30 * n + rng.randint(0, 40),
            "systolic_bp_mmhg": rng.randint(100, 180),
            "diastolic_bp_mmhg": rng.randint(60, 95),
            "wall_motion": scores,
        }
        if stage in ("rest", "peak") and i % 3 == 0:
            data["lvef_percent"] = rng.randint(30, 75)
        if i % 4 == 0:
            data["perfusion"] = {k: rng.choice([1, 1, 1, 2, 3, None]) for k in range(1, model + 1)}
        if stage == "peak":
            data["symptoms"] = f"Mild dyspnoea reported to {rng.choice(FIRST)} at peak."
        stages[stage] = data
    study: dict[str, Any] = {
        "schema_version": 1,
        "study": {
            "id": f"GEN-{i:04d}",
            "date": f"2026-{1 + i % 12:02d}-{1 + i % 28:02d}",
            "lab": "Harrowgate Fells Cardiac Unit",
            "reader": f"Dr {rng.choice(FIRST)} {rng.choice(LAST)}",
            "sonographer": f"{rng.choice(FIRST)} {rng.choice(LAST)}",
            "referring_physician": f"Dr {rng.choice(FIRST)} {rng.choice(LAST)}",
            "report_status": rng.choice(["preliminary", "final"]),
        },
        "patient": {
            "id": f"MRN-{500000 + i}",
            "name": f"{rng.choice(FIRST)} {rng.choice(LAST)}",
            "sex": rng.choice(["female", "male", "other"]),
        },
        "indication": f"Chest pain on exertion; seen at Harrowgate Fells clinic {i}.",
        "protocol": protocol,
        "segment_model": model,
        "stages": stages,
        "comments": f"Reviewed with {rng.choice(FIRST)} {rng.choice(LAST)}.",
    }
    if i % 5 == 0:
        study["patient"]["birth_date"] = f"19{30 + i % 60:02d}-03-{1 + i % 27:02d}"
    else:
        study["patient"]["age_years"] = 91 if i % 11 == 0 else rng.randint(35, 85)
    if protocol == "treadmill":
        study["exercise"] = {
            "duration_min": round(rng.uniform(3, 12), 1),
            "max_st_deviation_mm": round(rng.uniform(0, 3), 1),
            "angina_index": rng.choice([0, 1, 2]),
        }
    if "perfusion" in stages["rest"]:
        study["contrast"] = {"agent": "lipid-shelled microspheres", "administration": "infusion"}
    return study


# Each broken study: file name, text, and a piece of the location its failure must name.
BROKEN: list[tuple[str, str, str]] = [
    # wall-motion score 7 is off the 4-point scale (Lang 2015)
    (
        "broken/b01.yaml",
        "schema_version: 1\nstudy: {id: BAD-1, date: 2026-01-02}\nprotocol: dobutamine\nstages:\n  rest: {wall_motion: '111111 111111 1111 7'}\n",
        "stages.rest.wall_motion",
    ),
    # protocol is required
    (
        "broken/b02.yaml",
        "schema_version: 1\nstudy: {id: BAD-2, date: 2026-01-02}\nstages:\n  rest: {wall_motion: '111111 111111 1111 1'}\n",
        "",
    ),
    # YAML syntax error (unclosed flow mapping)
    (
        "broken/b03.yaml",
        "schema_version: 1\nstudy: {id: BAD-3, date: 2026-01-02\nprotocol: dobutamine\n",
        "line",
    ),
    # unknown stage name
    (
        "broken/b04.yaml",
        "schema_version: 1\nstudy: {id: BAD-4, date: 2026-01-02}\nprotocol: dobutamine\nstages:\n  summit: {wall_motion: '111111 111111 1111 1'}\n",
        "stages",
    ),
    # 16 scores for the 17-segment model
    (
        "broken/b05.yaml",
        "schema_version: 1\nstudy: {id: BAD-5, date: 2026-01-02}\nprotocol: dobutamine\nstages:\n  rest: {wall_motion: '111111 111111 1111'}\n",
        "stages.rest.wall_motion",
    ),
    # heart rate is not a number
    (
        "broken/b06.yaml",
        "schema_version: 1\nstudy: {id: BAD-6, date: 2026-01-02}\nprotocol: dobutamine\nstages:\n  rest: {heart_rate_bpm: fast, wall_motion: '111111 111111 1111 1'}\n",
        "stages.rest.heart_rate_bpm",
    ),
    # study id unsafe in a file name
    (
        "broken/b07.yaml",
        "schema_version: 1\nstudy: {id: ../escape, date: 2026-01-02}\nprotocol: dobutamine\nstages:\n  rest: {wall_motion: '111111 111111 1111 1'}\n",
        "study.id",
    ),
    # invalid JSON (trailing comma)
    (
        "broken/b08.json",
        '{"schema_version": 1, "study": {"id": "BAD-8", "date": "2026-01-02"},}',
        "line 1",
    ),
    # empty file
    ("broken/b09.yml", "", ""),
    # birth date after the study date
    (
        "broken/b10.yaml",
        "schema_version: 1\nstudy: {id: BAD-10, date: 2026-01-02}\npatient: {birth_date: 2027-05-05}\nprotocol: dobutamine\nstages:\n  rest: {wall_motion: '111111 111111 1111 1'}\n",
        "patient.birth_date",
    ),
]


def write_folder(root: Path, valid: int = VALID, broken: bool = True) -> Path:
    """Write ``valid`` generated studies (YAML and JSON, in sub-folders) and the broken ones."""
    rng = random.Random(20261014)
    indir = root / "in"
    for i in range(valid):
        study = make_study(i, rng)
        folder = indir / f"site-{i % 3}"
        folder.mkdir(parents=True, exist_ok=True)
        if i % 2:
            (folder / f"study-{i:04d}.json").write_text(json.dumps(study), encoding="utf-8")
        else:
            (folder / f"study-{i:04d}.yaml").write_text(
                yaml.safe_dump(study, sort_keys=False), encoding="utf-8"
            )
    if broken:
        for name, text, _ in BROKEN:
            path = indir / name
            path.parent.mkdir(parents=True, exist_ok=True)
            path.write_text(text, encoding="utf-8")
    (indir / "notes.txt").write_text("not a study", encoding="utf-8")
    return indir


@pytest.fixture(scope="module")
def folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return write_folder(tmp_path_factory.mktemp("batch"))


@pytest.fixture(scope="module")
def one_job(
    folder: Path, tmp_path_factory: pytest.TempPathFactory
) -> tuple[Path, batch.BatchSummary]:
    out = tmp_path_factory.mktemp("out1")
    return out, run_batch(folder, BatchOptions(outdir=out, pdf=False), jobs=1)


def tree(root: Path) -> dict[str, bytes]:
    """Every file under ``root`` with its bytes (bookkeeping stamps included)."""
    return {
        p.relative_to(root).as_posix(): p.read_bytes()
        for p in sorted(root.rglob("*"))
        if p.is_file()
    }


def test_finds_studies_recursively_in_stable_order(folder: Path) -> None:
    found = find_studies(folder)
    assert len(found) == VALID + len(BROKEN)
    relative = [p.relative_to(folder).as_posix() for p in found]
    assert relative == sorted(relative)
    assert not any(p.endswith(".txt") for p in relative)


def test_all_valid_exported_and_all_broken_listed(one_job: tuple[Path, batch.BatchSummary]) -> None:
    out, summary = one_job
    assert (summary.total, summary.done, summary.skipped, summary.failed) == (210, 200, 0, 10)
    assert not summary.ok
    assert summary.line() == "210 studies: 200 done, 0 skipped, 10 failed"
    assert len(list(out.glob("*.record.json"))) == VALID
    lines = (out / "registry.ndjson").read_text(encoding="utf-8").splitlines()
    assert len(lines) == VALID
    assert len({json.loads(line)["study"]["id"] for line in lines}) == VALID
    import pandas as pd  # type: ignore[import-untyped, unused-ignore]

    failures = pd.read_csv(out / "failures.csv", keep_default_na=False, dtype=str)
    assert list(failures.columns) == ["file", "location", "message"]
    for name, _, location in BROKEN:
        rows = failures[failures["file"] == name]
        assert len(rows) >= 1, name
        assert any(location in loc for loc in rows["location"]), (name, list(rows["location"]))
    assert not list(out.rglob("*.part"))


def test_registry_order_follows_input_order(
    one_job: tuple[Path, batch.BatchSummary], folder: Path
) -> None:
    out, _ = one_job
    ids = [
        json.loads(line)["study"]["id"] for line in (out / "registry.ndjson").open(encoding="utf-8")
    ]
    expected = [
        json.loads(p.read_text()) if p.suffix == ".json" else yaml.safe_load(p.read_text())
        for p in find_studies(folder)
        if not p.relative_to(folder).as_posix().startswith("broken/")
    ]
    assert ids == [s["study"]["id"] for s in expected]


def test_every_record_validates_against_the_committed_schema(
    one_job: tuple[Path, batch.BatchSummary],
) -> None:
    out, _ = one_job
    schema = json.loads(SCHEMA.read_text(encoding="utf-8"))
    validator = jsonschema.Draft202012Validator(schema)
    lines = (out / "registry.ndjson").read_text(encoding="utf-8").splitlines()
    for line in lines:
        validator.validate(json.loads(line))
    for path in out.glob("*.record.json"):
        record = json.loads(path.read_text(encoding="utf-8"))
        validator.validate(record)
        assert record["schema_version"] == 1


def test_record_file_matches_registry_line(one_job: tuple[Path, batch.BatchSummary]) -> None:
    out, _ = one_job
    for line in (out / "registry.ndjson").read_text(encoding="utf-8").splitlines()[:20]:
        record = json.loads(line)
        assert json.loads((out / f"{record['study']['id']}.record.json").read_text()) == record


def test_two_jobs_equal_one_job_byte_for_byte(
    one_job: tuple[Path, batch.BatchSummary], folder: Path, tmp_path: Path
) -> None:
    out1, summary1 = one_job
    out2 = tmp_path / "out2"
    summary2 = run_batch(folder, BatchOptions(outdir=out2, pdf=False), jobs=2)
    assert summary2.line() == summary1.line()
    assert tree(out2) == tree(out1)


def test_rerun_skips_up_to_date_studies_and_force_redoes_them(tmp_path: Path) -> None:
    indir = write_folder(tmp_path, valid=20)
    fresh = tmp_path / "fresh"
    run_batch(indir, BatchOptions(outdir=fresh, pdf=False), jobs=1)
    out = tmp_path / "out"
    options = BatchOptions(outdir=out, pdf=False)
    run_batch(indir, options, jobs=2)
    before = tree(out)
    again = run_batch(indir, options, jobs=2)
    assert (again.done, again.skipped, again.failed) == (0, 20, len(BROKEN))
    assert tree(out) == before  # skipped studies are read back: same registry and tables

    touched = indir / "site-0" / "study-0000.yaml"
    stat = touched.stat()
    os.utime(touched, ns=(stat.st_atime_ns, stat.st_mtime_ns + 10**12))  # edited after the outputs
    third = run_batch(indir, options, jobs=1)
    assert (third.done, third.skipped) == (1, 19)

    forced = run_batch(indir, BatchOptions(outdir=out, pdf=False, force=True), jobs=1)
    assert (forced.done, forced.skipped) == (20, 0)
    assert tree(out) == tree(fresh)


def test_changed_options_are_not_skipped(folder: Path, tmp_path: Path) -> None:
    out = tmp_path / "out"
    run_batch(folder, BatchOptions(outdir=out, pdf=False), jobs=2)
    with_fhir = run_batch(folder, BatchOptions(outdir=out, pdf=False, fhir=True), jobs=2)
    assert (with_fhir.done, with_fhir.skipped) == (200, 0)
    assert len(list(out.glob("*.fhir.json"))) == VALID


def _interrupting(at: str, action: Callable[[], None]) -> Callable[..., Any]:
    original = batch_study._analyse

    def analyse(path: Path, options: BatchOptions) -> Any:
        if path.name == at:
            action()
        return original(path, options)

    return analyse


def _assert_clean(out: Path) -> None:
    assert not list(out.rglob("*.part")), "temporary files left behind"
    for name in ("registry.ndjson", "studies.csv", "segments.csv", "failures.csv"):
        assert not (out / name).exists(), f"{name} written by an interrupted run"
    for path in out.glob("*.record.json"):
        json.loads(path.read_text(encoding="utf-8"))  # each record is complete


def test_interrupted_run_leaves_no_partial_files_and_rerun_completes(
    folder: Path,
    one_job: tuple[Path, batch.BatchSummary],
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    out = tmp_path / "out"

    def stop() -> None:
        raise KeyboardInterrupt

    monkeypatch.setattr(batch_study, "_analyse", _interrupting("study-0100.yaml", stop))
    with pytest.raises(KeyboardInterrupt):
        run_batch(folder, BatchOptions(outdir=out, pdf=False), jobs=1)
    _assert_clean(out)
    finished = len(list(out.glob("*.record.json")))
    assert 0 < finished < VALID

    monkeypatch.undo()
    rerun = run_batch(folder, BatchOptions(outdir=out, pdf=False), jobs=1)
    assert (rerun.done + rerun.skipped, rerun.skipped) == (VALID, finished)
    out1, _ = one_job
    assert tree(out) == tree(out1)


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs POSIX signals")
def test_killed_worker_interrupts_cleanly_and_rerun_completes(
    folder: Path,
    one_job: tuple[Path, batch.BatchSummary],
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    import multiprocessing

    if multiprocessing.get_start_method() != "fork":
        pytest.skip("the patched function reaches the workers only when they are forked")
    out = tmp_path / "out"

    def kill() -> None:
        os.kill(os.getpid(), signal.SIGKILL)

    monkeypatch.setattr(batch_study, "_analyse", _interrupting("study-0120.yaml", kill))
    with pytest.raises(BatchInterrupted, match="worker process stopped"):
        run_batch(folder, BatchOptions(outdir=out, pdf=False), jobs=2)
    _assert_clean(out)

    monkeypatch.undo()
    rerun = run_batch(folder, BatchOptions(outdir=out, pdf=False), jobs=2)
    assert rerun.done + rerun.skipped == VALID and rerun.failed == len(BROKEN)
    out1, _ = one_job
    assert tree(out) == tree(out1)


def test_a_crash_in_one_study_does_not_stop_the_others(
    folder: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    def bug() -> None:
        raise RuntimeError("renderer exploded")

    monkeypatch.setattr(batch_study, "_analyse", _interrupting("study-0010.yaml", bug))
    summary = run_batch(folder, BatchOptions(outdir=tmp_path, pdf=False), jobs=1)
    assert (summary.done, summary.failed) == (VALID - 1, len(BROKEN) + 1)
    assert (
        "internal error: RuntimeError: renderer exploded" in (tmp_path / "failures.csv").read_text()
    )


def test_progress_called_once_per_study_in_order(folder: Path, tmp_path: Path) -> None:
    seen: list[batch.StudyResult] = []
    run_batch(folder, BatchOptions(outdir=tmp_path, pdf=False), jobs=2, progress=seen.append)
    assert [r.source for r in seen] == [
        p.relative_to(folder).as_posix() for p in find_studies(folder)
    ]
    assert {r.status for r in seen} == {Status.DONE, Status.FAILED}


def test_empty_folder_writes_empty_tables(tmp_path: Path) -> None:
    (tmp_path / "in").mkdir()
    summary = run_batch(tmp_path / "in", BatchOptions(outdir=tmp_path / "out", pdf=False))
    assert summary.total == 0 and summary.ok
    assert (tmp_path / "out" / "registry.ndjson").read_text() == ""
    assert list(tables.read_studies_csv(tmp_path / "out" / "studies.csv").columns) == list(
        tables.STUDY_COLUMNS
    )


def test_not_a_folder_is_a_reporting_error(tmp_path: Path) -> None:
    with pytest.raises(ReportingError, match="not a folder"):
        find_studies(tmp_path / "missing")


def test_pdf_path_calls_the_report_writer(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The PDF path against the agreed signature write_report(analysis, outdir, *, paper, templates_dir)."""
    calls: list[dict[str, Any]] = []

    def fake_write_report(
        analysis: Any, outdir: Path, *, paper: str = "A4", templates_dir: Path | None = None
    ) -> list[Path]:
        calls.append({"id": analysis.study.id, "paper": paper})
        pdf = outdir / f"{analysis.study.id}.pdf"
        svg = outdir / f"{analysis.study.id}.peak.svg"
        pdf.write_bytes(b"%PDF-1.7 invented")
        svg.write_text("<svg/>")
        return [pdf, svg]

    monkeypatch.setattr(batch_study, "_report_writer", lambda: fake_write_report)
    indir = write_folder(tmp_path, valid=3, broken=False)
    out = tmp_path / "out"
    summary = run_batch(indir, BatchOptions(outdir=out, fhir=True, paper="Letter"))
    assert summary.done == 3 and [c["paper"] for c in calls] == ["Letter"] * 3
    bundle = json.loads((out / "GEN-0000.fhir.json").read_text())
    report = bundle["entry"][0]["resource"]
    assert report["presentedForm"][0]["contentType"] == "application/pdf"
    again = run_batch(indir, BatchOptions(outdir=out, fhir=True, paper="Letter"))
    assert again.skipped == 3 and len(calls) == 3  # outputs listed in the stamp are all present
    (out / "GEN-0001.peak.svg").unlink()
    third = run_batch(indir, BatchOptions(outdir=out, fhir=True, paper="Letter"))
    assert (third.done, third.skipped) == (1, 2)


def test_record_text_is_byte_identical_to_record_json() -> None:
    from reporting.analysis import analyze_file
    from reporting.demo import demo_study_names
    from reporting.export.record import record_dict, record_json

    demo = Path(__file__).parent.parent / "reporting" / "data" / "demo"
    for name in demo_study_names():
        analysis = analyze_file(demo / name)
        data = record_dict(analysis)
        assert batch.record_text(analysis) == record_json(analysis)
        line = batch.registry_line(analysis)
        assert json.loads(line) == data
        assert line == json.dumps(data, ensure_ascii=False, separators=(",", ":"))


def test_rerun_redoes_a_study_whose_curve_file_changed(tmp_path: Path) -> None:
    demo = Path(__file__).parent.parent / "reporting" / "data" / "demo"
    if not (demo / "DEMO-0006.curves.csv").exists():
        pytest.skip("no demo study with curves")
    indir = tmp_path / "in"
    indir.mkdir()
    for name in ("DEMO-0006.yaml", "DEMO-0006.curves.csv", "DEMO-0001.yaml"):
        (indir / name).write_bytes((demo / name).read_bytes())
    options = BatchOptions(outdir=tmp_path / "out", pdf=False)
    assert run_batch(indir, options).done == 2
    assert run_batch(indir, options).skipped == 2
    curves = indir / "DEMO-0006.curves.csv"
    stat = curves.stat()
    os.utime(curves, ns=(stat.st_atime_ns, stat.st_mtime_ns + 10**12))
    again = run_batch(indir, options)
    assert (again.done, again.skipped) == (1, 1)


def test_output_folder_inside_the_input_folder_is_not_read_back(tmp_path: Path) -> None:
    indir = write_folder(tmp_path, valid=4, broken=False)
    for out in (indir / "out", indir):
        first = run_batch(indir, BatchOptions(outdir=out, pdf=False, fhir=True))
        again = run_batch(indir, BatchOptions(outdir=out, pdf=False, fhir=True))
        assert (first.total, again.total, again.skipped) == (4, 4, 4)


# --- duplicate ids, stale outputs, write errors -----------------------------------------------------


def fake_report_writer(log: Path) -> Callable[..., list[Path]]:
    """Stands in for reporting.render.write_report (the record, one map and a PDF, all invented).

    Each call appends the study id to ``log``: a file, so calls made in worker processes count too.
    """

    def write_report(
        analysis: Any, outdir: Path, *, paper: str = "A4", templates_dir: Path | None = None
    ) -> list[Path]:
        from reporting.export.record import record_json

        sid = analysis.study.id
        with log.open("a") as handle:
            handle.write(sid + "\n")
        paths = [outdir / f"{sid}.record.json", outdir / f"{sid}.peak.svg", outdir / f"{sid}.pdf"]
        paths[0].write_text(record_json(analysis))
        paths[1].write_text(f"<svg><!-- {analysis.wmsi} --></svg>")
        paths[2].write_bytes(f"%PDF-1.7 invented {analysis.wmsi}".encode())
        return paths

    return write_report


def patch_report_writer(monkeypatch: pytest.MonkeyPatch, log: Path, jobs: int) -> None:
    import multiprocessing

    if jobs > 1 and multiprocessing.get_start_method() != "fork":
        pytest.skip("the patched function reaches the workers only when they are forked")
    monkeypatch.setattr(batch_study, "_report_writer", lambda: fake_report_writer(log))


def failure_rows(out: Path) -> list[list[str]]:
    import csv

    with (out / "failures.csv").open(newline="") as handle:
        return list(csv.reader(handle))[1:]


def write_study(folder: Path, name: str, study_id: str, seed: int) -> dict[str, Any]:
    """An invented study with its own scores (the seed) under the given id."""
    study = make_study(seed, random.Random(seed))
    study["study"]["id"] = study_id
    folder.mkdir(parents=True, exist_ok=True)
    (folder / name).write_text(json.dumps(study), encoding="utf-8")
    return study


def record_of(out: Path, study_id: str) -> dict[str, Any]:
    data: dict[str, Any] = json.loads((out / f"{study_id}.record.json").read_text())
    return data


def wall_motion_of(study: dict[str, Any]) -> str:
    return str(study["stages"]["peak"]["wall_motion"])


def peak_scores(record: dict[str, Any]) -> str:
    return "".join(
        "x" if s["wall_motion"]["peak"] is None else str(s["wall_motion"]["peak"])
        for s in record["segments"]
    )


@pytest.mark.parametrize("jobs", [1, 2], ids=["one-job", "two-jobs"])
def test_duplicate_study_id_refuses_the_later_file_before_writing(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, jobs: int
) -> None:
    calls = tmp_path / "calls.txt"
    patch_report_writer(monkeypatch, calls, jobs)
    indir = tmp_path / "in"
    first = write_study(indir, "a.yaml", "T-1", seed=3)
    second = write_study(indir, "b.yaml", "T-1", seed=8)
    assert wall_motion_of(first) != wall_motion_of(second)  # different scores under one id
    for i in range(10):  # enough studies to spread over several worker tasks
        write_study(indir, f"c{i}.json", f"U-{i}", seed=20 + i)
    out = tmp_path / "out"
    options = BatchOptions(outdir=out, fhir=True)
    summary = run_batch(indir, options, jobs=jobs)
    assert (summary.done, summary.failed) == (11, 1)
    assert calls.read_text().split().count("T-1") == 1  # the later file was never written
    assert peak_scores(record_of(out, "T-1")) == wall_motion_of(first)
    assert b"%PDF" in (out / "T-1.pdf").read_bytes()
    assert failure_rows(out) == [
        [
            "b.yaml",
            "study.id",
            "study id 'T-1' is also used by a.yaml, which comes first; each study needs its own id "
            "(nothing was written for this file)",
        ]
    ]

    again = run_batch(indir, options, jobs=jobs)  # a.yaml is skipped: its record is its own
    assert (again.done, again.skipped, again.failed) == (0, 11, 1)
    registry = [json.loads(line) for line in (out / "registry.ndjson").open()]
    t1 = [r for r in registry if r["study"]["id"] == "T-1"]
    assert len(t1) == 1 and peak_scores(t1[0]) == wall_motion_of(first)
    studies = tables.read_studies_csv(out / "studies.csv")
    assert list(studies["study_id"]).count("T-1") == 1


def test_duplicate_ids_give_the_same_files_for_any_number_of_jobs(tmp_path: Path) -> None:
    indir = tmp_path / "in"
    for i in range(40):  # every fifth file repeats an earlier id
        write_study(indir, f"s{i:02d}.json", f"D-{i - 3 if i % 5 == 4 else i}", seed=i)
    one = run_batch(indir, BatchOptions(outdir=tmp_path / "one", pdf=False), jobs=1)
    two = run_batch(indir, BatchOptions(outdir=tmp_path / "two", pdf=False), jobs=2)
    assert one.line() == two.line() == "40 studies: 32 done, 0 skipped, 8 failed"
    assert tree(tmp_path / "one") == tree(tmp_path / "two")


def test_ids_differing_only_in_case_are_duplicates(tmp_path: Path) -> None:
    # T-1.pdf and t-1.pdf are one file on case-insensitive file systems
    indir = tmp_path / "in"
    write_study(indir, "a.json", "T-1", seed=1)
    write_study(indir, "b.json", "t-1", seed=2)
    summary = run_batch(indir, BatchOptions(outdir=tmp_path / "out", pdf=False))
    assert (summary.done, summary.failed) == (1, 1)
    assert (
        "the same in file names as 'T-1', used by a.json"
        in (tmp_path / "out" / "failures.csv").read_text()
    )


def test_duplicate_ids_when_deidentifying_name_no_file_or_id(tmp_path: Path) -> None:
    indir = tmp_path / "in"
    write_study(indir, "Orla_Quillon.json", "WH-1", seed=1)  # file names may carry identifiers
    write_study(indir, "Tamsin_Marlowe.json", "WH-1", seed=2)
    key = b"an invented key for tests only, 32+ bytes"
    out = tmp_path / "out"
    options = BatchOptions(outdir=out, deidentify=True, deid_key=key)
    summary = run_batch(indir, options, jobs=2)
    assert (summary.done, summary.failed) == (1, 1)
    [(label, location, message)] = failure_rows(out)
    assert label == options.file_label("Tamsin_Marlowe.json") and location == "study.id"
    assert f"also used by {options.file_label('Orla_Quillon.json')}" in message
    text = (out / "failures.csv").read_text()
    assert "WH-1" not in text and "Orla" not in text and "Tamsin" not in text


def test_a_record_written_over_by_another_file_is_not_reused(tmp_path: Path) -> None:
    # What an earlier version left behind: b.json's record under a.json's stamp.
    indir = tmp_path / "in"
    first = write_study(indir, "a.json", "T-1", seed=3)
    out = tmp_path / "out"
    options = BatchOptions(outdir=out, pdf=False)
    run_batch(indir, options)
    other = tmp_path / "other"
    write_study(other, "b.json", "T-1", seed=8)
    run_batch(other, BatchOptions(outdir=tmp_path / "out-b", pdf=False))
    (out / "T-1.record.json").write_bytes((tmp_path / "out-b" / "T-1.record.json").read_bytes())
    again = run_batch(indir, options)
    assert (again.done, again.skipped) == (1, 0)
    assert peak_scores(record_of(out, "T-1")) == wall_motion_of(first)


@pytest.mark.parametrize("jobs", [1, 2], ids=["one-job", "two-jobs"])
def test_a_study_that_fails_later_leaves_no_outputs(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, jobs: int
) -> None:
    patch_report_writer(monkeypatch, tmp_path / "calls.txt", jobs)
    indir = tmp_path / "in"
    study = write_study(indir, "a.json", "T-1", seed=3)
    write_study(indir, "b.json", "T-2", seed=4)
    out = tmp_path / "out"
    options = BatchOptions(outdir=out, fhir=True)
    run_batch(indir, options, jobs=jobs)
    t1 = {"T-1.record.json", "T-1.peak.svg", "T-1.pdf", "T-1.fhir.json"}
    assert t1 <= {p.name for p in out.iterdir()}
    stamps_before = set((out / ".segreport-batch").iterdir())

    study["stages"]["peak"]["wall_motion"] = "9" * 17  # now off the scale: the study fails
    (indir / "a.json").write_text(json.dumps(study))
    later = run_batch(indir, options, jobs=jobs)
    assert (later.done, later.skipped, later.failed) == (0, 1, 1)
    names = {p.name for p in out.iterdir()}
    assert not names & t1, "the failed study's earlier files are still there"
    assert {"T-2.record.json", "T-2.pdf"} <= names
    assert len(set((out / ".segreport-batch").iterdir())) == len(stamps_before) - 1
    registry = (out / "registry.ndjson").read_text()
    assert '"T-1"' not in registry and '"T-2"' in registry


def test_a_study_whose_id_changed_leaves_no_files_under_the_old_id(tmp_path: Path) -> None:
    indir = tmp_path / "in"
    study = write_study(indir, "a.json", "T-1", seed=3)
    out = tmp_path / "out"
    options = BatchOptions(outdir=out, pdf=False, fhir=True)
    run_batch(indir, options)
    study["study"]["id"] = "T-9"
    (indir / "a.json").write_text(json.dumps(study))
    assert run_batch(indir, options).done == 1
    assert sorted(p.name for p in out.glob("T-*")) == ["T-9.fhir.json", "T-9.record.json"]


def test_stale_files_of_an_id_now_owned_by_an_earlier_file_are_kept(tmp_path: Path) -> None:
    # b.json wrote T-1 alone; then a.json (earlier in order) arrives with T-1 and owns it.
    indir = tmp_path / "in"
    write_study(indir, "b.json", "T-1", seed=8)
    out = tmp_path / "out"
    options = BatchOptions(outdir=out, pdf=False)
    run_batch(indir, options)
    first = write_study(indir, "a.json", "T-1", seed=3)
    summary = run_batch(indir, options, jobs=2)
    assert (summary.done, summary.failed) == (1, 1)
    assert peak_scores(record_of(out, "T-1")) == wall_motion_of(first)
    again = run_batch(indir, options)
    assert (again.skipped, again.failed) == (1, 1)
    assert peak_scores(record_of(out, "T-1")) == wall_motion_of(first)


def test_write_errors_fail_only_their_study(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from reporting.files import write_atomic

    def failing(path: Path, data: bytes | str) -> None:
        if path.name == "U-1.record.json":  # what reporting.files raises for a write error
            raise ReportingError(f"{path}: cannot write: No space left on device")
        if path.name == "U-2.fhir.json":  # a plain OSError must not escape either
            raise OSError(28, "No space left on device", str(path))
        write_atomic(path, data)

    monkeypatch.setattr(batch_study, "write_atomic", failing)
    indir = tmp_path / "in"
    for i in range(4):
        write_study(indir, f"s{i}.json", f"U-{i}", seed=i)
    out = tmp_path / "out"
    summary = run_batch(indir, BatchOptions(outdir=out, pdf=False, fhir=True))
    assert (summary.done, summary.failed) == (2, 2)
    assert failure_rows(out) == [
        ["s1.json", "", "U-1.record.json: cannot write: No space left on device"],
        ["s2.json", "", "cannot write U-2.fhir.json: No space left on device"],
    ]
    assert sorted(p.name for p in out.glob("U-*")) == [
        "U-0.fhir.json",
        "U-0.record.json",
        "U-3.fhir.json",
        "U-3.record.json",
    ]


def test_an_unusable_output_folder_is_one_clean_error(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import tempfile

    from click.testing import CliRunner

    from reporting.cli import main

    indir = tmp_path / "in"
    write_study(indir, "a.json", "T-1", seed=1)
    blocker = tmp_path / "file"
    blocker.write_text("a file, not a folder")
    for outdir, message in [(blocker, "not a folder"), (blocker / "out", "cannot create")]:
        with pytest.raises(ReportingError, match=message):
            run_batch(indir, BatchOptions(outdir=outdir, pdf=False))
        result = CliRunner().invoke(main, ["batch", str(indir), "-o", str(outdir), "--no-pdf"])
        assert result.exit_code in (1, 2) and isinstance(result.exception, SystemExit)
        assert "Traceback" not in result.output and "Error: " in result.output

    def refuse(*args: Any, **kwargs: Any) -> Any:  # a folder without write permission
        raise PermissionError(13, "Permission denied", str(kwargs.get("dir")))

    monkeypatch.setattr(tempfile, "mkstemp", refuse)
    out = tmp_path / "out"
    with pytest.raises(ReportingError, match="cannot write the output folder: Permission denied"):
        run_batch(indir, BatchOptions(outdir=out, pdf=False))
    assert not list(out.glob("T-1.*")), "no study was processed"


def test_aggregate_files_have_the_usual_permissions(
    one_job: tuple[Path, batch.BatchSummary],
) -> None:
    import stat

    from reporting.files import FILE_MODE

    out, _ = one_job
    for name in ("registry.ndjson", "studies.csv", "segments.csv", "failures.csv"):
        if (out / name).exists():
            assert stat.S_IMODE((out / name).stat().st_mode) == FILE_MODE, name


def test_fhir_bundles_use_the_labs_code_and_identifier_systems(tmp_path: Path) -> None:
    # `batch --fhir --settings F` must build the same Bundle as `fhir --settings F`: the lab's own
    # identifier system names the order and patient identifiers (HL7 FHIR R4 Identifier.system).
    indir = write_folder(tmp_path, valid=2, broken=False)
    lab = tmp_path / "lab.yaml"
    uri = "https://echo.larkspur-valley.org/fhir/id"
    lab.write_text(f"lab_identifier_system_uri: {uri}\n", encoding="utf-8")
    out = tmp_path / "out"
    summary = run_batch(
        indir, BatchOptions(outdir=out, pdf=False, fhir=True, settings_path=lab), jobs=1
    )
    assert summary.done == 2
    systems = {
        ident["system"]
        for entry in json.loads((out / "GEN-0000.fhir.json").read_text())["entry"]
        for ident in entry["resource"].get("identifier", [])
    }
    assert systems and all(s.startswith(uri + "/") for s in systems), systems


def test_the_start_up_heap_is_frozen_only_while_a_batch_runs(folder: Path, tmp_path: Path) -> None:
    # gc.freeze keeps import-time objects out of the collector's passes during the batch (and its
    # forked workers); afterwards a long-running caller (the lab server) collects them again
    import gc

    seen: list[int] = []
    run_batch(
        folder,
        BatchOptions(outdir=tmp_path / "out", pdf=False),
        jobs=1,
        progress=lambda _result: seen.append(gc.get_freeze_count()),
    )
    assert seen and min(seen) > 1000  # frozen while the studies were processed
    assert gc.get_freeze_count() == 0

    def stop(_result: object) -> None:
        raise KeyboardInterrupt  # the reader stops the batch half-way

    with pytest.raises(KeyboardInterrupt):
        run_batch(folder, BatchOptions(outdir=tmp_path / "stopped", pdf=False), progress=stop)
    assert gc.get_freeze_count() == 0
    gc.freeze()  # a caller that froze its own heap (a pre-fork server) keeps its freeze
    try:
        frozen = gc.get_freeze_count()
        run_batch(folder, BatchOptions(outdir=tmp_path / "caller", pdf=False), jobs=1)
        assert gc.get_freeze_count() == frozen
    finally:
        gc.unfreeze()
