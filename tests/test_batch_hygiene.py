"""Batch hygiene (issue 11, item 5): orphan workers, one batch per output folder, lab files in INDIR."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import yaml
from conftest import study_dict

from reporting.batch import BatchOptions, Status, run_batch
from reporting.batch.folder import BOOKKEEPING, LOCK, BatchLock
from reporting.errors import OutputError

ROOT = Path(__file__).parent.parent


def write_studies(indir: Path, count: int) -> None:
    indir.mkdir(parents=True, exist_ok=True)
    for i in range(count):
        data = study_dict(study={"id": f"H-{i:04d}", "date": "2026-10-14"})
        (indir / f"s{i:04d}.json").write_text(json.dumps(data), encoding="utf-8")


def batch_process(indir: Path, outdir: Path, *extra: str) -> subprocess.Popen[bytes]:
    # Its own session, so its process group holds the batch and every worker it starts.
    return subprocess.Popen(
        [sys.executable, "-m", "reporting", "batch", str(indir), "-o", str(outdir), "-q", *extra],
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        start_new_session=True,
    )


def group_members(pgid: int) -> list[int]:
    members = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        # fields: state, ppid, pgrp, ...; a zombie has ended already
        if int(fields[2]) == pgid and fields[0] != "Z":
            members.append(int(entry.name))
    return members


def wait_for(condition: object, timeout_s: float) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if condition():  # type: ignore[operator]
            return True
        time.sleep(0.05)
    return False


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs /proc to list processes")
def test_workers_exit_when_the_batch_is_killed(tmp_path: Path) -> None:
    indir, outdir = tmp_path / "in", tmp_path / "out"
    write_studies(indir, 400)  # far more than the workers finish before the kill
    proc = batch_process(indir, outdir, "--jobs", "2")
    try:
        # two workers besides the batch itself
        assert wait_for(lambda: len(group_members(proc.pid)) >= 3, 60), "workers never started"
        assert wait_for(lambda: any(outdir.glob("*.record.json")), 60), "no study finished"
        workers = [p for p in group_members(proc.pid) if p != proc.pid]
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(10)
        # a worker checks for its batch twice a second: all gone within a few seconds
        assert wait_for(lambda: not group_members(proc.pid), 5), (
            f"orphan workers left: {group_members(proc.pid)} (workers were {workers})"
        )
    finally:
        for pid in group_members(proc.pid):
            os.kill(pid, signal.SIGKILL)
        proc.stdout.close()  # type: ignore[union-attr]
        proc.stderr.close()  # type: ignore[union-attr]


def test_a_second_batch_into_the_same_folder_is_refused_at_once(tmp_path: Path) -> None:
    indir, outdir = tmp_path / "in", tmp_path / "out"
    write_studies(indir, 300)
    first = batch_process(indir, outdir)
    try:
        lock = outdir / BOOKKEEPING / LOCK
        assert wait_for(lock.exists, 60), "the first batch never took its lock"
        started = time.monotonic()
        second = subprocess.run(
            [sys.executable, "-m", "reporting", "batch", str(indir), "-o", str(outdir), "-q"],
            cwd=ROOT,
            capture_output=True,
            text=True,
            timeout=60,
        )
        elapsed = time.monotonic() - started
        assert first.poll() is None, "the first batch ended too early for this test"
        assert second.returncode == 1
        assert second.stderr.startswith(
            f"Error: {outdir}: another batch or export (process {first.pid}"
        )
        assert "Traceback" not in second.stderr
        assert elapsed < 10  # refused at once, not after waiting for the first batch
        assert first.wait(300) == 0, first.stderr.read()  # type: ignore[union-attr]
        assert not lock.exists()  # released at the end
    finally:
        if first.poll() is None:
            os.killpg(first.pid, signal.SIGKILL)
            first.wait(10)
        first.stdout.close()  # type: ignore[union-attr]
        first.stderr.close()  # type: ignore[union-attr]


def dead_pid() -> int:
    code = "import os; print(os.getpid())"
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    return int(proc.stdout)


def test_a_stale_lock_of_a_dead_batch_is_taken_over(
    tmp_path: Path, caplog: pytest.LogCaptureFixture
) -> None:
    indir, outdir = tmp_path / "in", tmp_path / "out"
    write_studies(indir, 2)
    lock = outdir / BOOKKEEPING / LOCK
    lock.parent.mkdir(parents=True)
    pid = dead_pid()  # a batch killed outright leaves its lock file behind
    lock.write_text(json.dumps({"pid": pid, "started": "2026-10-14T08:00:00+00:00"}))
    caplog.set_level("WARNING")
    summary = run_batch(indir, BatchOptions(outdir=outdir, pdf=False))
    assert summary.done == 2
    assert f"took over the lock of batch process {pid}" in caplog.text
    assert not lock.exists()


def test_a_lock_held_by_a_live_batch_refuses_in_process(tmp_path: Path) -> None:
    indir, outdir = tmp_path / "in", tmp_path / "out"
    write_studies(indir, 1)
    outdir.mkdir()
    holder = BatchLock(outdir)
    holder.acquire()
    try:
        with pytest.raises(
            OutputError, match=rf"another batch or export \(process {os.getpid()}, started "
        ):
            run_batch(indir, BatchOptions(outdir=outdir, pdf=False))
        assert not list(outdir.glob("*.record.json"))  # nothing written
    finally:
        holder.release()
    assert run_batch(indir, BatchOptions(outdir=outdir, pdf=False)).done == 1


TERRITORY_MAP = {
    "name": "lab",
    "title": "Our lab's map",
    "source": "lab-defined",
    "territories": {
        "17": {"LAD": [1, 2, 7, 8, 13, 14, 17], "RCA": [3, 4, 9, 10, 15], "LCx": [5, 6, 11, 12, 16]}
    },
}


@pytest.mark.parametrize(
    ("name", "content", "kind"),
    [
        # a lab map kept beside the studies that name it (territory_map: lab_map.yaml)
        ("lab_map.yaml", yaml.safe_dump(TERRITORY_MAP), "territory map"),
        ("lab_map.json", json.dumps(TERRITORY_MAP), "territory map"),
        # lab settings: only names of settings as keys
        ("settings.yaml", "target_heart_rate_fraction: 0.8\nlab_name: Our lab\n", "lab settings"),
    ],
    ids=["map-yaml", "map-json", "settings-yaml"],
)
def test_lab_map_or_settings_in_the_input_folder_is_not_a_failed_study(
    tmp_path: Path, name: str, content: str, kind: str, caplog: pytest.LogCaptureFixture
) -> None:
    caplog.set_level("INFO", logger="reporting.batch")
    indir, outdir = tmp_path / "in", tmp_path / "out"
    write_studies(indir, 2)
    (indir / name).write_text(content, encoding="utf-8")
    seen = []
    summary = run_batch(indir, BatchOptions(outdir=outdir, pdf=False), progress=seen.append)
    assert (summary.total, summary.done, summary.failed, summary.ignored) == (2, 2, 0, 1)
    assert summary.line().endswith("; 1 lab settings or territory map file left out (not studies)")
    assert [r.status for r in seen].count(Status.IGNORED) == 1
    assert (outdir / "failures.csv").read_text() == "file,location,message\n"
    assert f"{name}: {kind}, not a study: left out" in caplog.text


def test_a_study_naming_a_lab_map_in_the_input_folder_uses_it(tmp_path: Path) -> None:
    indir, outdir = tmp_path / "in", tmp_path / "out"
    indir.mkdir()
    (indir / "lab_map.yaml").write_text(yaml.safe_dump(TERRITORY_MAP), encoding="utf-8")
    data = study_dict(territory_map="lab_map.yaml")
    (indir / "study.json").write_text(json.dumps(data), encoding="utf-8")
    summary = run_batch(indir, BatchOptions(outdir=outdir, pdf=False))
    assert (summary.done, summary.failed, summary.ignored) == (1, 0, 1)
    record = json.loads((outdir / "T-0001.record.json").read_text())
    assert record["territory_map"]["title"] == "Our lab's map"


def test_a_broken_study_without_an_id_still_fails(tmp_path: Path) -> None:
    indir, outdir = tmp_path / "in", tmp_path / "out"
    indir.mkdir()
    # a study that lost its study block: not a map nor settings, so still a failed study
    (indir / "x.yaml").write_text("schema_version: 1\nprotocol: dobutamine\n", encoding="utf-8")
    summary = run_batch(indir, BatchOptions(outdir=outdir, pdf=False))
    assert (summary.failed, summary.ignored) == (1, 0)
