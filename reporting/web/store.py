"""The studies folder behind the entry page: study files, autosaved drafts and written reports.

Every name that reaches the file system is a validated study id (the same rule as ``study.id``:
1–64 letters, digits, ``.``, ``_`` or ``-``, never ``.`` or ``..``), and every resolved path is
checked to lie inside its folder, so a request can never read or write outside the studies folder.
A new study is written as ``<id>.yaml`` in the study-file format (scores in the
one-character-per-segment form, grouped by ring); an existing one keeps its file name and format
(``X.json`` stays JSON), always through :func:`~reporting.files.write_atomic` and only when its
``If-Match`` names the stored bytes (:mod:`reporting.web.versions`). Files are read with a size
limit and the listing reads only their heads (:mod:`reporting.documents`). Drafts are the page's
raw, possibly incomplete form data as JSON, each owned by the browser tab that wrote it, kept in a
hidden folder that ``segreport batch`` skips.
"""

from __future__ import annotations

import datetime as dt
import json
import logging
import threading
from dataclasses import dataclass, field
from enum import IntEnum, StrEnum
from pathlib import Path
from typing import Any

import yaml
from pydantic import TypeAdapter, ValidationError

from reporting.documents import (
    MAX_DOCUMENT_BYTES,
    decode_text,
    parse_json,
    parse_yaml,
    read_bytes_limited,
    read_head,
)
from reporting.errors import InputError, InputErrors, OutputError, ReportingError
from reporting.files import write_atomic
from reporting.load import STUDY_SUFFIXES, study_from_data
from reporting.model import NOT_VISUALISED, SafeId, Study
from reporting.segments import Ring, SegmentModel, segments_of
from reporting.web.reading import peek_scalars
from reporting.web.versions import check_if_match, etag_of

log = logging.getLogger(__name__)


def _read_whole(path: Path, where: str, what: str = "study file") -> bytes:
    """A file of the studies folder: a regular file (not a link) of at most the document limit."""
    return read_bytes_limited(
        path, what=what, max_bytes=MAX_DOCUMENT_BYTES, where=where, follow_links=False
    )


DRAFTS_FOLDER = ".drafts"
REPORTS_FOLDER = "reports"
MAX_LISTED = 500
HEAD_BYTES = 8 * 1024
"""How much of each file the folder listing reads (a study's date and patient name come first)."""
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
    """One study file in the folder, with what the opener shows (read from the file's head)."""

    id: str
    file: str
    modified: dt.datetime
    date: str | None
    patient: str | None
    valid: bool | None


@dataclass(frozen=True)
class Stored:
    """A study file as read for editing: name, parsed data, problems and the bytes it came from."""

    file: str
    data: Any
    problems: list[InputError]
    content: bytes

    @property
    def etag(self) -> str:
        return etag_of(self.content)


class DraftOwned(ReportingError):
    """A draft write or removal from a page other than the one that keeps the draft."""


@dataclass(frozen=True)
class Folder:
    """The studies folder with its drafts and reports folders."""

    studies: Path
    drafts: Path
    reports: Path
    lock: threading.Lock = field(default_factory=threading.Lock, compare=False, repr=False)

    @classmethod
    def at(cls, studies: Path, drafts: Path | None = None, reports: Path | None = None) -> Folder:
        """The folders, the studies folder created when missing (:class:`OutputError` if it cannot be)."""
        given = studies
        studies = Path(studies).resolve()
        try:
            studies.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(
                str(given), f"cannot create the studies folder: {_why(exc)}"
            ) from None
        if not studies.is_dir():
            raise OutputError(str(given), "cannot create the studies folder: a file is in the way")
        return cls(
            studies,
            Path(drafts).resolve() if drafts is not None else studies / DRAFTS_FOLDER,
            Path(reports).resolve() if reports is not None else studies / REPORTS_FOLDER,
        )

    # --- study files -------------------------------------------------------------------------

    def study_path(self, study_id: str) -> Path | None:
        """The existing file of ``study_id`` (``.yaml``, ``.yml`` or ``.json``), if any.

        Two files for one id (``X.yaml`` and ``X.json``) are refused: a save could not tell which
        one the reader opened.
        """
        checked_id(study_id, "study id")
        found = []
        for suffix in STUDY_SUFFIXES:
            path = inside(self.studies, f"{study_id}{suffix}")
            try:
                if path.exists() or path.is_symlink():  # a FIFO or folder too: refused on reading
                    found.append(path)
            except OSError as exc:
                raise InputError(path.name, f"cannot read: {_why(exc)}") from None
        if len(found) > 1:
            raise InputError(
                " and ".join(p.name for p in found),
                f"{len(found)} files hold study {study_id}; keep one of them",
            )
        return found[0] if found else None

    def list_studies(self) -> list[Listing]:
        """Study files directly in the folder whose names are study ids, newest first.

        Only the first :data:`HEAD_BYTES` of each file are read (date and patient name); a file
        is checked in full when it is opened.
        """
        found: list[Listing] = []
        try:
            entries = sorted(self.studies.iterdir())
        except OSError as exc:
            raise InputError("studies folder", f"cannot list: {_why(exc)}") from None
        for path in entries:
            if path.suffix.lower() not in STUDY_SUFFIXES or path.is_symlink() or not path.is_file():
                continue
            if path.name.startswith(".") or path.name.endswith((".record.json", ".fhir.json")):
                continue
            try:
                checked_id(path.stem, path.name)
            except InputError:
                continue
            try:
                found.append(_listing(path))
            except OSError:
                continue  # removed or replaced while listing
            if len(found) >= MAX_LISTED:
                break
        return sorted(found, key=lambda item: item.modified, reverse=True)

    def read_study(self, study_id: str) -> Stored:
        """The study file of ``study_id``: its editable data, its problems and its bytes."""
        path = self.study_path(study_id)
        if path is None:
            raise FileNotFoundError(study_id)
        content = _read_whole(path, path.name)
        data = _parse(content, path)
        try:
            study = study_from_data(data, source=path.name)
        except InputErrors as exc:
            return Stored(path.name, data, list(exc.problems), content)
        except InputError as exc:
            return Stored(path.name, data, [exc], content)
        return Stored(path.name, study_document(study), [], content)

    def save_study(self, study_id: str, study: Study, *, if_match: str | None) -> Stored:
        """Write ``study`` into the file of ``study_id`` if ``if_match`` allows it (see versions).

        An existing file keeps its name and format (``X.json`` stays JSON); a new study becomes
        ``<id>.yaml``. The check and the write run under one lock, so two saves in this server
        cannot both pass the same version. The body's ``study.id`` must be the address's id, or
        the id already inside the file being replaced.
        """
        with self.lock:
            path = self.study_path(study_id)
            current = None
            if path is not None:
                current = _read_whole(path, path.name)
            target = path or inside(self.studies, f"{checked_id(study_id, 'study id')}.yaml")
            check_if_match(current, if_match, target.name)
            allowed = {study_id}
            if current is not None and path is not None:
                allowed.add(_id_inside(current, path))
            if study.study.id not in allowed:
                raise InputError(
                    "study: study.id",
                    f"the study id {study.study.id!r} differs from {study_id!r} in the address",
                )
            text = study_json(study) if target.suffix.lower() == ".json" else study_yaml(study)
            content = text.encode("utf-8")
            write_atomic(target, content)
        log.info("saved %s", target.name)
        return Stored(target.name, study_document(study), [], content)

    # --- drafts ------------------------------------------------------------------------------

    def _draft_path(self, draft_id: str) -> Path:
        return inside(self.drafts, f"{checked_id(draft_id, 'draft id')}.json")

    def _draft_owner(self, path: Path) -> str | None:
        if not path.is_file():
            return None
        head, _ = read_head(
            path, HEAD_BYTES, what="draft", where=f"drafts/{path.name}", follow_links=False
        )
        return peek_scalars(head.decode("utf-8", "replace"), {("client",)}).get(("client",), "")

    def save_draft(self, draft_id: str, form: dict[str, Any], client: str) -> Path:
        """Keep ``form`` as draft ``draft_id`` of page ``client``; another page's draft is refused."""
        path = self._draft_path(draft_id)
        study = form.get("study") if isinstance(form, dict) else None
        study_id = study.get("study", {}).get("id") if isinstance(study, dict) else None
        if not isinstance(study_id, str):
            study_id = None
        payload = {
            "saved_at": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
            "client": client,
            "study_id": study_id,
            "form": form,
        }
        with self.lock:
            owner = self._draft_owner(path)
            if owner is not None and owner != client:
                raise DraftOwned(
                    f"draft {draft_id} belongs to another page (tab); it is kept as it is"
                )
            write_atomic(path, json.dumps(payload, ensure_ascii=False, indent=1) + "\n")
        return path

    def read_draft(self, draft_id: str) -> dict[str, Any]:
        path = self._draft_path(draft_id)
        if not path.is_file():
            raise FileNotFoundError(draft_id)
        where = f"drafts/{path.name}"
        raw = _read_whole(path, where, what="draft")
        data = parse_json(decode_text(raw, where), where)
        if not isinstance(data, dict):
            raise InputError(where, "a draft holds a mapping")
        return data

    def delete_draft(self, draft_id: str, client: str) -> bool:
        """Remove draft ``draft_id`` of page ``client``; another page's draft is refused."""
        path = self._draft_path(draft_id)
        with self.lock:
            owner = self._draft_owner(path)
            if owner is None:
                return False
            if owner != client:
                raise DraftOwned(f"draft {draft_id} belongs to another page (tab); it is kept")
            path.unlink()
        return True

    def list_drafts(self) -> list[tuple[str, dt.datetime, str | None]]:
        """Drafts (id, last saved, study id), newest first; only each file's head is read."""
        if not self.drafts.is_dir():
            return []
        out = []
        try:
            paths = list(self.drafts.glob("*.json"))
        except OSError as exc:
            raise InputError("drafts folder", f"cannot list: {_why(exc)}") from None
        for path in paths:
            try:
                checked_id(path.stem, path.name)
                head, _ = read_head(
                    path, HEAD_BYTES, what="draft", where=path.name, follow_links=False
                )
            except InputError:
                continue
            study_id = peek_scalars(head.decode("utf-8", "replace"), {("study_id",)})
            out.append((path.stem, _mtime(path), study_id.get(("study_id",))))
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


def _why(exc: OSError) -> str:
    return exc.strerror or type(exc).__name__


def _mtime(path: Path) -> dt.datetime:
    return dt.datetime.fromtimestamp(path.stat().st_mtime, dt.UTC)


def _parse(content: bytes, path: Path) -> Any:
    text = decode_text(content, path.name)
    if path.suffix.lower() == ".json":
        return parse_json(text, path.name)
    return parse_yaml(text, path.name)


def _id_inside(content: bytes, path: Path) -> str:
    """The study id written inside a stored file (empty when it has none)."""
    try:
        data = _parse(content, path)
    except InputError:
        return ""
    info = data.get("study") if isinstance(data, dict) else None
    value = info.get("id") if isinstance(info, dict) else None
    return value if isinstance(value, str) else ""


def _listing(path: Path) -> Listing:
    """What the opener shows of ``path``, from its first bytes only."""
    valid: bool | None = None
    values: dict[tuple[str, ...], str] = {}
    try:
        head, size = read_head(
            path, HEAD_BYTES, what="study file", where=path.name, follow_links=False
        )
        if size > MAX_DOCUMENT_BYTES or not head.strip() or b"\x00" in head:
            valid = False  # too large, empty or binary: opening it would be refused
        else:
            text = head.decode("utf-8", "ignore" if size > len(head) else "strict")
            values = peek_scalars(text, {("study", "date"), ("patient", "name")})
    except (InputError, UnicodeDecodeError):
        valid = False
    return Listing(
        path.stem,
        path.name,
        _mtime(path),
        values.get(("study", "date")),
        values.get(("patient", "name")),
        valid,
    )


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


def study_json(study: Study) -> str:
    """The study file text as JSON (for a study opened from a ``.json`` file)."""
    return json.dumps(study_document(study), ensure_ascii=False, indent=2) + "\n"


def study_yaml(study: Study) -> str:
    """The study file text: a comment line, then the study in field order."""
    data = study_document(study)
    # dates back to date objects, so YAML writes them bare (2026-10-14), as people write them
    data["study"]["date"] = study.study.date
    if study.patient.birth_date is not None:
        data["patient"]["birth_date"] = study.patient.birth_date
    body = yaml.dump(data, Dumper=_StudyDumper, sort_keys=False, allow_unicode=True, width=100)
    return f"# Study file written by the segreport entry page on {dt.date.today().isoformat()}.\n{body}"
