"""The remaining commands end to end through the command line: outputs written, errors located."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from pypdf import PdfReader

from reporting.cli import main


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("demo")
    result = CliRunner().invoke(main, ["demo", "-o", str(folder)])
    assert result.exit_code == 0, result.output
    return folder


def test_report_writes_record_maps_and_pdf(demo: Path, tmp_path: Path) -> None:
    result = CliRunner().invoke(
        main, ["report", str(demo / "DEMO-0004.yaml"), "-o", str(tmp_path), "--paper", "Letter"]
    )
    assert result.exit_code == 0, result.output
    names = {p.name for p in tmp_path.iterdir()}
    assert {"DEMO-0004.record.json", "DEMO-0004.pdf"} <= names
    assert any(n.endswith(".svg") for n in names)
    text = "".join(page.extract_text() for page in PdfReader(tmp_path / "DEMO-0004.pdf").pages)
    assert "RCA" in text and "Duke" in text


def test_report_of_bad_study_leaves_nothing(tmp_path: Path) -> None:
    study = tmp_path / "s.yaml"
    study.write_text("schema_version: 1\n")
    out = tmp_path / "out"
    result = CliRunner().invoke(main, ["report", str(study), "-o", str(out)])
    assert result.exit_code == 1
    assert result.stderr.startswith("Error: ")
    assert not out.exists() or not any(out.iterdir())


def test_curves_fits_a_file(demo: Path, tmp_path: Path) -> None:
    out = tmp_path / "fits.csv"
    result = CliRunner().invoke(
        main,
        ["curves", str(demo / "DEMO-0006.curves.csv"), "-o", str(out), "--segment-model", "17"],
    )
    assert result.exit_code == 0, result.output
    lines = out.read_text().splitlines()
    assert lines[0].startswith("stage,segment,status")
    assert len(lines) == 1 + 34  # 17 segments at rest and at peak


def test_curves_reports_a_broken_file(tmp_path: Path) -> None:
    bad = tmp_path / "c.csv"
    bad.write_text("stage,segment,when,intensity\n")
    result = CliRunner().invoke(main, ["curves", str(bad)])
    assert result.exit_code == 1 and "Error: " in result.stderr


def test_fhir_bundle(demo: Path) -> None:
    result = CliRunner().invoke(main, ["fhir", str(demo / "DEMO-0002.yaml")])
    assert result.exit_code == 0
    bundle = json.loads(result.stdout)
    assert bundle["resourceType"] == "Bundle"


def test_batch_counts_failures(demo: Path, tmp_path: Path) -> None:
    indir = tmp_path / "in"
    indir.mkdir()
    for name in ("DEMO-0001.yaml", "DEMO-0004.yaml"):
        (indir / name).write_text((demo / name).read_text())
    (indir / "broken.yaml").write_text("schema_version: 1\nprotocol: swimming\n")
    out = tmp_path / "out"
    result = CliRunner().invoke(main, ["batch", str(indir), "-o", str(out), "--no-pdf", "--quiet"])
    assert result.exit_code == 1
    assert "3 studies: 2 done, 0 skipped, 1 failed" in result.stderr
    assert "broken.yaml" in result.stderr
    assert len((out / "registry.ndjson").read_text().splitlines()) == 2
    usage = CliRunner().invoke(main, ["batch", str(indir), "-o", str(out), "--keep-text"])
    assert usage.exit_code == 2


def test_batch_deidentify_needs_a_key(demo: Path, tmp_path: Path) -> None:
    result = CliRunner(env={"SEGREPORT_DEID_KEY": ""}).invoke(
        main, ["batch", str(demo), "-o", str(tmp_path / "o"), "--deidentify", "--quiet"]
    )
    assert result.exit_code == 1 and "key" in result.stderr


def _angio(tmp_path: Path) -> Path:
    angio = tmp_path / "angio.csv"
    angio.write_text(
        "study_id,vessel,stenosis_percent\nDEMO-0001,LAD,10\nDEMO-0002,LAD,85\nDEMO-0004,RCA,40\n"
    )
    return angio


def test_qa_writes_json_and_pdf(demo: Path, tmp_path: Path) -> None:
    out, pdf = tmp_path / "qa.json", tmp_path / "qa.pdf"
    result = CliRunner().invoke(
        main,
        [
            "qa",
            str(demo),
            "--angio",
            str(_angio(tmp_path)),
            "-o",
            str(out),
            "--pdf",
            str(pdf),
            "--stenosis",
            "70",
        ],
    )
    assert result.exit_code == 0, result.output
    review = json.loads(out.read_text())
    sens = review["per_patient"]["sensitivity"]
    assert sens["numerator"] == 1 and sens["denominator"] == 1
    assert pdf.read_bytes().startswith(b"%PDF")


def test_qa_bad_angiography_row(demo: Path, tmp_path: Path) -> None:
    angio = tmp_path / "angio.csv"
    angio.write_text("study_id,vessel,stenosis_percent\nDEMO-0001,XYZ,10\n")
    out = tmp_path / "qa.json"
    result = CliRunner().invoke(main, ["qa", str(demo), "--angio", str(angio), "-o", str(out)])
    assert result.exit_code == 1
    assert "line 2" in result.stderr
    assert not out.exists()


def test_agreement_of_a_reader_with_themself(demo: Path) -> None:
    result = CliRunner().invoke(main, ["agreement", str(demo), str(demo)])
    assert result.exit_code == 0, result.output
    assert "kappa" in result.stdout


def test_schema_command(tmp_path: Path) -> None:
    printed = CliRunner().invoke(main, ["schema"])
    assert json.loads(printed.stdout)["$id"].endswith("record-1.schema.json")
    written = CliRunner().invoke(main, ["schema", "-o", str(tmp_path)])
    assert written.exit_code == 0 and (tmp_path / "study-1.schema.json").exists()


# --- -o - and -o /dev/stdout print; outputs never replace a pipe or a device (#11 item 4) ---------

# Every command that writes one file, as (id, arguments before -o).
ONE_FILE_COMMANDS = [
    ("analyze", lambda demo, tmp: ["analyze", str(demo / "DEMO-0004.yaml")]),
    ("fhir", lambda demo, tmp: ["fhir", str(demo / "DEMO-0004.yaml")]),
    (
        "curves",
        lambda demo, tmp: ["curves", str(demo / "DEMO-0006.curves.csv"), "--segment-model", "17"],
    ),
    ("agreement", lambda demo, tmp: ["agreement", str(demo), str(demo)]),
    ("qa", lambda demo, tmp: ["qa", str(demo), "--angio", str(_angio(tmp))]),
]


@pytest.mark.parametrize("target", ["-", "/dev/stdout"])
@pytest.mark.parametrize("command,args", ONE_FILE_COMMANDS, ids=[c[0] for c in ONE_FILE_COMMANDS])
def test_dash_or_dev_stdout_prints(
    demo: Path, tmp_path: Path, command: str, args: Any, target: str
) -> None:
    runner = CliRunner()
    with runner.isolated_filesystem(temp_dir=tmp_path) as cwd:
        plain = runner.invoke(main, args(demo, tmp_path))
        printed = runner.invoke(main, [*args(demo, tmp_path), "-o", target])
        assert printed.exit_code == 0, printed.output
        assert printed.stdout == plain.stdout and printed.stdout.strip()
        assert "Wrote" not in printed.stderr
        assert list(Path(cwd).iterdir()) == []  # no file named "-" left behind


def test_dev_stdout_of_a_real_process_is_the_output(demo: Path, tmp_path: Path) -> None:
    # Outside the test runner /dev/stdout is the process's own stdout: a pipe here, a regular file
    # when redirected; either way the record goes there and no file is replaced behind the shell.
    command = [sys.executable, "-m", "reporting", "analyze", str(demo / "DEMO-0004.yaml")]
    piped = subprocess.run([*command, "-o", "/dev/stdout"], capture_output=True, check=True)
    redirected = tmp_path / "out.json"
    with redirected.open("wb") as handle:
        subprocess.run([*command, "-o", "/dev/stdout"], stdout=handle, check=True)
    plain = subprocess.run(command, capture_output=True, check=True)
    assert piped.stdout == plain.stdout == redirected.read_bytes()
    assert json.loads(plain.stdout)["study"]["id"] == "DEMO-0004"


def test_qa_pdf_to_stdout(demo: Path, tmp_path: Path) -> None:
    out = tmp_path / "qa.json"
    args = ["qa", str(demo), "--angio", str(_angio(tmp_path))]
    result = CliRunner().invoke(main, [*args, "-o", str(out), "--pdf", "-"])
    assert result.exit_code == 0, result.output
    assert result.stdout_bytes.startswith(b"%PDF") and out.exists()
    # Both the JSON (the default) and the PDF to stdout would mix them: a usage error.
    both = CliRunner().invoke(main, [*args, "--pdf", "-"])
    assert both.exit_code == 2 and "cannot both go to stdout" in both.stderr


def _not_regular(kind: str, folder: Path) -> Path:
    target = folder / "out.json"
    if kind == "fifo":  # renaming over a pipe would cut off whoever reads it
        os.mkfifo(target)
    elif kind == "link-to-dev-null":  # a device behind a link: never replaced by a plain file
        target.symlink_to("/dev/null")
    return target


@pytest.mark.parametrize("kind", ["fifo", "link-to-dev-null"])
@pytest.mark.parametrize("command,args", ONE_FILE_COMMANDS, ids=[c[0] for c in ONE_FILE_COMMANDS])
def test_output_over_a_pipe_or_device_is_refused(
    demo: Path, tmp_path: Path, command: str, args: Any, kind: str
) -> None:
    target = _not_regular(kind, tmp_path)
    before = os.lstat(target)
    result = CliRunner().invoke(main, [*args(demo, tmp_path), "-o", str(target)])
    assert result.exit_code == 1, result.output
    what = "a named pipe (FIFO)" if kind == "fifo" else "a device"
    assert result.stderr == (
        f"Error: {target}: cannot write: it is {what}; only a regular file is replaced\n"
    )
    after = os.lstat(target)
    assert (after.st_ino, after.st_mode) == (before.st_ino, before.st_mode)
    assert sorted(p.name for p in tmp_path.iterdir() if p.name != "angio.csv") == ["out.json"]
