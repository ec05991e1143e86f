"""Atomic writing: usual permissions, located errors, nothing half written."""

from __future__ import annotations

import os
import stat
from pathlib import Path

import pytest

from reporting.errors import OutputError, ReportingError
from reporting.files import all_or_nothing, write_atomic


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
