"""What a batch writes: :class:`BatchOptions`, and the digest of them kept in each study's stamp.

The options travel to every worker process, so they are a small frozen dataclass. Their
:attr:`~BatchOptions.fingerprint` changes whenever anything that changes a study's outputs changes,
which is how a re-run knows that an earlier study's files are still the ones it would write.
"""

from __future__ import annotations

import contextlib
import functools
import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path

from reporting.errors import ReportingError
from reporting.segments import BUILT_IN_MAPS


@dataclass(frozen=True)
class BatchOptions:
    """What a batch writes. ``deid_key`` is required with ``deidentify`` (see :mod:`reporting.deidentify`)."""

    outdir: Path
    pdf: bool = True
    fhir: bool = False
    deidentify: bool = False
    deid_key: bytes | None = field(default=None, repr=False)
    keep_text: bool = False
    force: bool = False
    settings_path: Path | None = None
    territory_map: str | None = None
    paper: str = "A4"
    templates_dir: Path | None = None

    def __post_init__(self) -> None:
        if self.deidentify and not self.deid_key:
            raise ReportingError(
                "de-identification needs a key (see reporting.deidentify.load_key)"
            )

    @property
    def writes_pdf(self) -> bool:
        """PDFs are written unless turned off or de-identifying (a report shows identifiers)."""
        return self.pdf and not self.deidentify

    @property
    def key_fingerprint(self) -> str | None:
        """Tells de-identification keys apart without revealing them (``None``: not de-identifying)."""
        if not self.deidentify or not self.deid_key:
            return None
        from reporting.deidentify import key_fingerprint

        return key_fingerprint(self.deid_key)

    @functools.cached_property
    def fingerprint(self) -> str:
        """A digest of everything that changes the outputs, stored in each study's stamp."""
        from reporting import __version__
        from reporting.deidentify import key_fingerprint

        settings_stamp = map_stamp = None
        if self.settings_path is not None:
            with contextlib.suppress(OSError):
                settings_stamp = [str(self.settings_path), self.settings_path.stat().st_mtime_ns]
        if self.territory_map is not None and self.territory_map not in BUILT_IN_MAPS:
            with contextlib.suppress(OSError):
                map_stamp = Path(self.territory_map).stat().st_mtime_ns
        parts = {
            "version": __version__,
            "pdf": self.writes_pdf,
            "fhir": self.fhir,
            "deidentify": self.deidentify,
            "key": key_fingerprint(self.deid_key) if self.deidentify and self.deid_key else None,
            "keep_text": self.keep_text,
            "settings": settings_stamp,
            "territory_map": [self.territory_map, map_stamp],
            "paper": self.paper,
            "templates": str(self.templates_dir) if self.templates_dir else None,
        }
        return hashlib.sha256(json.dumps(parts, sort_keys=True).encode()).hexdigest()[:32]

    def file_label(self, source: str) -> str:
        """How written outputs name an input file: its relative path, or a keyed hash when de-identifying."""
        if not self.deidentify:
            return source
        from reporting.deidentify import keyed_hash

        assert self.deid_key is not None
        return "F-" + keyed_hash(self.deid_key, "source", source)

    def output_id(self, study_id: str) -> str:
        """The id a study's output files are named after (its pseudonym when de-identifying)."""
        if not self.deidentify:
            return study_id
        from reporting.deidentify import pseudonymous_study_id

        assert self.deid_key is not None
        return pseudonymous_study_id(self.deid_key, study_id)
