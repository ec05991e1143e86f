"""Bounded reading for the entry server: regular files only, size checked before reading.

Every file the server reads (study files, drafts) comes through :func:`read_limited`, and the
folder listing through :func:`read_head`, which reads only the first bytes of each file. Both open
without following a final symlink and without blocking (a FIFO cannot stall the server), check
with ``fstat`` that the file is a regular file, and never read past their limit, so a huge sparse
file or a link to a device is refused at once. Problems are :class:`InputError` located at
``where``, a name relative to the studies folder (an error body never shows an absolute path).
"""

from __future__ import annotations

import errno
import logging
import os
import stat
from pathlib import Path
from typing import Any

from reporting.errors import InputError

log = logging.getLogger(__name__)

_NULLS = frozenset({"", "~", "null", "Null", "NULL"})
_FLAGS = os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_CLOEXEC", 0)


def _open(path: Path, where: str, what: str) -> tuple[int, int]:
    """Descriptor and size of the regular file ``path``."""
    try:
        fd = os.open(path, _FLAGS)
    except FileNotFoundError:
        raise InputError(where, f"cannot read {what}: no such file") from None
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            raise InputError(where, f"cannot read {what}: it is a symbolic link") from None
        raise InputError(where, f"cannot read {what}: {exc.strerror or 'error'}") from None
    info = os.fstat(fd)
    if not stat.S_ISREG(info.st_mode):
        os.close(fd)
        kind = "a folder" if stat.S_ISDIR(info.st_mode) else "not a regular file"
        raise InputError(where, f"cannot read {what}: {kind}")
    return fd, info.st_size


def _read(fd: int, limit: int) -> bytes:
    chunks: list[bytes] = []
    left = limit
    while left > 0:
        chunk = os.read(fd, min(left, 1 << 16))
        if not chunk:
            break
        chunks.append(chunk)
        left -= len(chunk)
    return b"".join(chunks)


def read_limited(path: Path, where: str, *, max_bytes: int, what: str = "study file") -> bytes:
    """All bytes of ``path``, refused when it is not a regular file or holds more than ``max_bytes``."""
    fd, size = _open(path, where, what)
    try:
        if size > max_bytes:
            raise InputError(where, f"file is {size:,} bytes; a {what} is at most {max_bytes:,}")
        raw = _read(fd, max_bytes + 1)  # the file may have grown since fstat
    except OSError as exc:
        raise InputError(where, f"cannot read {what}: {exc.strerror or 'error'}") from None
    finally:
        os.close(fd)
    if len(raw) > max_bytes:
        raise InputError(
            where, f"file is over {max_bytes:,} bytes; a {what} is at most {max_bytes:,}"
        )
    return raw


def read_head(path: Path, where: str, *, limit: int, what: str = "study file") -> tuple[bytes, int]:
    """The first ``limit`` bytes of the regular file ``path`` and its size in bytes."""
    fd, size = _open(path, where, what)
    try:
        return _read(fd, limit), size
    except OSError as exc:
        raise InputError(where, f"cannot read {what}: {exc.strerror or 'error'}") from None
    finally:
        os.close(fd)


def decode_text(raw: bytes, where: str) -> str:
    """UTF-8 text of a whole document, with the same refusals as the command line's reader."""
    if not raw.strip():
        raise InputError(where, "file is empty")
    if b"\x00" in raw:
        raise InputError(where, "binary file, not YAML or JSON text")
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(where, f"not UTF-8 text (byte {exc.start})") from None


def peek_scalars(text: str, wanted: set[tuple[str, ...]]) -> dict[tuple[str, ...], str]:
    """Plain values at the ``wanted`` key paths of YAML or JSON text, read from parser events alone.

    Meant for the first bytes of a file: it stops once every wanted value is found, and a document
    cut short (or not YAML at all) just yields fewer values. Values are the text as written (a bare
    ``2026-10-14`` stays that text); a path holding a list or mapping gives nothing.
    """
    import yaml

    found: dict[tuple[str, ...], str] = {}
    # one entry per open container: [is_mapping, waiting_for_a_key, current_key]
    levels: list[list[Any]] = []
    try:
        for event in yaml.parse(text, Loader=getattr(yaml, "CSafeLoader", yaml.SafeLoader)):
            if isinstance(event, yaml.MappingStartEvent | yaml.SequenceStartEvent):
                if len(levels) >= 16 or (levels and levels[-1][0] and levels[-1][1]):
                    break  # deeper than any wanted path, or a container used as a key
                levels.append([isinstance(event, yaml.MappingStartEvent), True, None])
                continue
            if isinstance(event, yaml.MappingEndEvent | yaml.SequenceEndEvent):
                levels.pop()
            elif isinstance(event, yaml.ScalarEvent) and levels:
                level = levels[-1]
                if level[0] and level[1]:
                    level[1], level[2] = False, event.value
                    continue
                if all(lv[0] for lv in levels):
                    key = tuple(str(lv[2]) for lv in levels)
                    plain_null = not event.style and event.value in _NULLS
                    if key in wanted and not plain_null:
                        found[key] = event.value
                        if len(found) == len(wanted):
                            break
            elif isinstance(event, yaml.AliasEvent):
                break
            if levels and levels[-1][0]:
                levels[-1][1] = True
    except yaml.YAMLError:
        pass
    return found
