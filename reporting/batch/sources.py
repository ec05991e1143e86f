"""Which files of an input folder a batch treats as studies.

Every YAML and JSON file under the folder, in a stable order (the order of the registry and of id
claims), leaving out hidden files, the batch's own outputs and the output folder itself. A lab keeps
its settings file or territory map beside its studies (a study names its map relative to itself), so
:func:`not_a_study` recognises both from their content: the batch skips them instead of reporting
them as failed studies.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from reporting.errors import ReportingError
from reporting.load import STUDY_SUFFIXES
from reporting.vocabulary import Vocabulary

OUTPUT_SUFFIXES = (".record.json", ".fhir.json")
"""Files a batch writes whose suffix is also a study suffix: never read back as studies."""


def find_studies(indir: Path, *, exclude: Path | None = None) -> list[Path]:
    """Every ``*.yaml``, ``*.yml`` and ``*.json`` file under ``indir`` (recursive), in a stable order.

    Hidden files and folders (names starting with a dot), files a batch writes (``*.record.json``,
    ``*.fhir.json``) and anything inside ``exclude`` (the output folder, when it lies under
    ``indir``) are left out, so a batch never reads its own outputs back as studies.
    """
    indir = Path(indir)
    if not indir.is_dir():
        raise ReportingError(f"{indir}: not a folder")
    skip = exclude.resolve() if exclude is not None else None
    if skip is not None and skip == indir.resolve():
        skip = None
    found = []
    for p in indir.rglob("*"):
        if p.suffix.lower() not in STUDY_SUFFIXES or p.name.endswith(OUTPUT_SUFFIXES):
            continue
        if any(part.startswith(".") for part in p.relative_to(indir).parts):
            continue
        if skip is not None and p.resolve().is_relative_to(skip):
            continue
        if p.is_file():
            found.append(p)
    return sorted(found, key=lambda p: p.relative_to(indir).as_posix())


def source_name(path: Path, indir: Path) -> str:
    """The path of a study file relative to the input folder, in POSIX form."""
    return Path(path).relative_to(indir).as_posix()


class NotAStudy(Vocabulary):
    """A YAML or JSON file of a lab that is not a study."""

    TERRITORY_MAP = "territory map"
    """Shaped like ``data/territory_maps/standard.yaml``: a ``territories`` mapping."""
    SETTINGS = "lab settings"
    """Only names of :class:`~reporting.settings.Settings` fields as keys."""


_STUDY_KEYS = ("study", "stages", "schema_version", "patient")


def not_a_study(data: Any) -> NotAStudy | None:
    """The kind of a parsed document that is a lab settings file or territory map, else ``None``."""
    if not isinstance(data, dict) or not data or any(k in data for k in _STUDY_KEYS):
        return None
    if isinstance(data.get("territories"), dict):
        return NotAStudy.TERRITORY_MAP
    from reporting.settings import Settings

    if all(isinstance(k, str) and k in Settings.model_fields for k in data):
        return NotAStudy.SETTINGS
    return None
