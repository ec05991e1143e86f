"""Reading study files (YAML or JSON) into a validated :class:`~reporting.model.Study`.

This is the load boundary: everything that can go wrong with a file — unreadable bytes, YAML
anchors (refused, so an alias bomb cannot expand), duplicate keys, wrong types, scores that do not
fit the segment model — comes out as :class:`~reporting.errors.InputErrors`, one located problem per
line, all of them at once.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import yaml
from pydantic import ValidationError

from reporting.errors import InputError, InputErrors
from reporting.model import Study

MAX_STUDY_BYTES = 1_000_000
STUDY_SUFFIXES = (".yaml", ".yml", ".json")


def load_study(path: Path | str) -> Study:
    """Read, parse and validate the study file at ``path``."""
    path = Path(path)
    data = read_document(path)
    return study_from_data(data, source=str(path))


def study_from_data(data: Any, *, source: str = "study") -> Study:
    """Validate already-parsed data; problems are located inside ``source``."""
    if not isinstance(data, dict):
        raise InputError(
            source,
            "the study file must hold a mapping (schema_version, study, protocol, stages, …)",
        )
    try:
        return Study.model_validate(data)
    except ValidationError as exc:
        raise InputErrors([_located(dict(e), source) for e in exc.errors()]) from None


def read_document(path: Path) -> Any:
    """Parse a YAML or JSON file safely, refusing aliases and duplicate keys."""
    where = str(path)
    if path.suffix.lower() not in STUDY_SUFFIXES:
        raise InputError(
            where, f"unknown file type {path.suffix or '(none)'!r}; use .yaml, .yml or .json"
        )
    try:
        raw = path.read_bytes()
    except IsADirectoryError:
        raise InputError(where, "is a folder, not a study file") from None
    except OSError as exc:
        raise InputError(where, f"cannot read: {exc.strerror or exc}") from None
    if len(raw) > MAX_STUDY_BYTES:
        raise InputError(
            where, f"file is {len(raw):,} bytes; a study file is at most {MAX_STUDY_BYTES:,}"
        )
    if not raw.strip():
        raise InputError(where, "file is empty")
    if b"\x00" in raw:
        raise InputError(where, "binary file, not YAML or JSON text")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(where, f"not UTF-8 text (byte {exc.start})") from None
    if path.suffix.lower() == ".json":
        return _parse_json(text, where)
    return _parse_yaml(text, where)


def _parse_json(text: str, where: str) -> Any:
    def no_duplicates(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
        out: dict[str, Any] = {}
        for key, value in pairs:
            if key in out:
                raise InputError(where, f"key {key!r} appears twice in one object")
            out[key] = value
        return out

    try:
        return json.loads(text, object_pairs_hook=no_duplicates)
    except json.JSONDecodeError as exc:
        raise InputError(
            f"{where}: line {exc.lineno}, column {exc.colno}", f"invalid JSON: {exc.msg}"
        ) from None


# libyaml's C loader when PyYAML was built with it (about 3x faster), else the pure-Python one.
_SafeLoader: type[yaml.SafeLoader] = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


class _StrictLoader(_SafeLoader):  # type: ignore[valid-type, misc]
    """Safe YAML with duplicate keys refused (aliases are refused before loading)."""


def _mapping(loader: yaml.SafeLoader, node: yaml.MappingNode) -> dict[Any, Any]:
    loader.flatten_mapping(node)
    out: dict[Any, Any] = {}
    for key_node, value_node in node.value:
        key = loader.construct_object(key_node, deep=True)
        try:
            hash(key)
        except TypeError:
            raise yaml.constructor.ConstructorError(
                None, None, "a mapping key must be a plain value", key_node.start_mark
            ) from None
        if key in out:
            raise yaml.constructor.ConstructorError(
                None, None, f"key {key!r} appears twice in one mapping", key_node.start_mark
            )
        out[key] = loader.construct_object(value_node, deep=True)
    return out


_StrictLoader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _mapping)


def _refuse_aliases(text: str) -> None:
    # An alias can expand a small file into gigabytes ("billion laughs"); study files never need one.
    for token in yaml.scan(text, Loader=_SafeLoader):
        if isinstance(token, yaml.AliasToken):
            raise yaml.composer.ComposerError(
                None, None, "anchors and aliases are not allowed in study files", token.start_mark
            )


def _parse_yaml(text: str, where: str) -> Any:
    try:
        _refuse_aliases(text)
        return yaml.load(text, Loader=_StrictLoader)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        at = f"{where}: line {mark.line + 1}, column {mark.column + 1}" if mark else where
        raise InputError(at, f"invalid YAML: {exc.problem or exc.context}") from None
    except yaml.YAMLError as exc:
        raise InputError(where, f"invalid YAML: {exc}") from None


# --- pydantic errors -> located, readable problems ------------------------------------------------

_SCORE_KINDS = {"wall_motion": "wall-motion", "perfusion": "perfusion"}


def _located(error: dict[str, Any], source: str) -> InputError:
    loc = list(error["loc"])
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
        problem = f"{name} score {error['input']!r} is out of range ({_score_range(str(loc[2]))})"
    elif kind.startswith("int_") and segment is not None:
        problem = (
            f"score {error['input']!r} is not a whole number ({_score_range(str(loc[2]))}, or x)"
        )
    elif kind in ("less_than_equal", "less_than"):
        limit = error.get("ctx", {}).get("le", error.get("ctx", {}).get("lt"))
        problem = f"{error['input']!r} is above the allowed maximum {limit}"
    elif kind in ("greater_than_equal", "greater_than"):
        limit = error.get("ctx", {}).get("ge", error.get("ctx", {}).get("gt"))
        problem = f"{error['input']!r} is below the allowed minimum {limit}"
    elif kind == "too_short" and loc == ["stages"]:
        problem = "at least one stage is needed"
    elif kind == "string_too_long":
        problem = f"text is longer than {error.get('ctx', {}).get('max_length')} characters"
    elif kind in ("int_parsing", "float_parsing", "int_type", "float_type"):
        problem = f"{error['input']!r} is not a number"
    elif kind == "int_from_float":
        problem = f"{error['input']!r} is not a whole number"
    elif kind in ("date_from_datetime_parsing", "date_parsing", "date_type"):
        problem = f"{error['input']!r} is not a date (use YYYY-MM-DD)"
    elif kind == "enum" or kind == "literal_error":
        problem = f"{error['input']!r} is not allowed; {problem[0].lower()}{problem[1:]}"
    if segment is not None and not problem.startswith("segment"):
        problem = f"segment {segment}: {problem}"
    path = ".".join(str(p) for p in loc if p != "[key]")
    return InputError(f"{source}: {path}" if path else source, problem)


def _key_problem(loc: list[Any], message: str) -> str:
    i = loc.index("[key]")
    if i == 2 and loc[0] == "stages":
        return "unknown stage (use rest, low_dose, peak, recovery)"
    if i == 4 and loc[0] == "stages" and loc[2] in _SCORE_KINDS:
        return "not a segment number"
    return f"bad key: {message}"


def _score_range(kind: str) -> str:
    return "1–4, or 1–5 with wall_motion_scale: 5" if kind == "wall_motion" else "1–3"
