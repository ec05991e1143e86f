"""A study version's stored content: the canonical bytes of the study and the files it names.

Content is canonical JSON ``{"format": 1, "study": <validated study>, "files": {name: text},
"addenda": [...]}``: the study as the validated model writes it (so re-saving a file with other
spacing or key order is no change), the time-intensity curve file and lab territory map it names
(by their relative path, so the version can be analysed again without the original folder), and
any addenda appended after signing. The content's SHA-256 is taken over exactly these bytes.
"""

from __future__ import annotations

import json
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from reporting.errors import InputError
from reporting.model import STAGE_ORDER, ReportStatus, Study
from reporting.results import Analysis
from reporting.settings import Settings
from reporting.store.canonical import canonical_json, sha256_hex

CONTENT_FORMAT = 1
STUDY_FILE = "study.json"


@dataclass(frozen=True)
class Content:
    """One version's content, parsed."""

    study: Study
    files: dict[str, str]
    addenda: tuple[dict[str, str], ...]
    data: bytes
    sha256: str

    @property
    def study_id(self) -> str:
        return self.study.study.id

    @property
    def patient_id(self) -> str | None:
        return self.study.patient.id


def build(study: Study, files: dict[str, str], addenda: tuple[dict[str, str], ...] = ()) -> Content:
    value: dict[str, Any] = {
        "format": CONTENT_FORMAT,
        "study": study.model_dump(mode="json", exclude_none=True),
        "files": files,
    }
    if addenda:
        value["addenda"] = list(addenda)
    data = canonical_json(value)
    return Content(study, dict(files), tuple(addenda), data, sha256_hex(data))


def from_file(path: Path) -> Content:
    """Read and fully check a study file (it must analyse), with the files it names."""
    from reporting.analysis import analyze_file
    from reporting.load import load_study

    study = load_study(path)
    analyze_file(path)  # every problem an analysis would meet is an import problem
    files: dict[str, str] = {}
    for field, relative in (
        ("perfusion_curves", study.perfusion_curves),
        ("territory_map", study.territory_map),
    ):
        if relative is None or (
            field == "territory_map" and "/" not in relative and "." not in relative
        ):
            continue
        try:
            files[relative] = (path.parent / relative).read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise InputError(f"{path}: {field}", f"cannot read {relative!r}: {exc}") from None
    return build(study, files)


def parse(data: bytes) -> Content:
    """Content from its stored bytes."""
    from reporting.load import study_from_data

    value = json.loads(data)
    raw = value["study"]
    # canonical JSON sorts keys; the stages go back into protocol order
    raw["stages"] = {
        s.value: raw["stages"][s.value] for s in STAGE_ORDER if s.value in raw["stages"]
    }
    study = study_from_data(raw, source="stored study")
    return Content(
        study, dict(value["files"]), _addenda(value), bytes(data), sha256_hex(bytes(data))
    )


def addenda_of(data: bytes) -> tuple[dict[str, str], ...]:
    """The addenda of stored content, without validating its study."""
    return _addenda(json.loads(data))


def _addenda(value: dict[str, Any]) -> tuple[dict[str, str], ...]:
    return tuple(value.get("addenda", ()))


def with_addendum(content: Content, addendum: dict[str, str]) -> Content:
    return build(content.study, content.files, (*content.addenda, addendum))


def analyse(content: Content, *, final: bool, settings: Settings | None = None) -> Analysis:
    """The analysis of a stored version (``final``: rendered as the signed report) with the lab's
    ``settings`` (the defaults when not given)."""
    from reporting.analysis import analyze, analyze_file

    study = content.study
    status = ReportStatus.FINAL if final else ReportStatus.PRELIMINARY
    if study.study.report_status is not status:
        info = study.study.model_copy(update={"report_status": status})
        study = study.model_copy(update={"study": info})
    if not content.files:
        return analyze(study, settings=settings)
    with tempfile.TemporaryDirectory(prefix="segreport-store-") as folder:
        base = Path(folder)
        for name, text in content.files.items():
            target = (base / name).resolve()
            if not target.is_relative_to(base.resolve()):
                raise InputError(
                    f"stored {content.study_id}", f"file name {name!r} leaves the folder"
                )
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_text(text, encoding="utf-8")
        study_path = base / STUDY_FILE
        study_path.write_text(study.model_dump_json(exclude_none=True), encoding="utf-8")
        return analyze_file(study_path, settings=settings)
