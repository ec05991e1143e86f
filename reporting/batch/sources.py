"""Which files of an input folder a batch treats as studies.

Every YAML and JSON file under the folder, in a stable order (the order of the registry and of id
claims), leaving out hidden files, the batch's own outputs and the output folder itself.
"""

from __future__ import annotations

from pathlib import Path

from reporting.errors import ReportingError
from reporting.load import STUDY_SUFFIXES

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
