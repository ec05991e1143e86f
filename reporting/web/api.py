"""Shapes of the entry server's JSON answers (they become its OpenAPI description).

Requests are validated by the library's own models: a study body by
:func:`reporting.load.study_from_data` (the :class:`~reporting.model.Study` model, so the page gets
the command line's located messages), ids in paths by :data:`reporting.model.SafeId`.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from reporting.errors import InputError
from reporting.phrases import FilledPhrase
from reporting.results import Analysis


class _Answer(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class Problem(_Answer):
    """One located problem, as ``segreport validate`` prints it."""

    location: str = Field(description="Where: the source and the dotted path inside it.")
    path: str = Field(description="The dotted path alone (empty for the whole study).")
    problem: str = Field(description="What is wrong.")


class ProblemList(_Answer):
    """A refused request: a one-line summary and every located problem."""

    detail: str = Field(description="Summary of why the request was refused.")
    problems: list[Problem] = Field(description="Each problem with its location.")


class AnalyzeResult(_Answer):
    """The analysis of a study as the command line computes it, with the draft narrative."""

    record: Analysis = Field(description="The analysis record (what `segreport analyze` writes).")
    summary: str = Field(
        description="The one-sentence answer of the study, as the report words it."
    )
    narrative_text: str = Field(description="The draft narrative as plain text.")
    narrative_html: str = Field(description="The draft narrative as an escaped HTML fragment.")
    territory_boundaries: str = Field(
        description="SVG path data of the territory boundaries under the map used (map radius 100)."
    )
    phrases: list[FilledPhrase] = Field(
        default_factory=list,
        description="The lab's phrases with their slots filled from this analysis (what the page inserts).",
    )


class StudyListing(_Answer):
    """A study file in the studies folder."""

    id: str = Field(description="Study id (the file name without its suffix).")
    file: str = Field(description="File name.")
    modified: dt.datetime = Field(description="Last modified (UTC).")
    date: str | None = Field(description="Study date as written in the file.")
    patient: str | None = Field(description="Patient name as written in the file.")
    valid: bool | None = Field(
        description=(
            "False when the file would be refused on sight (too large, empty, binary, not UTF-8); "
            "null otherwise: the listing reads only the head of each file, opening it checks it all."
        )
    )


class DraftListing(_Answer):
    """An autosaved draft."""

    id: str = Field(description="Draft id (chosen by the tab that keeps it).")
    modified: dt.datetime = Field(description="Last autosave (UTC).")
    study_id: str | None = Field(description="The study id in the draft, if it has one.")


class FolderListing(_Answer):
    """Study files and drafts the page can open."""

    studies: list[StudyListing] = Field(description="Study files, newest first.")
    drafts: list[DraftListing] = Field(description="Autosaved drafts, newest first.")


class OpenedStudy(_Answer):
    """A study file read for editing: its data and any problems it has."""

    id: str = Field(description="Study id.")
    file: str = Field(description="File name in the studies folder.")
    etag: str = Field(description="The version read (also the ETag header); send it as If-Match.")
    study: dict[str, Any] = Field(description="The study-file data (editable form).")
    problems: list[Problem] = Field(description="Validation problems of the file, if any.")


class Saved(_Answer):
    """A study file written."""

    id: str = Field(description="Study id.")
    file: str = Field(description="File name written in the studies folder.")
    etag: str = Field(description="The new version (also the ETag header).")
    study: dict[str, Any] = Field(description="The study-file data as written (editable form).")


class Conflict(_Answer):
    """A save refused by its precondition (412 or 428): nothing was written."""

    detail: str = Field(description="Why the save was refused.")
    problems: list[Problem] = Field(description="The refusal, located at the file.")
    current: OpenedStudy | None = Field(
        description="The study as stored now (412), so the page can show what changed; null if removed."
    )


class DraftSaved(_Answer):
    """A draft written."""

    id: str = Field(description="Draft id.")
    saved_at: str = Field(description="When (UTC, ISO 8601).")


class ReportFiles(_Answer):
    """Report files written for a saved study."""

    id: str = Field(description="Study id.")
    pdf: str = Field(description="URL of the PDF.")
    files: list[str] = Field(description="URLs of every file written (record, maps, PDF).")


def problem_of(error: InputError, source: str) -> Problem:
    """A located problem; ``path`` is the location without its ``source`` prefix."""
    location = error.location
    if location == source:
        path = ""
    elif location.startswith(f"{source}: "):
        path = location[len(source) + 2 :]
    else:
        path = location
    return Problem(location=location, path=path, problem=error.problem)


# --- OpenAPI descriptions of refusals, headers and bodies ---------------------------------------

REFUSED: dict[int | str, dict[str, Any]] = {
    413: {"model": ProblemList, "description": "Request body too large."},
    422: {
        "model": ProblemList,
        "description": "Located problems, as the command line prints them.",
    },
}


PRECONDITIONS: dict[int | str, dict[str, Any]] = {
    412: {
        "model": Conflict,
        "description": "The study changed since the version in If-Match; nothing was written.",
    },
    428: {"model": Conflict, "description": "An existing study was sent without If-Match."},
}
OWNED: dict[int | str, dict[str, Any]] = {
    409: {"model": ProblemList, "description": "The draft belongs to another tab."}
}
IF_MATCH = {
    "parameters": [
        {
            "name": "If-Match",
            "in": "header",
            "required": False,
            "description": "The ETag of the version the changes start from; needed for an existing study.",
            "schema": {"type": "string"},
        }
    ]
}
DRAFT_BODY = {
    "parameters": [
        {
            "name": "X-Client-Id",
            "in": "header",
            "required": True,
            "description": "The browser tab's id; a draft can be changed only by the tab that keeps it.",
            "schema": {"type": "string"},
        }
    ],
    "requestBody": {
        "required": True,
        "description": "The form data, valid or not.",
        "content": {"application/json": {"schema": {"type": "object"}}},
    },
}


def study_body(ref: str = "#/components/schemas/Study") -> dict[str, Any]:
    return {
        "requestBody": {
            "required": True,
            "description": "A study in the study-file format, as JSON.",
            "content": {"application/json": {"schema": {"$ref": ref}}},
        }
    }
