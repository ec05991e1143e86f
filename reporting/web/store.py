"""The studies folder behind the entry page: study files, autosaved drafts and written reports.

Every name that reaches the file system is a validated study id (the same rule as ``study.id``:
1–64 letters, digits, ``.``, ``_`` or ``-``, never ``.`` or ``..``), and every resolved path is
checked to lie inside its folder, so a request can never read or write outside the studies folder.
Study files are written as YAML in the study-file format (scores in the one-character-per-segment
form, grouped by ring) through :func:`~reporting.files.write_atomic`; drafts are the page's raw,
possibly incomplete form data as JSON, kept in a hidden folder that ``segreport batch`` skips.
"""

from __future__ import annotations

import datetime as dt
import json
import logging
from dataclasses import dataclass
from enum import IntEnum, StrEnum
from pathlib import Path
from typing import Any

import yaml
from pydantic import TypeAdapter, ValidationError

from reporting.errors import InputError, InputErrors
from reporting.files import write_atomic
from reporting.load import STUDY_SUFFIXES, read_document, study_from_data
from reporting.model import NOT_VISUALISED, SafeId, Study
from reporting.segments import Ring, SegmentModel, segments_of

log = logging.getLogger(__name__)

DRAFTS_FOLDER = ".drafts"
REPORTS_FOLDER = "reports"
MAX_LISTED = 500
_REPORT_SUFFIXES = {".pdf": "application/pdf", ".svg": "image/svg+xml", ".json": "application/json"}
_ID = TypeAdapter(SafeId)


def checked_id(value: str, where: str) -> str:
    """``value`` when it is a safe study id; otherwise an :class:`InputError` located at ``where``."""
    try:
        return _ID.validate_python(value)
    except ValidationError as exc:
        raise InputError(where, exc.errors()[0]["msg"]) from None


def inside(folder: Path, name: str) -> Path:
    """``folder / name``, refused unless it resolves to a direct child of ``folder``."""
    path = (folder / name).resolve()
    if path.parent != folder.resolve():
        raise InputError(name, "path leaves its folder")
    return path


@dataclass(frozen=True)
class Listing:
    """One study file in the folder, with what the opener shows."""

    id: str
    file: str
    modified: dt.datetime
    date: str | None
    patient: str | None
    valid: bool


@dataclass(frozen=True)
class Folder:
    """The studies folder with its drafts and reports folders."""

    studies: Path
    drafts: Path
    reports: Path

    @classmethod
    def at(cls, studies: Path, drafts: Path | None = None, reports: Path | None = None) -> Folder:
        studies = Path(studies).resolve()
        studies.mkdir(parents=True, exist_ok=True)
        return cls(
            studies,
            Path(drafts).resolve() if drafts is not None else studies / DRAFTS_FOLDER,
            Path(reports).resolve() if reports is not None else studies / REPORTS_FOLDER,
        )

    # --- study files -------------------------------------------------------------------------

    def study_path(self, study_id: str) -> Path | None:
        """The existing file of ``study_id`` (``.yaml``, then ``.yml``, then ``.json``), if any."""
        checked_id(study_id, "study id")
        for suffix in STUDY_SUFFIXES:
            path = inside(self.studies, f"{study_id}{suffix}")
            if path.is_file():
                return path
        return None

    def list_studies(self) -> list[Listing]:
        """Study files directly in the folder whose names are study ids, newest first."""
        found: list[Listing] = []
        for path in sorted(self.studies.iterdir()):
            if path.suffix.lower() not in STUDY_SUFFIXES or path.is_symlink() or not path.is_file():
                continue
            if path.name.startswith(".") or path.name.endswith((".record.json", ".fhir.json")):
                continue
            try:
                checked_id(path.stem, path.name)
            except InputError:
                continue
            found.append(_listing(path))
            if len(found) >= MAX_LISTED:
                break
        return sorted(found, key=lambda item: item.modified, reverse=True)

    def read_study(self, study_id: str) -> tuple[str, Any, list[InputError]]:
        """File name, the parsed document (editable form) and its validation problems."""
        path = self.study_path(study_id)
        if path is None:
            raise FileNotFoundError(study_id)
        data = read_document(path)
        try:
            study = study_from_data(data, source=path.name)
        except InputErrors as exc:
            return path.name, data, list(exc.problems)
        except InputError as exc:
            return path.name, data, [exc]
        return path.name, study_document(study), []

    def save_study(self, study: Study, *, overwrite: bool) -> Path:
        """Write ``study`` as ``<id>.yaml``; refuse to replace another file unless ``overwrite``."""
        path = inside(self.studies, f"{checked_id(study.study.id, 'study.id')}.yaml")
        if path.exists() and not overwrite:
            raise FileExistsError(path.name)
        write_atomic(path, study_yaml(study))
        log.info("saved %s", path)
        return path

    # --- drafts ------------------------------------------------------------------------------

    def save_draft(self, draft_id: str, form: dict[str, Any]) -> Path:
        path = inside(self.drafts, f"{checked_id(draft_id, 'draft id')}.json")
        payload = {"saved_at": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"), "form": form}
        write_atomic(path, json.dumps(payload, ensure_ascii=False, indent=1) + "\n")
        return path

    def read_draft(self, draft_id: str) -> dict[str, Any]:
        path = inside(self.drafts, f"{checked_id(draft_id, 'draft id')}.json")
        if not path.is_file():
            raise FileNotFoundError(draft_id)
        data: dict[str, Any] = json.loads(path.read_text(encoding="utf-8"))
        return data

    def delete_draft(self, draft_id: str) -> bool:
        path = inside(self.drafts, f"{checked_id(draft_id, 'draft id')}.json")
        if not path.is_file():
            return False
        path.unlink()
        return True

    def list_drafts(self) -> list[tuple[str, dt.datetime]]:
        if not self.drafts.is_dir():
            return []
        out = []
        for path in self.drafts.glob("*.json"):
            try:
                checked_id(path.stem, path.name)
            except InputError:
                continue
            out.append((path.stem, _mtime(path)))
        return sorted(out, key=lambda item: item[1], reverse=True)[:MAX_LISTED]

    # --- reports -----------------------------------------------------------------------------

    def report_file(self, name: str) -> tuple[Path, str]:
        """A written report file by name, with its media type."""
        media = _REPORT_SUFFIXES.get(Path(name).suffix.lower())
        stem = name[: -len(Path(name).suffix)] if media else name
        if media is None or name.startswith("."):
            raise InputError(name, "not a report file name")
        checked_id(stem, "report file")
        path = inside(self.reports, name)
        if not path.is_file():
            raise FileNotFoundError(name)
        return path, media


def _mtime(path: Path) -> dt.datetime:
    return dt.datetime.fromtimestamp(path.stat().st_mtime, dt.UTC)


def _listing(path: Path) -> Listing:
    date = patient = None
    valid = True
    try:
        data = read_document(path)
        study_from_data(data, source=path.name)
    except (InputError, InputErrors):
        valid = False
        data = None
    if isinstance(data, dict):
        info, person = data.get("study"), data.get("patient")
        if isinstance(info, dict) and info.get("date") is not None:
            date = str(info["date"])
        if isinstance(person, dict) and person.get("name") is not None:
            patient = str(person["name"])
    return Listing(path.stem, path.name, _mtime(path), date, patient, valid)


# --- the study-file form ------------------------------------------------------------------------


def score_string(scores: dict[int, int | None], model: SegmentModel) -> str:
    """``{1: 1, 2: None, …}`` -> ``"1x1111 111111 1111 1"``: one character per segment, by ring."""
    groups: list[str] = []
    ring: Ring | None = None
    for seg in segments_of(model):
        score = scores.get(seg.number)
        char = NOT_VISUALISED if score is None else str(score)
        if seg.ring is ring:
            groups[-1] += char
        else:
            groups.append(char)
            ring = seg.ring
    return " ".join(groups)


def study_document(study: Study) -> dict[str, Any]:
    """``study`` as study-file data: empty parts dropped, scores in the character form."""
    data: dict[str, Any] = study.model_dump(mode="json", exclude_none=True)
    for stage in data["stages"].values():
        for kind in ("wall_motion", "perfusion"):
            if kind in stage:
                scores = {int(n): s for n, s in stage[kind].items()}
                stage[kind] = score_string(scores, study.segment_model)
    if not data.get("patient"):
        data.pop("patient", None)
    return data


class _StudyDumper(yaml.SafeDumper):
    """Safe YAML with enums written as their plain values."""


_StudyDumper.add_multi_representer(
    StrEnum, lambda dumper, value: dumper.represent_str(str(value.value))
)
_StudyDumper.add_multi_representer(
    IntEnum, lambda dumper, value: dumper.represent_int(int(value.value))
)


def study_yaml(study: Study) -> str:
    """The study file text: a comment line, then the study in field order."""
    data = study_document(study)
    # dates back to date objects, so YAML writes them bare (2026-10-14), as people write them
    data["study"]["date"] = study.study.date
    if study.patient.birth_date is not None:
        data["patient"]["birth_date"] = study.patient.birth_date
    body = yaml.dump(data, Dumper=_StudyDumper, sort_keys=False, allow_unicode=True, width=100)
    return f"# Study file written by the segreport entry page on {dt.date.today().isoformat()}.\n{body}"
