"""Reading the angiography reference (``ANGIO.csv``) for the lab quality review.

The file has one row per lesion: ``study_id, vessel, stenosis_percent`` (other columns are ignored),
vessel one of LAD, LCx, RCA or LM. For each study the largest stenosis per vessel counts; a left-main
stenosis counts for both the LAD and the LCx territory; a vessel with no row, in a study that has any
row, counts as free of significant stenosis — so a normal angiogram needs one row such as
``S-1,LAD,0`` to show that the study had angiography at all. Every bad row — unknown vessel, stenosis outside
0–100 %, a value that is not a number, a row repeated — is reported with its file and line number,
all at once.
"""

from __future__ import annotations

import csv
import io
import logging
import math
import re
from pathlib import Path

from pydantic import BaseModel, ConfigDict, Field

from reporting.documents import read_bytes_limited
from reporting.errors import InputError, InputErrors
from reporting.segments import Territory
from reporting.vocabulary import Vocabulary

log = logging.getLogger(__name__)

COLUMNS = ("study_id", "vessel", "stenosis_percent")
MAX_ANGIO_BYTES = 50_000_000
_STUDY_ID = re.compile(r"[A-Za-z0-9._-]{1,64}")


class Vessel(Vocabulary):
    """Coronary vessel named in the angiography file."""

    LAD = "LAD"
    """Left anterior descending artery."""
    LCX = "LCx"
    """Left circumflex artery."""
    RCA = "RCA"
    """Right coronary artery."""
    LM = "LM"
    """Left main stem: supplies both the LAD and the LCx territory."""


VESSELS_OF_TERRITORY: dict[Territory, tuple[Vessel, ...]] = {
    Territory.LAD: (Vessel.LAD, Vessel.LM),
    Territory.LCX: (Vessel.LCX, Vessel.LM),
    Territory.RCA: (Vessel.RCA,),
}
"""Vessels whose stenosis counts for each territory: the left main feeds both left territories."""

_VESSEL_BY_NAME = {v.value.lower(): v for v in Vessel}


class Angiography(BaseModel):
    """The angiographic result of one study: the largest stenosis per vessel."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    study_id: str = Field(description="Study id the angiogram belongs to.")
    stenosis_percent: dict[Vessel, float] = Field(
        description="Largest diameter stenosis (%) per vessel with a row; a vessel absent has none."
    )

    def vessel_stenosis(self, vessel: Vessel) -> float:
        """Largest stenosis (%) of ``vessel``; 0 when the file has no row for it."""
        return self.stenosis_percent.get(vessel, 0.0)

    def territory_stenosis(self, territory: Territory) -> float:
        """Largest stenosis (%) that feeds ``territory``, the left main included for LAD and LCx."""
        return max(self.vessel_stenosis(v) for v in VESSELS_OF_TERRITORY[territory])

    def significant_vessels(self, threshold_percent: float) -> list[Vessel]:
        """Vessels with a stenosis at or above ``threshold_percent``, in file vocabulary order."""
        return [v for v in Vessel if self.vessel_stenosis(v) >= threshold_percent]


def read_angiography(path: Path | str) -> dict[str, Angiography]:
    """Parse ``path``; the result maps study id to its angiography, in file order.

    Raises :class:`InputErrors` with one located problem per bad row (``ANGIO.csv: line 7``).
    """
    path = Path(path)
    where = str(path)
    raw = read_bytes_limited(path, what="angiography CSV file", max_bytes=MAX_ANGIO_BYTES)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(where, f"not UTF-8 text (byte {exc.start})") from None
    return parse_angiography(text, source=where)


def parse_angiography(text: str, *, source: str = "angiography") -> dict[str, Angiography]:
    """Parse angiography CSV text; problems are located as ``source: line N``."""
    reader = csv.reader(io.StringIO(text, newline=""))
    problems: list[InputError] = []
    header: list[str] | None = None
    header_line = 0
    for row in reader:
        if any(cell.strip() for cell in row):
            header, header_line = row, reader.line_num
            break
    if header is None:
        raise InputError(source, f"file is empty; expected the columns {', '.join(COLUMNS)}")
    names = [h.strip().lower() for h in header]
    missing = [c for c in COLUMNS if c not in names]
    repeated = sorted({n for n in names if n and names.count(n) > 1 and n in COLUMNS})
    if missing or repeated:
        if missing:
            problems.append(
                InputError(
                    f"{source}: line {header_line}",
                    f"missing column(s) {', '.join(missing)}; the header needs {', '.join(COLUMNS)}",
                )
            )
        for name in repeated:
            problems.append(
                InputError(f"{source}: line {header_line}", f"column {name!r} appears twice")
            )
        raise InputErrors(problems)
    index = {c: names.index(c) for c in COLUMNS}

    largest: dict[str, dict[Vessel, float]] = {}
    seen: dict[tuple[str, Vessel, float], int] = {}
    line = header_line
    for row in reader:
        start, line = line + 1, reader.line_num
        if not any(cell.strip() for cell in row):
            continue
        at = f"{source}: line {start}"
        row_problems: list[InputError] = []
        if len(row) < len(names):
            problems.append(
                InputError(at, f"{len(row)} field(s); the header has {len(names)} columns")
            )
            continue
        study_id = row[index["study_id"]].strip()
        if not study_id:
            row_problems.append(InputError(at, "study_id is empty"))
        elif not _STUDY_ID.fullmatch(study_id):
            row_problems.append(
                InputError(
                    at, f"study_id {study_id!r} is not a study id (1–64 letters, digits, . _ -)"
                )
            )
        vessel = _vessel(row[index["vessel"]], at, row_problems)
        stenosis = _stenosis(row[index["stenosis_percent"]], at, row_problems)
        if row_problems:
            problems += row_problems
            continue
        if vessel is None or stenosis is None:  # already reported above
            continue
        key = (study_id, vessel, stenosis)
        if key in seen:
            problems.append(
                InputError(
                    at,
                    f"repeats line {seen[key]} ({study_id}, {vessel.value}, {stenosis:g} %); "
                    "remove the copy (only the largest stenosis per vessel counts)",
                )
            )
            continue
        seen[key] = start
        per_vessel = largest.setdefault(study_id, {})
        per_vessel[vessel] = max(stenosis, per_vessel.get(vessel, 0.0))
    if problems:
        raise InputErrors(problems)
    log.debug("read angiography of %d studies from %s", len(largest), source)
    return {
        study_id: Angiography(
            study_id=study_id,
            stenosis_percent={v: per_vessel[v] for v in Vessel if v in per_vessel},
        )
        for study_id, per_vessel in largest.items()
    }


def _vessel(cell: str, at: str, problems: list[InputError]) -> Vessel | None:
    vessel = _VESSEL_BY_NAME.get(cell.strip().lower())
    if vessel is None:
        problems.append(
            InputError(
                at, f"vessel {cell.strip()!r} is not one of {', '.join(v.value for v in Vessel)}"
            )
        )
    return vessel


def _stenosis(cell: str, at: str, problems: list[InputError]) -> float | None:
    text = cell.strip().removesuffix("%").strip()
    try:
        value = float(text)
    except ValueError:
        problems.append(InputError(at, f"stenosis_percent {cell.strip()!r} is not a number"))
        return None
    if not math.isfinite(value) or not 0 <= value <= 100:
        problems.append(InputError(at, f"stenosis_percent {cell.strip()} is outside 0–100 %"))
        return None
    return value
