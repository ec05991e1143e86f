"""The electronic-signature block of a signed report, and the page-1 note of an amendment.

A :class:`SignatureBlock` is what the report store hands the PDF writer when it signs a version:
who signed (printed name and user id), when (date, time and zone), what the signature means, the
version and its FHIR status, a short hash of the signed record and the audit chain head at
signing (21 CFR 11.50, 11.70). An amended, corrected or appended version also names the version it
supersedes and why, near the top of page 1.
"""

from __future__ import annotations

import datetime as dt

from pydantic import BaseModel, ConfigDict, Field
from reportlab.platypus import Flowable, KeepTogether, Spacer, Table, TableStyle

from reporting.interop.release import Addendum
from reporting.render import palette
from reporting.render.pdf.styles import Styles, labelled, paragraph
from reporting.wording import addendum_label, supersession_words

SHORT_HASH_CHARS = 12


class SignatureBlock(BaseModel):
    """The signature of one stored version, as printed on its PDF."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    signer_name: str = Field(description="Printed name of the signer.")
    signer_id: str = Field(description="The signer's user id in the store.")
    signed_at: dt.datetime = Field(description="Date and time of signing, with its UTC offset.")
    meaning: str = Field(description="Meaning of the signature (review, approval, …).")
    version: int = Field(ge=1, description="Version number signed.")
    status: str = Field(description="FHIR DiagnosticReport status of the version.")
    record_sha256: str = Field(description="SHA-256 of the signed record JSON (hex).")
    chain_head: str = Field(description="Audit chain head (hex) when the version was signed.")
    supersedes_version: int | None = Field(default=None, description="Version this one replaces.")
    reason: str | None = Field(default=None, description="Why the earlier version was replaced.")
    addenda: tuple[Addendum, ...] = Field(default=(), description="Addenda, oldest first.")


def signed_when(block: SignatureBlock) -> str:
    """``2026-12-02 14:05:09 UTC+01:00``: date, time and zone."""
    at = block.signed_at
    zone = at.tzname() or ""
    offset = at.strftime("%z")
    shown_zone = f"UTC{offset[:3]}:{offset[3:]}" if offset else zone
    return f"{at:%Y-%m-%d %H:%M:%S} {shown_zone}".strip()


def supersession_note(block: SignatureBlock, st: Styles) -> list[Flowable]:
    """Page-1 lines of an amendment or addendum: which version it replaces, and why."""
    if block.supersedes_version is None:
        return []
    kind, text = supersession_words(
        block.status, block.version, block.supersedes_version, block.reason
    )
    lines: list[Flowable] = [Spacer(1, 3), labelled(kind, text, st)]
    lines += [labelled(addendum_label(a.author, a.at), a.text, st) for a in block.addenda]
    return lines


def signed_block(block: SignatureBlock, width: float, st: Styles) -> Flowable:
    """The sign-off of a signed version: name, time, meaning, version, record hash, chain head."""
    rows = [
        ("Electronically signed by", f"{block.signer_name} ({block.signer_id})"),
        ("Date and time", signed_when(block)),
        ("Meaning", block.meaning),
        ("Version", f"{block.version} ({block.status})"),
        ("Record hash", f"SHA-256 {block.record_sha256[:SHORT_HASH_CHARS]}…"),
        ("Audit chain head", block.chain_head),
    ]
    table = Table(
        [[paragraph(k, st["label"]), paragraph(v, st["cell"])] for k, v in rows],
        colWidths=[width * 0.22, width * 0.78],
    )
    table.setStyle(
        TableStyle(
            [
                ("LINEABOVE", (0, 0), (-1, 0), 0.6, palette.INK),
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LEFTPADDING", (0, 0), (-1, -1), 0),
                ("TOPPADDING", (0, 0), (-1, -1), 1.5),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 1.5),
            ]
        )
    )
    return KeepTogether([table])
