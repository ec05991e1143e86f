"""Writing output files atomically, so an interrupted run never leaves a half-written file.

A file that cannot be written (no such folder, no permission, a folder in the way) raises
:class:`~reporting.errors.OutputError` naming the path, never a bare ``OSError``. An existing target
that is not a regular file (a folder, a named pipe, a device such as ``/dev/null``, or a link to one)
is never replaced: renaming over it would silently swap a device node or a pipe for a plain file.
"""

from __future__ import annotations

import contextlib
import os
import stat
import tempfile
from collections.abc import Iterator
from pathlib import Path

from reporting.errors import OutputError


def check_target(target: Path) -> None:
    """Refuse a ``target`` that exists and is not a regular file (:class:`OutputError`).

    Links are followed, so a link to a device is refused too; a missing target is fine.
    """
    try:
        mode = os.stat(target).st_mode
    except FileNotFoundError:
        return
    except OSError as exc:
        raise OutputError(str(target), f"cannot write: {exc.strerror or exc}") from None
    if stat.S_ISREG(mode):
        return
    if stat.S_ISDIR(mode):
        kind = "a folder"
    elif stat.S_ISFIFO(mode):
        kind = "a named pipe (FIFO)"
    elif stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        kind = "a device"
    else:
        kind = "not a regular file"
    raise OutputError(str(target), f"cannot write: it is {kind}; only a regular file is replaced")


def temporary_beside(target: Path) -> tuple[int, Path]:
    """A new hidden ``.part`` file in ``target``'s folder (descriptor, path), with the usual permissions.

    Renaming it over ``target`` once complete makes the write atomic. A ``target`` that exists and
    is not a regular file is refused first (:func:`check_target`).
    """
    check_target(target)
    fd, temp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    try:
        # mkstemp makes the file readable by its owner only; give it what a new file would get.
        os.fchmod(fd, FILE_MODE)
    except OSError:
        os.close(fd)
        os.unlink(temp)
        raise
    return fd, Path(temp)


def write_atomic(path: Path, data: bytes | str) -> None:
    """Write ``data`` to ``path`` through a temporary file in the same folder, then rename."""
    payload = data.encode("utf-8") if isinstance(data, str) else data
    try:
        try:
            fd, temp = temporary_beside(path)  # refuses a target that is not a regular file
        except FileNotFoundError:  # the folder is not there yet: one mkdir, only then
            path.parent.mkdir(parents=True, exist_ok=True)
            fd, temp = temporary_beside(path)
    except OutputError:
        raise
    except OSError as exc:
        raise OutputError(str(path), f"cannot write: {exc.strerror or exc}") from None
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(payload)
        os.replace(temp, path)
    except BaseException as exc:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(temp)
        if isinstance(exc, OSError):
            raise OutputError(str(path), f"cannot write: {exc.strerror or exc}") from None
        raise


def _read_umask() -> int:
    # Read once, at import (single-threaded): os.umask can only be read by setting it, which is
    # not safe while other threads (the local web server's) create files.
    current = os.umask(0)
    os.umask(current)
    return current


FILE_MODE = 0o666 & ~_read_umask()
"""Permissions of the files segreport writes: what the process umask gives a new file."""


@contextlib.contextmanager
def all_or_nothing(paths: list[Path]) -> Iterator[None]:
    """Remove every file in ``paths`` written inside the block if the block fails."""
    existed = {p for p in paths if p.exists()}
    try:
        yield
    except BaseException:
        for p in paths:
            if p not in existed:
                # never mask the failure: a path whose folder is missing or is not a folder
                # (NotADirectoryError) was never written
                with contextlib.suppress(FileNotFoundError, NotADirectoryError):
                    p.unlink()
        raise
