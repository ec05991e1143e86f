"""The one status vocabulary of stored reports: FHIR R4 DiagnosticReport.status codes (FACTS §9)."""

from __future__ import annotations

from reporting.vocabulary import Vocabulary


class VersionStatus(Vocabulary):
    """FHIR R4 DiagnosticReport.status (http://hl7.org/fhir/diagnostic-report-status)."""

    REGISTERED = "registered"
    """The study exists; nothing is reported yet."""
    PARTIAL = "partial"
    """Some results are available."""
    PRELIMINARY = "preliminary"
    """Verified early results, not yet signed: every imported version."""
    FINAL = "final"
    """Signed by the reading physician; never changed again."""
    AMENDED = "amended"
    """A new signed version replacing a final one (new or changed content)."""
    CORRECTED = "corrected"
    """An amendment that corrects an error in the signed version."""
    APPENDED = "appended"
    """A signed version with added text only (an addendum)."""
    CANCELLED = "cancelled"
    """Withdrawn before it became final."""
    ENTERED_IN_ERROR = "entered-in-error"
    """Should never have existed."""
    UNKNOWN = "unknown"
    """The status cannot be told."""


AMENDMENT_STATUSES = frozenset(
    {VersionStatus.AMENDED, VersionStatus.CORRECTED, VersionStatus.APPENDED}
)


def effective_status(created_as: VersionStatus, signed: bool) -> VersionStatus:
    """A version's status as shown: a signed preliminary version is final."""
    if signed and created_as is VersionStatus.PRELIMINARY:
        return VersionStatus.FINAL
    return created_as
