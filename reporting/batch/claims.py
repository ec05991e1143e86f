"""Study ids claimed before anything is written, so two files with one id never share outputs.

A study's files are named after its id, so two files with the same id would overwrite each other's
record, PDF and maps. Before any study is processed, a first pass reads only the id of every file;
the first file in input order claims the id and every later file with it is refused without
writing anything. The pass depends on the sorted input order alone, never on timing, so the
outcome is the same for any number of worker processes. Ids are compared without regard to case,
because ``T-1.pdf`` and ``t-1.pdf`` are the same file on many file systems.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

from reporting.batch.options import BatchOptions
from reporting.batch.results import Problem
from reporting.batch.sources import NotAStudy, not_a_study
from reporting.documents import parse_json, parse_yaml, peek_yaml_text, read_text
from reporting.errors import ReportingError
from reporting.load import STUDY_SUFFIXES


@dataclass(frozen=True)
class Claim:
    """The id the first pass read from one study file, and the earlier file that owns it, if any."""

    study_id: str | None
    """The id the study's files are named after (``None``: not readable; the study fails anyway)."""
    owner: str | None = None
    """The earlier source (in input order) whose study has this id; ``None`` when this study owns it."""
    owner_id: str | None = None
    """The owner's id as written (it may differ in case)."""
    not_a_study: NotAStudy | None = None
    """Set when the file is a lab settings file or territory map, not a study: it is skipped."""


def claim_key(study_id: str) -> str:
    """What two ids must share to name the same files (case-insensitive file systems)."""
    return study_id.casefold()


def read_output_id(path: Path, options: BatchOptions) -> str | NotAStudy | None:
    """The id ``path``'s outputs would be named after, read without analysing the study.

    A lab settings file or territory map gives its :class:`NotAStudy` kind. ``None`` when the file
    cannot be read or holds no text id; analysing it then fails on its own.
    """
    if path.suffix.lower() not in STUDY_SUFFIXES:
        return None
    try:
        text = read_text(path, what="study file")
        if path.suffix.lower() == ".json":
            data = parse_json(text, str(path))
            study = data.get("study") if isinstance(data, dict) else None
            study_id = study.get("id") if isinstance(study, dict) else None
        else:  # YAML: read only as far as the id, from parser events (much cheaper than a load)
            study_id = peek_yaml_text(text, ("study", "id"))
            if study_id is None:  # not a study, or a broken one: only then load it all
                data = parse_yaml(text, str(path))
        if study_id is None:
            kind = not_a_study(data)
            if kind is not None:
                return kind
    except ReportingError:
        return None
    return options.output_id(study_id) if isinstance(study_id, str) else None


def read_output_ids(paths: Sequence[Path], options: BatchOptions) -> list[str | NotAStudy | None]:
    """:func:`read_output_id` for each path (one task for a worker process)."""
    return [read_output_id(p, options) for p in paths]


def assign(sources: Iterable[tuple[str, str | NotAStudy | None]]) -> list[Claim]:
    """One :class:`Claim` per ``(source, output id)``, in order: the first source with an id owns it."""
    owners: dict[str, tuple[str, str]] = {}
    claims = []
    for source, study_id in sources:
        if isinstance(study_id, NotAStudy):
            claims.append(Claim(None, not_a_study=study_id))
            continue
        if study_id is None:
            claims.append(Claim(None))
            continue
        owner, owner_id = owners.setdefault(claim_key(study_id), (source, study_id))
        if owner == source:
            claims.append(Claim(study_id))
        else:
            claims.append(Claim(study_id, owner, owner_id))
    return claims


def duplicate_problem(claim: Claim, options: BatchOptions) -> Problem:
    """The failure of a study whose id an earlier file already claimed."""
    assert claim.study_id is not None and claim.owner is not None
    same = claim.owner_id == claim.study_id
    used = "also used" if same else f"the same in file names as {claim.owner_id!r}, used"
    return Problem(
        "study.id",
        f"study id {claim.study_id!r} is {used} by {options.file_label(claim.owner)}, which comes "
        "first; each study needs its own id (nothing was written for this file)",
    )
