"""Versions of a saved study for the entry page: entity tags and the ``If-Match`` rule (RFC 9110).

A study's version is its stored bytes: :func:`etag_of` hashes them into a strong entity tag, which
``GET`` sends as ``ETag`` and every save must send back as ``If-Match``. :func:`check_if_match`
decides a save against the bytes stored now: replacing an existing study without ``If-Match`` is
refused with 428 Precondition Required (RFC 6585, section 3), and a tag that no longer matches
(another tab, another reader or an editor changed or removed the study) with 412 Precondition
Failed (RFC 9110, section 13.1.1). The rule knows nothing about folders, so a store-backed page can
use it with the bytes of its latest version.
"""

from __future__ import annotations

import hashlib
import logging

from reporting.errors import ReportingError

log = logging.getLogger(__name__)


class PreconditionError(ReportingError):
    """A save refused by its precondition; ``status`` is 412 or 428."""

    def __init__(self, status: int, name: str, problem: str) -> None:
        self.status = status
        self.name = name
        self.problem = problem
        super().__init__(f"{name}: {problem}")


def etag_of(content: bytes) -> str:
    """The strong entity tag of ``content``: its SHA-256, quoted as RFC 9110 section 8.8.3 writes tags."""
    return f'"{hashlib.sha256(content).hexdigest()}"'


def _tags(header: str) -> list[str]:
    # If-Match = "*" / #entity-tag; a weak tag (W/"…") never matches under strong comparison.
    return [part.strip() for part in header.split(",") if part.strip()]


def check_if_match(current: bytes | None, if_match: str | None, name: str) -> None:
    """Allow a save of ``name`` whose stored bytes are ``current`` (``None``: nothing stored yet).

    Raises :class:`PreconditionError` with 428 when a stored study is replaced without ``If-Match``,
    and with 412 when ``If-Match`` names no tag of the stored bytes (or nothing is stored).
    """
    if if_match is None:
        if current is None:
            return  # a new study: nothing to lose
        raise PreconditionError(
            428,
            name,
            "the study exists; send If-Match with the ETag of the version your changes start from "
            "(428 Precondition Required)",
        )
    tags = _tags(if_match)
    if current is None:
        raise PreconditionError(
            412, name, "the study was removed since you opened it (412 Precondition Failed)"
        )
    if "*" in tags or etag_of(current) in tags:
        return
    raise PreconditionError(
        412,
        name,
        "the study changed since you opened it (in another tab, by another reader or in an "
        "editor); nothing was written (412 Precondition Failed)",
    )
