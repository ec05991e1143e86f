"""Bounded reading of users' files: hostile files are refused at once, reads never exceed a limit."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

from reporting.cli import main
from reporting.errors import InputError

# Each reader of a user's file, as (id, import run first, call timed on the file PATH).
READERS = [
    ("study", "from reporting.load import load_study as f", "f(PATH)"),
    ("settings", "from reporting.settings import load_settings as f", "f(PATH)"),
    ("territory-map", "from reporting.segments import load_territory_map as f", "f(PATH)"),
    ("curves", "from reporting.kinetics import load_curves as f", "f(PATH, segment_model=17)"),
    ("angiography", "from reporting.qa.angio import read_angiography as f", "f(PATH)"),
    ("record", "from reporting.qa.records import read_records as f", "f(PATH)"),
]
_PROBE = """
import resource, sys, time
from pathlib import Path
{imports}
PATH = Path(sys.argv[1])
start = time.perf_counter()
try:
    {call}
except Exception as exc:  # the InputError(s) expected; anything else fails the test below
    problem = f"{{type(exc).__name__}}: {{exc}}"
else:
    problem = "read without error"
print(time.perf_counter() - start)
# Peak resident memory of this process in MB. VmHWM belongs to this program alone; ru_maxrss
# (the fallback) also counts the parent's memory when it was started from a large process.
try:
    status = Path("/proc/self/status").read_text()
    print(int(next(l for l in status.splitlines() if l.startswith("VmHWM:")).split()[1]) // 1024)
except (OSError, StopIteration):
    print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss // 1024)
print(problem)
"""


def _hostile(kind: str, folder: Path, suffix: str) -> Path:
    path = folder / f"hostile{suffix}"
    if kind == "sparse-4GB":  # 4 GB of nothing: reading it whole would take 4 GB of memory
        with path.open("wb") as handle:
            handle.truncate(4 * 1024**3)
    elif kind == "link-to-dev-zero":  # endless zeros behind an innocent name
        path.symlink_to("/dev/zero")
    elif kind == "fifo":  # opening a named pipe blocks until someone writes
        os.mkfifo(path)
    return path


@pytest.mark.parametrize("kind", ["sparse-4GB", "link-to-dev-zero", "fifo"])
@pytest.mark.parametrize("reader,imports,call", READERS, ids=[r[0] for r in READERS])
def test_hostile_files_are_refused_quickly_in_little_memory(
    tmp_path: Path, kind: str, reader: str, imports: str, call: str
) -> None:
    suffix = {"curves": ".csv", "angiography": ".csv", "record": ".json"}.get(reader, ".yaml")
    path = _hostile(kind, tmp_path, suffix)
    probe = _PROBE.format(imports=imports, call=call)
    try:
        done = subprocess.run(
            [sys.executable, "-c", probe, str(path)],
            capture_output=True,
            text=True,
            timeout=60,
            check=True,
            cwd=Path(__file__).parents[1],
        )
    except subprocess.TimeoutExpired:
        pytest.fail(f"{reader} kept reading {kind} for a minute")
    seconds, peak_mb, problem = done.stdout.strip().splitlines()
    assert "Error" in problem and str(path) in problem, problem
    # The figures from the issue: refused in under a second (the read, not the imports) with
    # under 100 MB peak memory (the interpreter and the imported modules included).
    assert float(seconds) < 1.0
    assert int(peak_mb) < 100


@pytest.mark.parametrize(
    "kind,problem",
    [
        (
            "link-to-dev-zero",
            "is a device, not a regular file; a study file must be a regular file",
        ),
        ("fifo", "is a named pipe (FIFO), not a regular file; a study file must be a regular file"),
        ("sparse-4GB", "file is 4,294,967,296 bytes; a study file is at most 1,000,000"),
    ],
)
def test_hostile_study_file_message(tmp_path: Path, kind: str, problem: str) -> None:
    path = _hostile(kind, tmp_path, ".yaml")
    result = CliRunner().invoke(main, ["validate", str(path)])
    assert result.exit_code == 1
    assert f"Error: {path}: {problem}\n" in result.stderr


def test_size_is_checked_before_reading(tmp_path: Path) -> None:
    from reporting.documents import read_bytes_limited

    path = tmp_path / "s.yaml"
    path.write_bytes(b"a" * 100)
    assert read_bytes_limited(path, what="study file", max_bytes=100) == b"a" * 100
    with pytest.raises(InputError, match="file is 100 bytes; a study file is at most 99"):
        read_bytes_limited(path, what="study file", max_bytes=99)


@pytest.mark.skipif(not Path("/proc/self/status").exists(), reason="needs Linux /proc")
def test_file_longer_than_its_stat_size_is_still_bounded() -> None:
    # /proc files are regular files whose stat size is 0 but which hold text: like a file growing
    # after the size check. The read goes on past the stat size, but never past the limit.
    from reporting.documents import read_bytes_limited

    whole = read_bytes_limited(Path("/proc/self/status"), max_bytes=1_000_000)
    assert whole.startswith(b"Name:") and len(whole) > 100
    with pytest.raises(InputError, match="file is over 100 bytes; a file is at most 100"):
        read_bytes_limited(Path("/proc/self/status"), max_bytes=100)


def test_head_reads_only_the_head(tmp_path: Path) -> None:
    from reporting.documents import read_head

    big = _hostile("sparse-4GB", tmp_path, ".yaml")
    assert read_head(big, 10) == (b"\x00" * 10, 4 * 1024**3)
    with pytest.raises(InputError, match="is a device"):
        read_head(_hostile("link-to-dev-zero", tmp_path, ".yml"), 10)


def test_without_following_links_a_link_is_refused_and_located_as_told(tmp_path: Path) -> None:
    # the entry server reads only files really in its folder: a link to a file elsewhere (here a
    # readable study) is refused, and the message names the file as the server shows it
    from reporting.documents import read_bytes_limited, read_head

    target = tmp_path / "elsewhere.yaml"
    target.write_text("study: {}\n")
    link = tmp_path / "T-1.yaml"
    link.symlink_to(target)
    assert read_bytes_limited(link, max_bytes=100) == b"study: {}\n"  # followed by default
    for read in (
        lambda: read_bytes_limited(link, max_bytes=100, where="T-1.yaml", follow_links=False),
        lambda: read_head(link, 10, where="T-1.yaml", follow_links=False),
    ):
        with pytest.raises(InputError) as caught:
            read()
        assert str(caught.value) == "T-1.yaml: cannot read file: it is a symbolic link"
