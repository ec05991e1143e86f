"""Re-run bookkeeping: one stamp per study under ``.segreport-batch/`` in the output folder.

A stamp names its source file, the digest of the options, the study id and every output file with
the SHA-256 of its bytes. A re-run skips a study when its stamp is newer than the input (and the
files the study refers to), was made with the same options for the same source and id, and every
listed output still holds the bytes this source wrote; the record is then read back, so the
registry and tables always cover every study. A study that fails, or changes its id, leaves its
earlier files to be removed through the same stamp (see :class:`~reporting.batch.results.StaleOutputs`).
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import logging
from pathlib import Path
from typing import Any

from reporting.batch.options import BatchOptions
from reporting.batch.results import StaleOutputs
from reporting.errors import ReportingError
from reporting.files import write_atomic
from reporting.results import Analysis
from reporting.segments import BUILT_IN_MAPS

log = logging.getLogger(__name__)

STAMPS = ".segreport-batch"
"""Folder (inside the output folder) of per-study bookkeeping stamps used to skip on re-runs."""
STAMP_FORMAT = 2
"""Version of the stamp layout; stamps of another version are never trusted for skipping."""
REMOVABLE_SUFFIXES = (".record.json", ".fhir.json", ".pdf", ".svg")
"""The only kinds of file a stale stamp may have a batch remove."""


def stamp_path(options: BatchOptions, source: str) -> Path:
    """Where the stamp of ``source`` lives (a keyed hash of the path when de-identifying)."""
    if options.deidentify:
        from reporting.deidentify import keyed_hash

        assert options.deid_key is not None
        name = keyed_hash(options.deid_key, "source", source)
    else:
        name = hashlib.sha256(source.encode()).hexdigest()[:32]
    return options.outdir / STAMPS / f"{name}.json"


def digest(data: bytes) -> str:
    """The digest a stamp keeps of an output file's bytes."""
    return hashlib.sha256(data).hexdigest()


def write_stamp(
    stamp: Path, source: str, analysis: Analysis, outputs: dict[str, str], options: BatchOptions
) -> None:
    """Record that ``source`` now owns ``outputs`` (file names with the :func:`digest` of each)."""
    data = {
        "format": STAMP_FORMAT,
        # The source path may name the patient, so a de-identified stamp leaves it out (its file
        # name is a keyed hash of the path instead).
        "source": None if options.deidentify else source,
        "fingerprint": options.fingerprint,
        "study_id": analysis.study.id,
        "outputs": outputs,
        # Files the study refers to (curves, a lab map) are found again from the study on re-runs.
        "dependencies": analysis.kinetics is not None
        or analysis.territory_map.name not in BUILT_IN_MAPS,
    }
    write_atomic(stamp, json.dumps(data, indent=1) + "\n")


def read_stamp(stamp: Path) -> dict[str, Any] | None:
    """The stamp's data, or ``None`` when there is none or it cannot be read."""
    try:
        data = json.loads(stamp.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


def reuse(
    path: Path, source: str, stamp: Path, options: BatchOptions, *, expected_id: str | None
) -> tuple[Analysis, tuple[str, ...]] | None:
    """The analysis and outputs of an earlier run when they are still valid, else ``None``.

    ``expected_id`` (when given) is the id this batch's first pass read from the file: an earlier
    run under another id is never reused.
    """
    data = read_stamp(stamp)
    try:
        if data is None or data.get("format") != STAMP_FORMAT:
            return None
        study_id, outputs = data["study_id"], data["outputs"]
        if (
            data.get("fingerprint") != options.fingerprint
            or data.get("source") != (None if options.deidentify else source)
            or (expected_id is not None and study_id != expected_id)
            or not isinstance(outputs, dict)
        ):
            return None
        input_time = path.stat().st_mtime_ns
        if data.get("dependencies"):
            input_time = max([input_time, *(p.stat().st_mtime_ns for p in _dependencies(path))])
        if stamp.stat().st_mtime_ns < input_time:
            return None
        record_name = f"{study_id}.record.json"
        record = b""
        for name, expected in outputs.items():
            content = (options.outdir / name).read_bytes()
            if digest(content) != expected:
                return None  # written over since (by hand, or by another run): not this source's
            if name == record_name:
                record = content
        analysis = Analysis.model_validate_json(record)
        if analysis.study.id != study_id:
            return None
    except (OSError, ValueError, KeyError, TypeError, AttributeError, ReportingError):
        return None
    return analysis, tuple(outputs)


def _dependencies(path: Path) -> list[Path]:
    """Files named by the study at ``path``: its curve file and a lab territory map."""
    from reporting.load import read_document

    raw = read_document(path)
    found = []
    if isinstance(raw, dict):
        for key in ("perfusion_curves", "territory_map"):
            value = raw.get(key)
            if isinstance(value, str) and value not in BUILT_IN_MAPS:
                found.append(path.parent / value)
    return found


def stale_outputs(stamp: Path, *, keep_id: str | None = None) -> StaleOutputs | None:
    """The files the stamp lists, unless they are under ``keep_id`` (the id just written)."""
    data = read_stamp(stamp)
    if data is None:
        return None
    study_id, outputs = data.get("study_id"), data.get("outputs")
    # Earlier stamp formats listed the names only; their files are removed all the same.
    if not isinstance(study_id, str) or not isinstance(outputs, dict | list):
        return None
    if study_id == keep_id:
        return None
    names = tuple(name for name in outputs if _removable(name, study_id))
    return StaleOutputs(study_id, names)


def _removable(name: object, study_id: str) -> bool:
    # A stamp is only ever written by a batch, but it is a file on disk: never let it name anything
    # outside the output folder or any file a study does not write.
    return (
        isinstance(name, str)
        and name == Path(name).name
        and name.startswith(f"{study_id}.")
        and name.endswith(REMOVABLE_SUFFIXES)
    )


def remove_outputs(outdir: Path, stale: StaleOutputs) -> None:
    """Delete the stale files (those already gone are fine)."""
    for name in stale.outputs:
        try:
            (outdir / name).unlink()
        except FileNotFoundError:
            pass
        except OSError as exc:
            log.warning("could not remove stale file %s: %s", name, exc.strerror or exc)
    if stale.outputs:
        log.info("removed %d stale file(s) of %s", len(stale.outputs), stale.study_id)


def remove_stamp(options: BatchOptions, source: str) -> None:
    """Forget the earlier run of ``source`` (its study failed this time)."""
    with contextlib.suppress(OSError):
        stamp_path(options, source).unlink()
