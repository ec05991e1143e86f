"""What is being released: the report's state, who signed it and which version it replaces.

A study file on its own is never signed, so file mode releases a preliminary, unverified report
(:func:`Release.unsigned`). The report store builds a final, amended, corrected or appended
:class:`Release` from a signed version (FHIR R4 DiagnosticReport.status): every signed release
needs a signer, and one that replaces an earlier version (amended, corrected, appended) also names
its predecessor. Exporters read the state through :class:`ReportState` and never guess it
from the study file.
"""

from __future__ import annotations

import datetime as dt

from pydantic import BaseModel, ConfigDict, Field, model_validator

from reporting.vocabulary import Vocabulary


class ReportState(Vocabulary):
    """State of the released report."""

    PRELIMINARY = "preliminary"
    """Not signed: FHIR preliminary, HL7 result status P, DICOM SR unverified."""
    FINAL = "final"
    """Signed: FHIR final, HL7 F, DICOM SR verified."""
    AMENDED = "amended"
    """A signed version replacing an earlier signed one (changed content): FHIR amended, HL7 C, a
    new SR instance naming the one it replaces."""
    CORRECTED = "corrected"
    """A signed version correcting an error in an earlier signed one: FHIR corrected, HL7 C, a new
    SR instance naming the one it replaces."""
    APPENDED = "appended"
    """A signed version adding an addendum to an earlier signed one: FHIR appended, HL7 C, a new
    SR instance naming the one it replaces."""

    @property
    def replaces(self) -> bool:
        """Whether this release replaces an earlier released version (sent as a correction)."""
        return self in REPLACING_STATES


REPLACING_STATES = frozenset({ReportState.AMENDED, ReportState.CORRECTED, ReportState.APPENDED})
"""States that replace an earlier signed version: HL7 result status C, a DICOM Predecessor."""


class Signer(BaseModel):
    """The clinician who signed the version (21 CFR 11.50: name, time, meaning)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    name: str = Field(min_length=1, max_length=64, description="Printed name of the signer.")
    signed_at: dt.datetime = Field(description="When the version was signed (timezone-aware).")
    meaning: str = Field(min_length=1, max_length=64, description="Meaning, e.g. 'approval'.")
    organization: str = Field(
        min_length=1, max_length=64, description="The lab or organisation the signer signs for."
    )
    id: str | None = Field(
        default=None, max_length=16, description="Staff number of the signer, if known."
    )

    @model_validator(mode="after")
    def _aware(self) -> Signer:
        if self.signed_at.tzinfo is None:
            raise ValueError("signed_at must carry a time zone")
        return self


class Addendum(BaseModel):
    """Text added to a signed report (an appended version carries every addendum so far)."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    text: str = Field(description="The added text.")
    author: str = Field(description="Printed name of the author.")
    at: str = Field(description="When it was written (ISO 8601 with UTC offset).")


MAX_REASON_CHARS = 2000
"""Longest reason for an amendment (the lab page's limit; the CLI's too)."""


class Predecessor(BaseModel):
    """The released version this one replaces (for DICOM's Predecessor Documents Sequence)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    version: int = Field(ge=1, description="Version number of the replaced version.")
    reason: str = Field(
        min_length=1, max_length=MAX_REASON_CHARS, description="Why it was replaced."
    )
    sr_sop_instance_uid: str | None = Field(
        default=None, description="SOP Instance UID of the SR sent for the replaced version."
    )
    sr_series_instance_uid: str | None = Field(
        default=None, description="Series Instance UID of that SR."
    )
    released: bool = Field(
        default=True,
        description="The replaced version could be released (false: it named no lab, so no SR of "
        "it exists for the Predecessor Documents Sequence to name).",
    )


class Release(BaseModel):
    """The inputs besides the Analysis and the PDF that every export needs."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    state: ReportState = Field(description="preliminary, final or corrected.")
    version: int = Field(default=1, ge=1, description="Version number of the released report.")
    signer: Signer | None = Field(default=None, description="Signer; required unless preliminary.")
    predecessor: Predecessor | None = Field(
        default=None,
        description="The version replaced; required when amended, corrected or appended.",
    )
    addenda: tuple[Addendum, ...] = Field(
        default=(), description="The version's addenda, oldest first (the PDF prints them too)."
    )

    @model_validator(mode="after")
    def _consistent(self) -> Release:
        signed = self.state is not ReportState.PRELIMINARY
        if signed and self.signer is None:
            raise ValueError(f"a {self.state} release needs a signer")
        if not signed and self.signer is not None:
            raise ValueError("a preliminary release has no signer")
        if self.state.replaces != (self.predecessor is not None):
            raise ValueError(
                "an amended, corrected or appended release, and only one, names its predecessor"
            )
        return self

    @classmethod
    def unsigned(cls) -> Release:
        """File mode: a preliminary, unverified first version."""
        return cls(state=ReportState.PRELIMINARY)
