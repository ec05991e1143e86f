"""Writing output files atomically, so an interrupted run never leaves a half-written file."""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path


def write_atomic(path: Path, data: bytes | str) -> None:
    """Write ``data`` to ``path`` through a temporary file in the same folder, then rename."""
    payload = data.encode("utf-8") if isinstance(data, str) else data
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, temp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(payload)
        os.replace(temp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(temp)
        raise


@contextlib.contextmanager
def all_or_nothing(paths: list[Path]) -> Iterator[None]:
    """Remove every file in ``paths`` written inside the block if the block fails."""
    existed = {p for p in paths if p.exists()}
    try:
        yield
    except BaseException:
        for p in paths:
            if p not in existed:
                with contextlib.suppress(FileNotFoundError):
                    p.unlink()
        raise
