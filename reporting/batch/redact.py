"""What a de-identified batch may say about a failed study: nothing from the input.

A problem message quotes the value it refuses (``id 1122334 was read as a number``, a date, a
name typed into a number field) and its location names files and folders, which often carry a
patient's name. So in de-identified mode every problem is rebuilt from an allow-list, never
scrubbed from the original text: the file is named by its keyed hash (``F-…``), the location keeps
only words of the study format (field names, stage and territory names, segment numbers) with
everything else shown as ``…``, and the message is a fixed text chosen by the kind of problem.
The operator finds the details with ``segreport validate`` on the input folder, which is not an
extract.
"""

from __future__ import annotations

import contextlib
import logging
import re
import typing
from collections.abc import Iterator
from functools import cache

from pydantic import BaseModel

from reporting.batch.results import Problem

HIDDEN = "…"
MAX_LOCATION_NUMBER = 99
"""Numbers kept in a location (segment numbers, list positions, segment models); larger ones go."""
_TOKEN = re.compile(r"[^\s.:,;()\[\]]+")

INVALID_INPUT = (
    "not valid here (values and file names are not shown when de-identifying: run segreport "
    "validate on the input folder to see them)"
)
CHANGED = "the file changed while the batch ran; run it again"
CANNOT_WRITE = "cannot write this study's outputs (check the output folder's space and permissions)"


def duplicate(owner_label: str) -> Problem:
    """A study whose id an earlier file (named by its keyed hash) already uses."""
    return Problem(
        "study.id",
        f"study id also used by {owner_label}, which comes first; each study needs its own id "
        "(nothing was written for this file)",
    )


def invalid(location: str) -> Problem:
    """An input problem, with the location reduced to words of the study format."""
    return Problem(safe_location(location), INVALID_INPUT)


def cannot_write() -> Problem:
    """An output that could not be written."""
    return Problem("", CANNOT_WRITE)


def internal(exc: BaseException) -> Problem:
    """A bug: the exception's kind only (its text may quote input)."""
    return Problem("", f"internal error: {type(exc).__name__}")


_LINE_PREFIX = re.compile(r"^line \d+: ")


def safe_location(location: str) -> str:
    """``location`` with every token that is not a word of the study format replaced by ``…``.

    A leading ``line N:`` is left out: the field path says where, and ``segreport validate`` run
    by the operator on the identified file gives the line.
    """
    location = _LINE_PREFIX.sub("", location)

    def keep(match: re.Match[str]) -> str:
        token = match.group(0)
        if token in vocabulary() or (token.isdigit() and int(token) <= MAX_LOCATION_NUMBER):
            return token
        return HIDDEN

    return _TOKEN.sub(keep, location)


@cache
def vocabulary() -> frozenset[str]:
    """Field names of the study, settings and map formats, stage and territory names."""
    from reporting.model import Stage, Study
    from reporting.segments import Territory
    from reporting.settings import Settings

    words = {s.value for s in Stage} | {t.value for t in Territory}
    words |= {"territories", "name", "title", "source", "line", "lines", "stage", "segment"}
    words |= _field_names(Study) | set(Settings.model_fields)
    return frozenset(words)


def _field_names(model: type[BaseModel]) -> set[str]:
    names: set[str] = set()
    todo: list[type[BaseModel]] = [model]
    seen: set[type[BaseModel]] = set()
    while todo:
        current = todo.pop()
        if current in seen:
            continue
        seen.add(current)
        for name, info in current.model_fields.items():
            names.add(name)
            if info.alias:
                names.add(info.alias)
            stack = [info.annotation]
            while stack:
                t = stack.pop()
                if isinstance(t, type) and issubclass(t, BaseModel):
                    todo.append(t)
                else:
                    stack.extend(typing.get_args(t))
    return names


QUIET_LEVEL = logging.CRITICAL + 1
"""Level that silences a logger entirely."""
_BATCH_LOGGER = "reporting.batch"


@contextlib.contextmanager
def input_logs_silenced() -> Iterator[None]:
    """Silence every ``reporting`` logger except the batch's own for the block.

    The analysis, loading and rendering modules log study ids and file names as they work; a
    de-identified batch must print none of them, at any level. The batch's own messages (keyed
    hashes and counts only) still pass.
    """
    root = logging.getLogger("reporting")
    batch = logging.getLogger(_BATCH_LOGGER)
    saved = root.level, batch.level
    batch.setLevel(batch.getEffectiveLevel())
    root.setLevel(QUIET_LEVEL)
    try:
        yield
    finally:
        root.setLevel(saved[0])
        batch.setLevel(saved[1])


def silence_input_logs() -> None:
    """Worker-process form of :func:`input_logs_silenced` (for the whole life of the worker)."""
    batch = logging.getLogger(_BATCH_LOGGER)
    batch.setLevel(batch.getEffectiveLevel())
    logging.getLogger("reporting").setLevel(QUIET_LEVEL)
