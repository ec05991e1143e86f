"""Atomic writing: usual permissions, located errors, nothing half written."""

from __future__ import annotations

import os
import re
import stat
from pathlib import Path

import pytest

from reporting.errors import OutputError, ReportingError
from reporting.files import all_or_nothing, temporary_beside, write_atomic


def test_written_file_has_the_usual_permissions(tmp_path: Path) -> None:
    old = os.umask(0o022)
    try:
        write_atomic(tmp_path / "a" / "r.json", "{}")
    finally:
        os.umask(old)
    mode = stat.S_IMODE((tmp_path / "a" / "r.json").stat().st_mode)
    assert mode == 0o644
    assert [p.name for p in (tmp_path / "a").iterdir()] == ["r.json"]


def test_unwritable_place_is_an_output_error(tmp_path: Path) -> None:
    (tmp_path / "file").write_text("x")
    with pytest.raises(OutputError, match="cannot write") as info:
        write_atomic(tmp_path / "file" / "r.json", "{}")
    assert isinstance(info.value, ReportingError)
    (tmp_path / "dir.pdf").mkdir()
    with pytest.raises(OutputError, match=r"dir\.pdf: cannot write"):
        write_atomic(tmp_path / "dir.pdf", b"%PDF")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["dir.pdf", "file"]


def test_all_or_nothing_removes_new_files_only(tmp_path: Path) -> None:
    old, new = tmp_path / "old.txt", tmp_path / "new.txt"
    old.write_text("kept")
    with pytest.raises(RuntimeError), all_or_nothing([old, new]):
        write_atomic(new, "x")
        raise RuntimeError("boom")
    assert old.read_text() == "kept" and not new.exists()


@pytest.mark.parametrize(
    "kind,what",
    [
        ("folder", "a folder"),  # os.replace would fail or, for an empty folder, be refused late
        ("fifo", "a named pipe (FIFO)"),  # renaming over it would cut off its reader
        ("link-to-device", "a device"),  # /dev/null behind a link must not become a plain file
    ],
)
def test_target_that_is_not_a_regular_file_is_never_replaced(
    tmp_path: Path, kind: str, what: str
) -> None:
    target = tmp_path / "out.json"
    if kind == "folder":
        target.mkdir()
    elif kind == "fifo":
        os.mkfifo(target)
    else:
        target.symlink_to("/dev/null")
    before = os.lstat(target)
    problem = f"cannot write: it is {what}; only a regular file is replaced"
    with pytest.raises(OutputError) as info:
        write_atomic(target, "{}")
    assert str(info.value) == f"{target}: {problem}"
    # Streamed outputs (batch tables, registry) take their temporary file the same way.
    with pytest.raises(OutputError, match=re.escape(problem)):
        temporary_beside(target)
    after = os.lstat(target)
    assert (after.st_ino, after.st_mode) == (before.st_ino, before.st_mode)
    assert [p.name for p in tmp_path.iterdir()] == ["out.json"]  # no temporary left


def test_existing_regular_file_is_replaced(tmp_path: Path) -> None:
    (tmp_path / "old.json").write_text("old")
    write_atomic(tmp_path / "old.json", "new")
    assert (tmp_path / "old.json").read_text() == "new"
