"""The reader's routes of the entry server: the phrase library and confirming the impression.

``GET /api/phrases`` sends the lab's phrase library (``segreport serve --phrases FILE``, else the
built-in starter set) and the slot names it may use; ``POST /api/analyze`` fills every phrase from
the study's analysis, so the page only inserts text. ``POST /api/impression/confirm`` takes the
study as the form holds it and answers with the basis hash of its computed findings
(:func:`reporting.impression.confirm_impression`; the page never computes the hash itself), which
the page keeps in the study's ``impression_basis_sha256`` and saves with the reader's words.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from typing import Any

from fastapi import FastAPI, Request
from pydantic import BaseModel, ConfigDict, Field

from reporting.errors import InputError
from reporting.impression import confirm_impression
from reporting.load import study_from_data
from reporting.model import Study
from reporting.phrases import SLOTS, Phrase, PhraseLibrary
from reporting.results import Analysis, ImpressionStatus
from reporting.web.api import REFUSED, study_body
from reporting.web.bodies import parse_body

log = logging.getLogger(__name__)


class _Answer(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class PhraseListing(_Answer):
    """The lab's phrase library as the page lists it."""

    source: str = Field(description="Where the phrases come from: a file name or 'built-in'.")
    slots: dict[str, str] = Field(description="Slot names a phrase may use, with what each holds.")
    phrases: list[Phrase] = Field(description="The phrases, unfilled, in the library's order.")


class ConfirmedImpression(_Answer):
    """The impression confirmed against the findings computed now (nothing is written)."""

    impression_basis_sha256: str = Field(
        description="SHA-256 of the computed findings; keep it in the study and save it."
    )
    computed_impression: str = Field(description="The computed findings confirmed against.")
    impression_status: ImpressionStatus = Field(description="Always 'current' after confirming.")


def phrase_listing(library: PhraseLibrary, source: str) -> PhraseListing:
    """The phrase library as ``GET /api/phrases`` answers it."""
    return PhraseListing(
        source=source,
        slots={name: what for name, (what, _) in SLOTS.items()},
        phrases=list(library.phrases),
    )


def confirmed_impression(data: Any, analyse: Callable[[Study], Analysis]) -> ConfirmedImpression:
    """The answer of ``POST /api/impression/confirm`` for the request body ``data``."""
    study = study_from_data(data, source="study")
    if not ((study.impression or "").strip() or (study.recommendations or "").strip()):
        raise InputError(
            "study: impression",
            "write or accept an impression (or a recommendation) before confirming it",
        )
    analysis = analyse(study)
    confirmed = confirm_impression(study, analysis)
    digest = confirmed.impression_basis_sha256 or ""
    return ConfirmedImpression(
        impression_basis_sha256=digest,
        computed_impression=confirmed.computed_impression or "",
        impression_status=ImpressionStatus.CURRENT
        if digest == analysis.findings_sha256
        else ImpressionStatus.STALE,
    )


def add_reader_routes(
    app: FastAPI,
    *,
    analyse: Callable[[Study], Analysis],
    library: PhraseLibrary,
    source: str,
) -> None:
    """Add the phrase and impression routes to ``app``; ``analyse`` is the app's own analysis."""
    listing = phrase_listing(library, source)

    @app.get("/api/phrases", response_model=PhraseListing, summary="The lab's phrase library")
    async def phrases() -> PhraseListing:
        return listing

    @app.post(
        "/api/impression/confirm",
        response_model=ConfirmedImpression,
        responses=REFUSED,
        openapi_extra=study_body(),
        summary="Confirm the reader's impression against the findings computed now",
    )
    async def confirm(request: Request) -> ConfirmedImpression:
        return confirmed_impression(parse_body(await request.body(), "study"), analyse)
