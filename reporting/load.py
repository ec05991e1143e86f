"""Reading study files (YAML or JSON) into a validated :class:`~reporting.model.Study`.

This is the load boundary: everything that can go wrong with a file — unreadable bytes and unsafe
YAML (see :mod:`reporting.documents`), wrong types, scores that do not fit the segment model —
comes out as :class:`~reporting.errors.InputErrors`, one located problem per
line, all of them at once.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

from pydantic import ValidationError
from pydantic_core import ErrorDetails

from reporting.documents import check_suffix, key_lines, parse_document, read_text
from reporting.documents import read_document as read_document  # re-exported for callers
from reporting.errors import InputError, InputErrors
from reporting.model import Study

STUDY_SUFFIXES = (".yaml", ".yml", ".json")


def load_study(path: Path | str) -> Study:
    """Read, parse and validate the study file at ``path``.

    Each validation problem is located by its field and by its line in the file
    (``study.yaml: line 12: stages.peak.wall_motion``), in line order.
    """
    path = Path(path)
    text = read_text(check_suffix(path, STUDY_SUFFIXES), what="study file")
    data = parse_document(text, path)
    return study_from_data(data, source=str(path), lines=_LazyLines(text))


def study_from_data(
    data: Any, *, source: str = "study", lines: Mapping[tuple[str, ...], int] | None = None
) -> Study:
    """Validate already-parsed data; problems are located inside ``source``.

    ``lines`` (the line of each key path, from :func:`~reporting.documents.key_lines`) adds the
    line of each problem to its location and puts the problems in line order.
    """
    if not isinstance(data, dict):
        raise InputError(
            source,
            "the study file must hold a mapping (schema_version, study, protocol, stages, …)",
        )
    try:
        return Study.model_validate(data)
    except ValidationError as exc:
        located = [_located(dict(e), source, lines) for e in exc.errors()]
        located.sort(key=lambda item: item[0] or 0)  # stable: same line keeps pydantic's order
        raise InputErrors([problem for _, problem in located]) from None


class _LazyLines(Mapping[tuple[str, ...], int]):
    """:func:`key_lines` of a text, worked out on first use (only files with problems pay)."""

    def __init__(self, text: str) -> None:
        self._text = text
        self._lines: dict[tuple[str, ...], int] | None = None

    def _get(self) -> dict[tuple[str, ...], int]:
        if self._lines is None:
            self._lines = key_lines(self._text)
        return self._lines

    def __getitem__(self, key: tuple[str, ...]) -> int:
        return self._get()[key]

    def __iter__(self) -> Iterator[tuple[str, ...]]:
        return iter(self._get())

    def __len__(self) -> int:
        return len(self._get())


def _line(loc: list[Any], lines: Mapping[tuple[str, ...], int] | None) -> int | None:
    """The line of the deepest part of ``loc`` found in the file."""
    if not lines:
        return None
    path = tuple(str(p) for p in loc if p != "[key]")
    for end in range(len(path), 0, -1):
        line = lines.get(path[:end])
        if line is not None:
            return line
    return None


# --- pydantic errors -> located, readable problems ------------------------------------------------

_SCORE_KINDS = {"wall_motion": "wall-motion", "perfusion": "perfusion"}


def _located(
    error: dict[str, Any], source: str, lines: Mapping[tuple[str, ...], int] | None = None
) -> tuple[int | None, InputError]:
    """The problem of one pydantic error, readable and located, with its line when known."""
    loc = list(error["loc"])
    line = _line(loc, lines)
    kind = error["type"]
    problem = str(error["msg"])
    segment: int | None = None
    if len(loc) >= 4 and loc[0] == "stages" and loc[2] in _SCORE_KINDS and isinstance(loc[3], int):
        segment = int(loc[3])
        loc = loc[:3]
    if kind == "extra_forbidden":
        problem = f"unknown field {loc[-1]!r}"
        loc = loc[:-1]
    elif kind == "missing":
        problem = f"required field {loc[-1]!r} is missing"
        loc = loc[:-1]
    elif "[key]" in loc:
        problem = _key_problem(loc, problem)
        loc = loc[: loc.index("[key]")]
    elif (
        kind in ("less_than_equal", "greater_than_equal", "less_than", "greater_than")
        and segment is not None
    ):
        name = _SCORE_KINDS[str(loc[2])]
        problem = (
            f"{name} score {_shown(error['input'])} is out of range ({_score_range(str(loc[2]))})"
        )
    elif kind.startswith("int_") and segment is not None:
        problem = f"score {_shown(error['input'])} is not a whole number ({_score_range(str(loc[2]))}, or x)"
    elif kind in ("less_than_equal", "less_than"):
        limit = error.get("ctx", {}).get("le", error.get("ctx", {}).get("lt"))
        problem = f"{_shown(error['input'])} is above the allowed maximum {limit}"
    elif kind in ("greater_than_equal", "greater_than"):
        limit = error.get("ctx", {}).get("ge", error.get("ctx", {}).get("gt"))
        problem = f"{_shown(error['input'])} is below the allowed minimum {limit}"
    elif kind == "finite_number":
        problem = f"{_shown(error['input'])} is not a finite number"
    elif kind in ("model_type", "dict_type", "model_attributes_type"):
        problem = f"expected a mapping of fields, got {_kind_of(error['input'])}"
    elif kind == "too_short" and loc == ["stages"]:
        problem = "at least one stage is needed"
    elif kind == "string_too_long":
        problem = f"text is longer than {error.get('ctx', {}).get('max_length')} characters"
    elif kind in ("int_parsing", "float_parsing", "int_type", "float_type"):
        problem = f"{_shown(error['input'])} is not a number"
    elif kind == "int_parsing_size":
        problem = f"{_shown(error['input'])} has too many digits to be a number here"
    elif kind == "int_from_float":
        problem = f"{_shown(error['input'])} is not a whole number"
    elif kind in ("date_from_datetime_parsing", "date_parsing", "date_type"):
        problem = f"{_shown(error['input'])} is not a date (use YYYY-MM-DD)"
    elif kind == "value_error":  # a validator's ValueError: its own words, without pydantic's tag
        problem = problem.removeprefix("Value error, ")
    elif kind == "enum" or kind == "literal_error":
        problem = f"{_shown(error['input'])} is not allowed; {problem[0].lower()}{problem[1:]}"
    if segment is not None and not problem.startswith("segment"):
        problem = f"segment {segment}: {problem}"
    path = ".".join(str(p) for p in loc if p != "[key]")
    where = source if line is None else f"{source}: line {line}"
    return line, InputError(f"{where}: {path}" if path else where, problem)


def located_problem(error: ErrorDetails, source: str) -> InputError:
    """One pydantic error of any model read from ``source`` (a settings file, say), worded and
    located as a study's errors are."""
    return _located(dict(error), source)[1]


def _key_problem(loc: list[Any], message: str) -> str:
    i = loc.index("[key]")
    if i == 2 and loc[0] == "stages":
        return "unknown stage (use rest, low_dose, peak, recovery)"
    if i == 4 and loc[0] == "stages" and loc[2] in _SCORE_KINDS:
        return "not a segment number"
    return f"bad key: {message}"


def _shown(value: Any, limit: int = 60) -> str:
    """A user's value as quoted in a message, cut short so a huge value cannot flood the output."""
    text = repr(value)
    return text if len(text) <= limit else f"{text[: limit - 1]}…"


def _kind_of(value: Any) -> str:
    if value is None:
        return "nothing (an empty entry)"
    if isinstance(value, str):
        return f"the text {value[:40]!r}"
    return f"a {type(value).__name__}"


def _score_range(kind: str) -> str:
    return "1–4, or 1–5 with wall_motion_scale: 5" if kind == "wall_motion" else "1–3"
