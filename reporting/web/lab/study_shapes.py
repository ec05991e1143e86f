"""Shapes of the lab page's study routes (:mod:`reporting.web.lab.studies`), for their OpenAPI
description and their answers. Requests carry a study in the study-file form, as JSON; answers
carry it in the same form (the canonical form the store keeps), so the page edits what it gets.
"""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from reporting.interop.release import MAX_REASON_CHARS
from reporting.store.status import VersionStatus
from reporting.store.users import MAX_PASSWORD_CHARS
from reporting.store.worklist import WorklistStatus
from reporting.web.api import Problem


class _Shape(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class WorklistRow(_Shape):
    """One study on the worklist."""

    study_id: str = Field(description="Study id.")
    patient_id: str | None = Field(description="Patient id, if the study names one.")
    study_date: str | None = Field(description="Study date (ISO 8601).")
    status: WorklistStatus = Field(description="unread, preliminary, signed or amended.")
    version: int = Field(description="The latest version's number.")
    author: str = Field(description="Who saved the latest version (user name).")
    updated_at: str = Field(description="When the latest version was saved, or signed.")
    assigned_reader: str | None = Field(description="The reader the study is assigned to.")
    awaiting_reader: bool = Field(description="Saved by a sonographer; no reader has saved since.")


class Worklist(_Shape):
    """A page of the worklist, newest study date first."""

    total: int = Field(description="How many studies match the filters.")
    rows: list[WorklistRow] = Field(description="This page of them.")


class EarlierStudy(_Shape):
    """An earlier study of the same patient."""

    study_id: str = Field(description="Study id.")
    study_date: str | None = Field(description="Study date (ISO 8601).")
    status: WorklistStatus = Field(description="Its worklist status.")


class SignatureView(_Shape):
    """The electronic signature of a version (21 CFR 11.50)."""

    signer: str = Field(description="The signer's user name.")
    signer_name: str = Field(description="The signer's printed name.")
    signed_at: str = Field(description="Date and time of signing, with its UTC offset.")
    meaning: str = Field(description="What the signature means.")
    record_sha256: str = Field(description="SHA-256 of the signed record JSON.")
    pdf_sha256: str = Field(description="SHA-256 of the signed PDF.")


class StudyView(_Shape):
    """A version of a study as the page opens it."""

    study_id: str = Field(description="Study id.")
    study: dict[str, Any] = Field(description="The study (study-file form) to edit or show.")
    version: int = Field(description="This version's number.")
    latest_version: int = Field(description="The study's latest version number.")
    status: VersionStatus = Field(description="FHIR DiagnosticReport status of this version.")
    read_only: bool = Field(description="Signed: change it only by Amend or Addendum.")
    signature: SignatureView | None = Field(description="Its signature, when signed.")
    author: str = Field(description="Who saved this version.")
    created_at: str = Field(description="When this version was saved.")
    awaiting_reader: bool = Field(description="A sonographer's entry no reader has saved since.")
    assigned_reader: str | None = Field(description="The reader the study is assigned to.")
    etag: str = Field(description="This version's entity tag (also the ETag header).")
    default_meaning: str = Field(
        description="The signature's meaning when the signer gives none (shown when signing)."
    )
    pdf: str | None = Field(description="URL of the signed PDF, when signed.")
    earlier: list[EarlierStudy] = Field(description="The patient's earlier studies, newest first.")
    comparison: dict[str, Any] | None = Field(
        description="The record's comparison with the patient's prior signed study, if any."
    )


class FieldChange(_Shape):
    """One field that differs from the version an edit started from."""

    path: str = Field(description="Dotted path in the study, e.g. stages.peak.wall_motion.7.")
    base: Any = Field(description="The value in the version the edit started from.")
    theirs: Any = Field(description="The value saved meanwhile by the other person.")
    mine: Any = Field(description="The value in this edit.")
    base_present: bool = Field(description="False when the field was absent in the base.")
    theirs_present: bool = Field(description="False when the field is absent in theirs.")
    mine_present: bool = Field(description="False when the field is absent in mine.")
    conflict: bool = Field(description="Both changed it, to different values.")


class StudyConflict(_Shape):
    """A save, sign or amendment refused because the study changed (412) or because it named no
    version (428); nothing was written."""

    detail: str = Field(description="Why it was refused.")
    problems: list[Problem] = Field(description="The refusal, located at the study.")
    etag: str | None = Field(description="The latest version's entity tag (to save on top).")
    current: dict[str, Any] | None = Field(description="The latest version's study (theirs).")
    base_version: int | None = Field(description="The version the edit started from, if known.")
    current_version: int | None = Field(description="The latest version's number.")
    changed_by: str | None = Field(description="Who saved the latest version.")
    changed_at: str | None = Field(description="When.")
    changes: list[FieldChange] = Field(description="Field by field: base, theirs, mine.")
    merged: dict[str, Any] | None = Field(
        default=None,
        description=(
            "Theirs with my changes on top (where mine differs from the base), ready to save with "
            "the ETag above; null when the base version is not known."
        ),
    )


class NewStudy(_Shape):
    """A study to store or save."""

    study: dict[str, Any] = Field(description="The study (study-file form).")


class SignRequest(_Shape):
    """Signing the latest version: the signer's password again (21 CFR 11.200)."""

    password: str = Field(
        description="The signer's password, re-entered.", max_length=MAX_PASSWORD_CHARS
    )
    meaning: str | None = Field(
        default=None, description="What the signature means (default: approved as final).",
        max_length=200,
    )  # fmt: skip


class AmendRequest(_Shape):
    """An amendment: the changed study, why, and the signer's password."""

    study: dict[str, Any] = Field(description="The amended study (study-file form).")
    reason: str = Field(
        description="Why the signed report is amended.", max_length=MAX_REASON_CHARS
    )
    password: str = Field(
        description="The signer's password, re-entered.", max_length=MAX_PASSWORD_CHARS
    )
    correction: bool = Field(default=False, description="Corrects an error (status corrected).")
    meaning: str | None = Field(
        default=None, description="Meaning of the signature.", max_length=200
    )


class AddendumRequest(_Shape):
    """An addendum to a signed report: its text, an optional reason, the signer's password."""

    text: str = Field(description="The addendum's text.", max_length=20000)
    reason: str | None = Field(default=None, description="Why it is added.", max_length=2000)
    password: str = Field(description="The signer's password, re-entered.", max_length=1024)


class SignedAnswer(_Shape):
    """A version signed (by signing, amending or adding an addendum)."""

    study_id: str = Field(description="Study id.")
    version: int = Field(description="The signed version.")
    status: VersionStatus = Field(description="final, amended, corrected or appended.")
    etag: str = Field(description="The signed version's entity tag.")
    pdf: str = Field(description="URL of the signed PDF.")
    record_sha256: str = Field(description="SHA-256 of the signed record JSON.")
    pdf_sha256: str = Field(description="SHA-256 of the signed PDF.")


class AssignmentRequest(_Shape):
    """Assign a study to a reader, or clear the assignment (null)."""

    reader: str | None = Field(description="The reader's user name, or null.", max_length=64)


class AssignmentAnswer(_Shape):
    """A study's assignment after the change."""

    study_id: str = Field(description="Study id.")
    reader: str | None = Field(description="The reader assigned now.")
    before: str | None = Field(description="The reader assigned before.")
