"""Reading a lab's analysis records back as typed :class:`~reporting.results.Analysis` objects.

The quality review and the reader-agreement check start from records the lab already has: either a
folder of ``*.record.json`` files (searched recursively, as ``segreport report`` and ``batch`` write
them) or a ``registry.ndjson`` with one record per line. Every problem — unreadable file, broken
JSON, a record that does not match the model, a study id that appears twice — comes back located
(file, and line for NDJSON) and all together, so nothing is dropped without a word.
"""

from __future__ import annotations

import io
import json
import logging
from collections.abc import Iterator
from pathlib import Path

from pydantic import ValidationError

from reporting.documents import open_regular, read_bytes_limited
from reporting.errors import InputError, InputErrors
from reporting.results import RECORD_SCHEMA_VERSION, Analysis

log = logging.getLogger(__name__)

RECORD_SUFFIX = ".record.json"
REGISTRY_NAME = "registry.ndjson"
MAX_RECORD_BYTES = 10_000_000


def read_records(path: Path | str) -> list[Analysis]:
    """Every record at ``path`` (folder of records, ``.ndjson`` registry or one record file).

    Records come back sorted by study date (year for de-identified records), then study id. Raises :class:`InputErrors` listing every
    problem found.
    """
    path = Path(path)
    problems: list[InputError] = []
    found: list[tuple[str, Analysis]] = []
    for where, item in _documents(path, problems):
        record = _record(item, where, problems)
        if record is not None:
            found.append((where, record))
    if not found and not problems:
        problems.append(
            InputError(
                str(path),
                f"no records found (expected *{RECORD_SUFFIX} files or a {REGISTRY_NAME})",
            )
        )
    first_seen: dict[str, str] = {}
    for where, record in found:
        study_id = record.study.id
        if study_id in first_seen:
            problems.append(
                InputError(
                    where, f"study id {study_id!r} appears again (first in {first_seen[study_id]})"
                )
            )
        else:
            first_seen[study_id] = where
    if problems:
        raise InputErrors(problems)
    records = [r for _, r in found]
    log.debug("read %d records from %s", len(records), path)
    return sorted(records, key=_order)


def _order(record: Analysis) -> tuple[int, str, str]:
    # De-identified records keep only the year; they sort before dated studies of that year.
    date = record.study.date
    return (record.study.year, date.isoformat() if date else "", record.study.id)


def _documents(path: Path, problems: list[InputError]) -> Iterator[tuple[str, object]]:
    """(location, parsed JSON) for every record document under ``path``."""
    if path.is_dir():
        files = sorted(path.rglob(f"*{RECORD_SUFFIX}"))
        if not files and (path / REGISTRY_NAME).is_file():
            yield from _ndjson(path / REGISTRY_NAME, problems)
            return
        for file in files:
            item = _json_file(file, problems)
            if item is not None:
                yield str(file), item
    elif path.is_file():
        if path.suffix.lower() == ".ndjson":
            yield from _ndjson(path, problems)
        elif path.suffix.lower() == ".json":
            item = _json_file(path, problems)
            if item is not None:
                yield str(path), item
        else:
            problems.append(
                InputError(
                    str(path), "expected a folder of records, a .ndjson registry or a .json record"
                )
            )
    elif path.exists():  # a named pipe, a device or a link to one: refused with what it is
        _json_file(path, problems)
    else:
        problems.append(InputError(str(path), "no such file or folder"))


def _json_file(path: Path, problems: list[InputError]) -> object | None:
    where = str(path)
    try:
        text = read_bytes_limited(path, what="record", max_bytes=MAX_RECORD_BYTES).decode(
            "utf-8-sig"
        )
    except InputError as exc:
        problems.append(exc)
        return None
    except UnicodeDecodeError as exc:
        problems.append(InputError(where, f"not UTF-8 text (byte {exc.start})"))
        return None
    return _parse(text, where, problems)


def _ndjson(path: Path, problems: list[InputError]) -> Iterator[tuple[str, object]]:
    try:
        raw = open_regular(path, what="registry")
    except InputError as exc:
        problems.append(exc)
        return
    with io.TextIOWrapper(raw, encoding="utf-8-sig") as handle:
        try:
            number = 0
            while line := handle.readline(MAX_RECORD_BYTES + 1):
                number += 1
                where = f"{path}: line {number}"
                if len(line) > MAX_RECORD_BYTES:
                    problems.append(
                        InputError(
                            where,
                            f"line is longer than {MAX_RECORD_BYTES:,} characters; a record is at most that",
                        )
                    )
                    return
                if not line.strip():
                    continue
                item = _parse(line, where, problems)
                if item is not None:
                    yield where, item
        except UnicodeDecodeError as exc:
            problems.append(InputError(str(path), f"not UTF-8 text (byte {exc.start})"))


def _parse(text: str, where: str, problems: list[InputError]) -> object | None:
    try:
        item: object = json.loads(text)
    except json.JSONDecodeError as exc:
        problems.append(InputError(where, f"invalid JSON: {exc.msg} (column {exc.colno})"))
        return None
    return item


def _record(item: object, where: str, problems: list[InputError]) -> Analysis | None:
    if not isinstance(item, dict):
        problems.append(InputError(where, "a record is a JSON object"))
        return None
    version = item.get("schema_version")
    if version != RECORD_SCHEMA_VERSION:
        problems.append(
            InputError(
                where,
                f"record schema_version {version!r} is not supported (this version reads {RECORD_SCHEMA_VERSION})",
            )
        )
        return None
    try:
        return Analysis.model_validate(item)
    except ValidationError as exc:
        for error in exc.errors()[:5]:
            field = ".".join(str(p) for p in error["loc"])
            problems.append(InputError(f"{where}: {field}" if field else where, error["msg"]))
        if len(exc.errors()) > 5:
            problems.append(InputError(where, f"… and {len(exc.errors()) - 5} more problems"))
        return None
