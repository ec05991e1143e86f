"""De-identification of an analysis for research extracts (HIPAA Safe Harbor).

:func:`deidentify` removes from an :class:`~reporting.results.Analysis` the Safe Harbor identifiers a
study file can hold (45 CFR 164.514(b)(2)(i)): names (patient, reader, sonographer, referring
doctor), record numbers, every date element finer than the year (study date → year; birth date
dropped), ages over 89 (grouped as ``90+``, with the heart-rate figures that would reveal the exact
age) and, unless ``keep_text``, the free text (indication, comments, symptoms, agent description),
which may hold any of them. The lab name and address go too: an address is geographic detail, and a
lab together with a year narrows the population. The name of the time-intensity curve file, often
named after the study or the patient, is replaced wherever it appears.

**An allow-list, not a block-list.** ``data/deidentify_fields.csv`` classifies every field of the
record and every column of the tables as *kept*, *generalised* (by a named rule) or *dropped*, and
:func:`deidentify` and :func:`deidentified_row` apply it; a field the table does not list stops the
de-identifier (:class:`UnclassifiedFieldError`), and :func:`allow_list_problems` (run by the tests)
names every field still to classify. A new field therefore never reaches an extract unreviewed.
Lab territory maps keep none of their own text: see :func:`neutral_territory_map`.

Study and patient ids become keyed hashes (HMAC-SHA256 with a secret key, truncated), so repeat
extracts made with the same key link the same study and patient while the key holder alone can
re-link them to the source. Note that 45 CFR 164.514(c) lets a covered entity keep a
re-identification code only if it is not *derived from* identifiers; a keyed hash is derived, so
whether this satisfies (c) is a decision for the privacy officer: keep the key inside the covered
entity and never release it with an extract.
"""

from __future__ import annotations

import csv
import hashlib
import hmac
import logging
import os
import types
import typing
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from functools import cache
from importlib import resources
from pathlib import Path
from typing import Any

from pydantic import BaseModel

from reporting.errors import ReportingError
from reporting.results import DERIVED_FIELDS, Analysis, TerritoryMapInfo
from reporting.segments import BUILT_IN_MAPS, built_in_map
from reporting.vocabulary import Vocabulary

log = logging.getLogger(__name__)

KEY_ENV = "SEGREPORT_DEID_KEY"
"""Environment variable holding the de-identification key (used when no key file is given)."""
MIN_KEY_BYTES = 16
"""Shortest key accepted: a short key could be guessed and the hashes reversed by trying ids."""
MAX_KEY_FILE_BYTES = 4096
"""Largest key file read (a key is a few dozen bytes; common practice)."""
OLDEST_EXACT_AGE = 89
"""Ages above this are grouped as 90+ (45 CFR 164.514(b)(2)(i)(C))."""
AGE_GROUP_90_PLUS = "90+"
HASH_HEX_DIGITS = 24
"""96 bits of the HMAC: collisions are negligible for any registry, ids stay short in file names."""

CURVE_FILE_PLACEHOLDER = "curve file"
"""Stands for the time-intensity curve file's name, which may hold identifiers."""
STUDY_PREFIX = "S-"
PATIENT_PREFIX = "P-"

LAB_MAP_PREFIX = "lab-"
LAB_MAP_TITLE = "Lab-defined territory map"
"""Neutral label that stands for a lab map's own title in a de-identified record."""
MAP_HASH_HEX_DIGITS = 12

ALLOW_LIST = "deidentify_fields.csv"
"""The allow-list, in ``reporting/data``."""
ALLOW_LIST_PATH = f"reporting/data/{ALLOW_LIST}"
RECORD = "record"
RECOMPUTED = "recomputed"
"""The rule of a computed record field that may hold identifying detail (the computed impression
text may quote a lab map's title or reveal an age over 89): the de-identified copy leaves it out and
makes it again from its own de-identified values."""
UNLESS_KEEP_TEXT = "unless_keep_text"
"""Rule of a dropped free-text field that ``--keep-text`` keeps."""


class Treatment(Vocabulary):
    """What de-identification does with one field or column."""

    KEPT = "kept"
    """Copied unchanged: scores, measurements, codes, computed or fixed text."""
    GENERALISED = "generalised"
    """Replaced by a coarser or keyed value (a rule names how)."""
    DROPPED = "dropped"
    """Emptied (null, empty list or mapping): identifiers and free text."""


@dataclass(frozen=True)
class FieldRule:
    """One line of the allow-list."""

    scope: str
    field: str
    treatment: Treatment
    rule: str
    why: str


class UnclassifiedFieldError(RuntimeError):
    """A record field or table column the allow-list does not classify.

    A developer's omission, not the user's: a batch reports it as an internal error of the study.
    """


@cache
def allow_list() -> dict[tuple[str, str], FieldRule]:
    """The allow-list by ``(scope, field)``, read once from ``data/deidentify_fields.csv``."""
    text = resources.files("reporting.data").joinpath(ALLOW_LIST).read_text(encoding="utf-8")
    lines = [line for line in text.splitlines() if line and not line.startswith("#")]
    table: dict[tuple[str, str], FieldRule] = {}
    for row in csv.DictReader(lines):
        rule = FieldRule(
            row["scope"], row["field"], Treatment(row["treatment"]), row["rule"], row["why"]
        )
        table[(rule.scope, rule.field)] = rule
    return table


def _holds_model(annotation: Any) -> bool:
    # True for a nested model, or a list, mapping or optional of one.
    return _model_in(annotation) is not None


def _model_in(annotation: Any) -> type[BaseModel] | None:
    stack = [annotation]
    while stack:
        t = stack.pop()
        if isinstance(t, type) and issubclass(t, BaseModel):
            return t
        stack.extend(typing.get_args(t))
    return None


def _allows_none(annotation: Any) -> bool:
    origin = typing.get_origin(annotation)
    return annotation is None or (
        origin in (typing.Union, types.UnionType) and type(None) in typing.get_args(annotation)
    )


def record_fields(model: type[BaseModel] = Analysis, prefix: str = "") -> dict[str, Any]:
    """Every field path the allow-list must classify, with its type.

    Nested models are walked (a list or mapping of them is transparent: ``segments.name``); a nested
    model the table lists (dropped whole) is one path, its fields none.
    """
    table = allow_list()
    found: dict[str, Any] = {}
    for name, info in model.model_fields.items():
        path = prefix + name
        nested = _model_in(info.annotation)
        if (RECORD, path) not in table and nested is not None:
            found.update(record_fields(nested, path + "."))
        else:
            found[path] = info.annotation
    for name, computed in model.model_computed_fields.items():
        found[prefix + name] = computed.return_type
    return found


def _missing_line(scope: str, field: str, annotation: Any) -> str:
    kind = getattr(annotation, "__name__", None) or str(annotation).replace("typing.", "")
    return (
        f"{ALLOW_LIST_PATH} has no line for {scope} field {field!r} ({kind}): add one line "
        f"'{scope},{field},<kept|generalised|dropped>,<rule>,<why>' "
        "(identifiers and free text: dropped; see the file's header)"
    )


def allow_list_problems(
    table_columns: Mapping[str, Sequence[str]], model: type[BaseModel] = Analysis
) -> list[str]:
    """Every field or column without a valid classification, and every line naming nothing.

    ``table_columns`` maps each table scope (``studies``, ``segments``) to its columns; ``model``
    is the record model. An empty list means the allow-list is complete.
    """
    table = allow_list()
    fields = record_fields(model)
    wanted = {(RECORD, f) for f in fields} | {
        (scope, c) for scope, columns in table_columns.items() for c in columns
    }
    problems = [
        _missing_line(scope, field, fields.get(field, "table column"))
        for scope, field in sorted(wanted - set(table))
    ]
    problems += [
        f"{ALLOW_LIST_PATH}: line '{scope},{field}' names no {scope} field: remove or rename it"
        for scope, field in sorted(set(table) - wanted)
    ]
    for (scope, field), rule in sorted(table.items()):
        if (scope, field) in wanted:
            problems += _rule_problems(rule, fields.get(field), table)
    return problems


def _rule_problems(
    rule: FieldRule, annotation: Any, table: Mapping[tuple[str, str], FieldRule]
) -> list[str]:
    where = f"{ALLOW_LIST_PATH}: line '{rule.scope},{rule.field}'"
    problems = []
    record = rule.scope == RECORD
    if rule.treatment is Treatment.GENERALISED:
        if record and rule.rule not in GENERALISERS and rule.rule != RECOMPUTED:
            problems.append(f"{where}: unknown rule {rule.rule!r} (see GENERALISERS)")
        if not record:
            source = table.get((RECORD, rule.rule.removeprefix(f"{RECORD}:")))
            if source is None or source.treatment is not Treatment.GENERALISED:
                problems.append(f"{where}: rule must be record:<a generalised record field>")
    derived = record and rule.field in DERIVED_FIELDS
    recomputed = rule.treatment is Treatment.GENERALISED and rule.rule == RECOMPUTED
    if (derived and not (recomputed or rule.treatment is Treatment.KEPT)) or (
        recomputed and not derived
    ):
        problems.append(
            f"{where}: a field made from the rest of the record is kept or generalised "
            f"'{RECOMPUTED}', and only such a field is '{RECOMPUTED}'"
        )
    if record and rule.treatment is Treatment.DROPPED:
        empty_ok = _allows_none(annotation) or typing.get_origin(annotation) in (list, dict)
        if not empty_ok:
            problems.append(f"{where}: cannot be dropped (null not allowed): generalise it")
    if record and rule.treatment is Treatment.KEPT and _holds_model(annotation):
        problems.append(f"{where}: a nested model is classified field by field, or dropped whole")
    if rule.rule == UNLESS_KEEP_TEXT and rule.treatment is not Treatment.DROPPED:
        problems.append(f"{where}: {UNLESS_KEEP_TEXT} applies to dropped fields only")
    return problems


def deidentified_row(scope: str, columns: Sequence[str], row: Sequence[Any]) -> tuple[Any, ...]:
    """A table row of a de-identified record with the allow-list applied: dropped columns null.

    Kept and generalised columns come from the de-identified record unchanged; a column the table
    does not list raises :class:`UnclassifiedFieldError`.
    """
    table = allow_list()
    out = []
    for column, value in zip(columns, row, strict=True):
        rule = table.get((scope, column))
        if rule is None:
            raise UnclassifiedFieldError(_missing_line(scope, column, "table column"))
        out.append(None if rule.treatment is Treatment.DROPPED else value)
    return tuple(out)


class DeidentificationKeyError(ReportingError):
    """No usable de-identification key."""


def load_key(key_file: Path | None = None, *, environ: Mapping[str, str] | None = None) -> bytes:
    """The secret key: the bytes of ``key_file`` (trailing newline removed), else ``$SEGREPORT_DEID_KEY``.

    Raises :class:`DeidentificationKeyError` when neither is set or the key is shorter than
    :data:`MIN_KEY_BYTES`.
    """
    env = os.environ if environ is None else environ
    if key_file is not None:
        key = _read_key_file(Path(key_file)).rstrip(b"\r\n")
        where = str(key_file)
    elif env.get(KEY_ENV):
        key = env[KEY_ENV].encode("utf-8")
        where = KEY_ENV
    else:
        raise DeidentificationKeyError(
            f"de-identification needs a secret key: set the environment variable {KEY_ENV} "
            "or give a key file (--deid-key-file)"
        )
    if len(key) < MIN_KEY_BYTES:
        raise DeidentificationKeyError(
            f"{where}: the de-identification key is {len(key)} bytes; use at least {MIN_KEY_BYTES}"
        )
    return key


def _read_key_file(path: Path) -> bytes:
    """At most :data:`MAX_KEY_FILE_BYTES` of ``path``: a regular file or a pipe (a key handed over
    as ``--deid-key-file <(…)`` from a password manager); a link to ``/dev/zero`` or a huge file is
    refused after that many bytes, never read to its end."""
    try:
        with path.open("rb") as handle:
            raw = handle.read(MAX_KEY_FILE_BYTES + 1)
    except OSError as exc:
        raise DeidentificationKeyError(
            f"{path}: cannot read the de-identification key file: {exc.strerror or exc}"
        ) from None
    if len(raw) > MAX_KEY_FILE_BYTES:
        raise DeidentificationKeyError(
            f"{path}: more than {MAX_KEY_FILE_BYTES:,} bytes; a de-identification key file holds "
            "only the key"
        )
    return raw


def keyed_hash(key: bytes, kind: str, value: str) -> str:
    """Hex HMAC-SHA256 of ``value`` under ``key``, separated by ``kind`` (study, patient, file…)."""
    message = f"segreport:{kind}\x00{value}".encode()
    return hmac.new(key, message, hashlib.sha256).hexdigest()[:HASH_HEX_DIGITS]


def pseudonymous_study_id(key: bytes, study_id: str) -> str:
    """The study id used in a de-identified record and its file names (``S-`` + 24 hex digits)."""
    return STUDY_PREFIX + keyed_hash(key, "study", study_id)


def pseudonymous_patient_id(key: bytes, patient_id: str) -> str:
    """The patient id used in a de-identified record (``P-`` + 24 hex digits)."""
    return PATIENT_PREFIX + keyed_hash(key, "patient", patient_id)


def key_fingerprint(key: bytes) -> str:
    """A short value that tells keys apart without revealing them (for re-run bookkeeping)."""
    return keyed_hash(key, "fingerprint", "")[:16]


def deidentify(analysis: Analysis, key: bytes, *, keep_text: bool = False) -> Analysis:
    """A copy of ``analysis`` holding only what the allow-list keeps (see the module docstring).

    Every field is treated as ``data/deidentify_fields.csv`` says: kept, generalised by the named
    rule, or dropped. Scores, indices, responses, conclusions and computed notes are kept: they are
    derived from the scores alone. ``keep_text`` keeps the free text marked ``unless_keep_text``
    (indication, comments, symptoms, agent description); the caller must then make sure that text
    holds no identifier. Raises :class:`UnclassifiedFieldError` for a field the table does not list.
    """
    if analysis.study.deidentified:
        return analysis
    context = _Context(analysis, key, keep_text)
    return Analysis.model_validate(_apply(analysis, "", context))


def _apply(model: BaseModel, prefix: str, context: _Context) -> dict[str, Any]:
    table = allow_list()
    out: dict[str, Any] = {}
    for name, info in type(model).model_fields.items():
        path = prefix + name
        value = getattr(model, name)
        rule = table.get((RECORD, path))
        if rule is None:
            if not _holds_model(info.annotation):
                raise UnclassifiedFieldError(_missing_line(RECORD, path, info.annotation))
            out[name] = _nested(value, path, context)
        elif rule.treatment is Treatment.KEPT:
            out[name] = value
        elif rule.treatment is Treatment.DROPPED:
            keep = context.keep_text and rule.rule == UNLESS_KEEP_TEXT
            out[name] = value if keep else _empty(info.annotation)
        else:
            out[name] = GENERALISERS[rule.rule](value, context)
    for name in type(model).model_computed_fields:
        rule = table.get((RECORD, prefix + name))
        if rule is None:
            raise UnclassifiedFieldError(_missing_line(RECORD, prefix + name, str))
        if rule.treatment is Treatment.KEPT:
            out[name] = getattr(model, name)
        # else RECOMPUTED: left out, so the copy makes it again from its de-identified values
    return out


def _nested(value: Any, path: str, context: _Context) -> Any:
    if isinstance(value, BaseModel):
        return _apply(value, path + ".", context)
    if isinstance(value, list):
        return [_nested(v, path, context) for v in value]
    if isinstance(value, dict):
        return {k: _nested(v, path, context) for k, v in value.items()}
    return value


class _Context:
    """What the generalisers need besides the value: the original analysis and the key."""

    def __init__(self, analysis: Analysis, key: bytes, keep_text: bool) -> None:
        self.analysis = analysis
        self.key = key
        self.keep_text = keep_text
        age = analysis.patient.age_years
        self.age_withheld = age is not None and age > OLDEST_EXACT_AGE
        self.territory_map = neutral_territory_map(analysis)
        kinetics = analysis.kinetics
        self.curve_file = kinetics.source_file if kinetics is not None else None


def _withheld_if_90_plus(value: Any, context: _Context) -> Any:
    return None if context.age_withheld else value


def _curve_file_replaced(value: Any, context: _Context) -> Any:
    # A lab names curve files after the study or the patient; the name sits in every location.
    if context.curve_file and isinstance(value, str):
        return value.replace(context.curve_file, CURVE_FILE_PLACEHOLDER)
    return value


def _adequacy_note(value: Any, context: _Context) -> Any:
    if not context.age_withheld:
        return value
    # 220 − age, the target and the % of predicted each give the exact age back.
    return (
        "Age withheld (90 or over) in this de-identified record, so the heart-rate target "
        "is not shown; adequacy was judged on the exact age."
    )


GENERALISERS: dict[str, Callable[[Any, _Context], Any]] = {
    "study_pseudonym": lambda v, c: pseudonymous_study_id(c.key, v),
    "patient_pseudonym": lambda v, c: None if v is None else pseudonymous_patient_id(c.key, v),
    "marked_true": lambda v, c: True,
    "age_under_90": _withheld_if_90_plus,
    "age_group_90_plus": lambda v, c: AGE_GROUP_90_PLUS if c.age_withheld else v,
    "withheld_if_90_plus": _withheld_if_90_plus,
    "adequacy_note": _adequacy_note,
    "territory_map_name": lambda v, c: c.territory_map.name,
    "territory_map_title": lambda v, c: c.territory_map.title,
    "territory_map_source": lambda v, c: c.territory_map.source,
    "curve_file_replaced": _curve_file_replaced,
}
"""The rules a ``generalised`` record field may name in ``data/deidentify_fields.csv``."""


def neutral_territory_map(analysis: Analysis) -> TerritoryMapInfo:
    """The map info a de-identified record shows: a built-in map's own, else a neutral label.

    A lab map's name (often its file name), title and source are the lab's free text; they are
    replaced by :data:`LAB_MAP_TITLE` and a hash of the map's segment assignment, which tells lab
    maps apart without any of their text.
    """
    info = analysis.territory_map
    assignment = ";".join(f"{s.number}:{s.territory.value}" for s in analysis.segments)
    if info.name in BUILT_IN_MAPS:
        shipped = built_in_map(info.name)
        same_text = (info.title, info.source) == (shipped.title, shipped.source)
        model = analysis.segment_model
        if (
            same_text
            and shipped.supports(model)
            and all(shipped.territory_of(model, s.number) is s.territory for s in analysis.segments)
        ):
            return info
    digest = hashlib.sha256(f"{int(analysis.segment_model)}|{assignment}".encode()).hexdigest()
    short = digest[:MAP_HASH_HEX_DIGITS]
    return TerritoryMapInfo(
        name=f"{LAB_MAP_PREFIX}{short}",
        title=LAB_MAP_TITLE,
        source=f"lab-defined (its own text withheld; SHA-256 of its segment assignment {short})",
    )


def _empty(annotation: Any) -> Any:
    # What a dropped field becomes: null where allowed, else an empty list or mapping.
    if _allows_none(annotation):
        return None
    origin = typing.get_origin(annotation)
    if origin is list:
        return []
    if origin is dict:
        return {}
    raise UnclassifiedFieldError(
        f"a dropped field must allow null, a list or a mapping ({annotation})"
    )
