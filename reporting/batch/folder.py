"""The output folder of a batch or a store export: one writer at a time (a lock), and one mode for
ever (its stamp).

**Lock.** ``.segreport-batch/lock`` holds the pid of the batch writing the folder. It is taken with
an exclusive ``flock`` held for the whole run, so the kernel releases it when the batch dies however
it dies; a second batch into the same folder is refused at once with the owner's pid, and a lock
file left by a dead batch (``kill -9``) is detected and taken over. Where ``flock`` is missing the
pid alone decides: a lock whose process no longer exists is stale.

**Mode.** ``.segreport-batch/folder.json`` records whether the folder holds identified outputs or a
de-identified extract. A batch in the other mode is refused before anything is written, whatever
``--force`` says: a de-identified extract must never hold an identified file, and identified
reports mixed into an extract folder would leave with it. A folder made before the stamp existed
is judged by what it holds (reports and maps are identified; records say whether they are).
"""

from __future__ import annotations

import contextlib
import datetime as dt
import json
import logging
import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from reporting.batch.watchdog import alive
from reporting.errors import OutputError
from reporting.files import write_atomic

log = logging.getLogger(__name__)

BOOKKEEPING = ".segreport-batch"
"""Folder (inside the output folder) of the batch's own bookkeeping: stamps, lock, mode."""
LOCK = "lock"
MODE = "folder.json"
MODE_FORMAT = 1
IDENTIFIED = "identified"
DEIDENTIFIED = "deidentified"
_UNREADABLE = "unreadable"

# Files a batch writes; any of them without a mode stamp means an earlier batch (of either mode).
_AGGREGATES = (
    "registry.ndjson",
    "failures.csv",
    "studies.csv",
    "segments.csv",
    "studies.parquet",
    "segments.parquet",
    "versions.csv",  # a store export's
)
_IDENTIFIED_ONLY = (".pdf", ".svg")
"""Reports and maps: a de-identifying batch never writes them."""


def mode_of(deidentify: bool) -> str:
    """The folder mode a batch with or without ``--deidentify`` writes."""
    return DEIDENTIFIED if deidentify else IDENTIFIED


def folder_mode(outdir: Path) -> str | None:
    """The mode of what ``outdir`` holds: its stamp, else judged from its files; ``None``: no outputs."""
    if not outdir.is_dir():
        return None  # nothing there yet (or not a folder: creating it says so)
    stamp = outdir / BOOKKEEPING / MODE
    try:
        data = json.loads(stamp.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return _judged_mode(outdir)
    except (OSError, ValueError):
        return _UNREADABLE
    mode = data.get("mode") if isinstance(data, dict) else None
    return mode if mode in (IDENTIFIED, DEIDENTIFIED) else _UNREADABLE


def _judged_mode(outdir: Path) -> str | None:
    # A folder written before the mode stamp existed: identified unless every sign says otherwise.
    try:
        names = [p.name for p in outdir.iterdir() if p.is_file()]
    except FileNotFoundError:
        return None
    except OSError:
        return _UNREADABLE
    records = [n for n in names if n.endswith(".record.json")]
    ours = records or [n for n in names if n in _AGGREGATES or n.endswith(_IDENTIFIED_ONLY)]
    stamps = outdir / BOOKKEEPING
    if not ours and not (stamps.is_dir() and any(stamps.glob("*.json"))):
        return None
    if any(n.endswith(_IDENTIFIED_ONLY) for n in names):
        return IDENTIFIED
    if records and all(_record_deidentified(outdir / n) for n in records):
        return DEIDENTIFIED
    return IDENTIFIED


def _record_deidentified(path: Path) -> bool:
    try:
        data: Any = json.loads(path.read_text(encoding="utf-8"))
        return data["study"]["deidentified"] is True
    except (OSError, ValueError, KeyError, TypeError):
        return False


def check_mode(outdir: Path, deidentify: bool) -> None:
    """Refuse (:class:`OutputError`, located at ``outdir``) a folder holding the other mode's outputs."""
    found = folder_mode(outdir)
    wanted = mode_of(deidentify)
    if found is None or found == wanted:
        return
    if found == _UNREADABLE:
        problem = (
            f"its mode stamp ({BOOKKEEPING}/{MODE}) cannot be read, so it may hold identified "
            "outputs; choose an empty output folder"
        )
    elif deidentify:
        problem = (
            "holds identified outputs (written without --deidentify); a de-identified "
            "extract needs a folder of its own: choose an empty output folder (--force does not "
            "change this)"
        )
    else:
        problem = (
            "holds a de-identified extract (written with --deidentify); identified "
            "outputs must not be mixed into it: choose another output folder (--force does not "
            "change this)"
        )
    raise OutputError(str(outdir), problem)


def write_mode(outdir: Path, deidentify: bool, key_fingerprint: str | None) -> None:
    """Record the folder's mode (and which key made an extract) in its stamp."""
    data = {"format": MODE_FORMAT, "mode": mode_of(deidentify), "key": key_fingerprint}
    try:
        write_atomic(outdir / BOOKKEEPING / MODE, json.dumps(data, indent=1) + "\n")
    except OutputError as exc:
        why = exc.problem.removeprefix("cannot write: ")
        raise OutputError(str(outdir), f"cannot write the output folder: {why}") from None


def make_folder(outdir: Path) -> None:
    """Create ``outdir`` (and its parents) or raise a located :class:`OutputError`."""
    if outdir.exists() and not outdir.is_dir():
        raise OutputError(str(outdir), "not a folder (the output folder)")
    try:
        outdir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(
            str(outdir), f"cannot create the output folder: {exc.strerror or exc}"
        ) from None


@contextlib.contextmanager
def claimed(
    outdir: Path,
    deidentify: bool,
    key_fingerprint: str | None,
    *,
    temporaries: tuple[Path, ...] = (),
) -> Iterator[None]:
    """``outdir`` made, locked and stamped with its mode for the block: a folder holding the other
    mode's outputs is refused before anything is written (and again under the lock, where another
    writer may have been first), and the temporaries of a writer killed outright are removed from
    it and from ``temporaries``. Batch and the store export write their folders through this."""
    check_mode(outdir, deidentify)
    make_folder(outdir)
    with locked(outdir):
        check_mode(outdir, deidentify)
        write_mode(outdir, deidentify, key_fingerprint)
        sweep_temporaries(outdir, *temporaries)
        yield


def sweep_temporaries(*folders: Path) -> None:
    """Remove the ``write_atomic`` temporaries (``.<name>.<random>.part``) that a writer killed
    mid-write left in ``folders``; call it holding the output folder's lock."""
    for where in folders:
        for temp in where.glob(".*.part"):
            with contextlib.suppress(OSError):
                temp.unlink()


class BatchLock:
    """The lock of one output folder, held from :meth:`acquire` to :meth:`release`."""

    def __init__(self, outdir: Path) -> None:
        self.path = outdir / BOOKKEEPING / LOCK
        self.outdir = outdir
        self._fd: int | None = None

    def acquire(self) -> None:
        """Take the lock or raise :class:`OutputError` naming the batch that holds it."""
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            while self._fd is None:
                fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
                try:
                    if self._take(fd):
                        self._fd = fd
                except BaseException:
                    os.close(fd)
                    raise
        except OutputError:
            raise
        except OSError as exc:
            raise OutputError(
                str(self.outdir), f"cannot lock the output folder: {exc.strerror or exc}"
            ) from None

    def _take(self, fd: int) -> bool:
        # True when fd now holds the lock; False to try again (the file was replaced meanwhile).
        previous = _owner(fd)
        try:
            import fcntl
        except ImportError:  # no flock: the pid alone decides
            pid = int(previous.get("pid", 0)) if previous is not None else 0
            if pid not in (0, os.getpid()) and alive(pid):
                raise self._busy(previous) from None
        else:
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                raise self._busy(_owner(fd) or previous) from None
            # The holder may have removed the file between our open and our flock.
            try:
                same = os.fstat(fd).st_ino == os.stat(self.path).st_ino
            except FileNotFoundError:
                same = False
            if not same:
                os.close(fd)
                return False
            previous = _owner(fd)
        if previous is not None and previous.get("pid") not in (None, os.getpid()):
            log.warning(
                "took over the lock of batch process %s, which is no longer running",
                previous.get("pid"),
            )
        owner = {
            "pid": os.getpid(),
            "started": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        }
        os.ftruncate(fd, 0)
        os.pwrite(fd, (json.dumps(owner) + "\n").encode(), 0)
        return True

    def _busy(self, owner: dict[str, Any] | None) -> OutputError:
        who = f"process {owner.get('pid')}" if owner else "another process"
        since = f", started {owner['started']}" if owner and owner.get("started") else ""
        return OutputError(
            str(self.outdir),
            f"another batch or export ({who}{since}) is writing this output folder; wait for it "
            "to finish "
            f"or choose another output folder (the lock is {BOOKKEEPING}/{LOCK})",
        )

    def release(self) -> None:
        """Remove the lock file and let go of the lock."""
        if self._fd is None:
            return
        with contextlib.suppress(OSError):
            self.path.unlink()
        with contextlib.suppress(OSError):
            os.close(self._fd)
        self._fd = None


def _owner(fd: int) -> dict[str, Any] | None:
    try:
        data = json.loads(os.pread(fd, 4096, 0) or b"null")
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


@contextlib.contextmanager
def locked(outdir: Path) -> Iterator[BatchLock]:
    """Hold the output folder's lock for the block."""
    lock = BatchLock(outdir)
    lock.acquire()
    try:
        yield lock
    finally:
        lock.release()
