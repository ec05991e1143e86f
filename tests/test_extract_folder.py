"""An output folder holds identified outputs or a de-identified extract, never both (issue 11, item 1)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import study_dict

from reporting.batch import BatchOptions, run_batch
from reporting.batch.folder import BOOKKEEPING, DEIDENTIFIED, IDENTIFIED, MODE, folder_mode
from reporting.deidentify import KEY_ENV
from reporting.errors import OutputError

ROOT = Path(__file__).parent.parent
KEY = b"an invented key for tests only, 32+ bytes"


def inputs(tmp_path: Path) -> Path:
    indir = tmp_path / "in"
    indir.mkdir()
    for i in range(2):
        data = study_dict(study={"id": f"E-{i}", "date": "2026-10-14"})
        (indir / f"e{i}.json").write_text(json.dumps(data), encoding="utf-8")
    return indir


def tree(folder: Path) -> dict[str, bytes]:
    return {
        p.relative_to(folder).as_posix(): p.read_bytes() for p in folder.rglob("*") if p.is_file()
    }


def identified(outdir: Path, **kw: bool) -> BatchOptions:
    return BatchOptions(outdir=outdir, pdf=False, **kw)


def deidentified(outdir: Path, **kw: bool) -> BatchOptions:
    return BatchOptions(outdir=outdir, pdf=False, deidentify=True, deid_key=KEY, **kw)


@pytest.mark.parametrize(
    ("first", "second", "message"),
    [
        (identified, deidentified, "holds identified outputs"),
        (deidentified, identified, "holds a de-identified extract"),
    ],
    ids=["extract-into-identified", "identified-into-extract"],
)
@pytest.mark.parametrize("force", [False, True], ids=["", "force"])
def test_the_other_mode_is_refused_before_anything_is_written(
    tmp_path: Path, first: object, second: object, message: str, force: bool
) -> None:
    indir, outdir = inputs(tmp_path), tmp_path / "out"
    run_batch(indir, first(outdir))  # type: ignore[operator]
    before = tree(outdir)
    with pytest.raises(OutputError, match=message) as caught:
        run_batch(indir, second(outdir, force=force))  # type: ignore[operator]
    assert caught.value.location == str(outdir)
    assert "--force does not change this" in caught.value.problem
    assert tree(outdir) == before  # not a byte written, not even the lock


def test_the_folder_stamp_records_the_mode(tmp_path: Path) -> None:
    indir = inputs(tmp_path)
    run_batch(indir, identified(tmp_path / "a"))
    run_batch(indir, deidentified(tmp_path / "b"))
    assert folder_mode(tmp_path / "a") == IDENTIFIED
    assert folder_mode(tmp_path / "b") == DEIDENTIFIED
    stamp = json.loads((tmp_path / "b" / BOOKKEEPING / MODE).read_text())
    assert stamp["mode"] == DEIDENTIFIED and len(stamp["key"]) == 16
    # the same mode again is fine
    assert run_batch(indir, deidentified(tmp_path / "b")).skipped == 2


@pytest.mark.parametrize(
    ("make", "mode"),
    [
        # a folder written before the stamp existed: a PDF report is identified
        (lambda out: (out / "E-0.pdf").write_bytes(b"%PDF-1.4"), IDENTIFIED),
        # a record that does not say it is de-identified
        (lambda out: (out / "E-0.record.json").write_text('{"study": {"id": "E-0"}}'), IDENTIFIED),
        # an unreadable stamp: cannot tell, so nothing de-identified goes in
        (lambda out: (out / BOOKKEEPING / MODE).write_text("{not json"), "unreadable"),
    ],
    ids=["old-pdf", "old-record", "broken-stamp"],
)
def test_a_folder_without_a_valid_stamp_is_judged_by_its_files(
    tmp_path: Path, make: object, mode: str
) -> None:
    indir, outdir = inputs(tmp_path), tmp_path / "out"
    (outdir / BOOKKEEPING).mkdir(parents=True)
    make(outdir)  # type: ignore[operator]
    assert folder_mode(outdir) == mode
    with pytest.raises(OutputError):
        run_batch(indir, deidentified(outdir))


def test_the_command_refuses_with_a_located_error_and_exit_1(tmp_path: Path) -> None:
    indir, outdir = inputs(tmp_path), tmp_path / "out"
    command = [sys.executable, "-m", "reporting", "batch", str(indir), "-o", str(outdir), "-q"]
    subprocess.run([*command, "--no-pdf"], cwd=ROOT, check=True, capture_output=True)
    env = {KEY_ENV: KEY.decode(), "PATH": "/usr/bin:/bin"}
    run = subprocess.run(
        [*command, "--deidentify", "--force"], cwd=ROOT, capture_output=True, text=True, env=env
    )
    assert run.returncode == 1
    assert run.stderr.startswith(f"Error: {outdir}: holds identified outputs"), run.stderr
    assert "Traceback" not in run.stderr and len(run.stderr.splitlines()) == 1
