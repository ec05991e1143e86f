"""The audit trail: append-only events linked by a SHA-256 hash chain.

Each event stores the canonical JSON bytes it was hashed from (``body``: sequence number, time,
actor, action, study and version, origin, host, details and the previous event's hash) and
``hash = SHA-256(body)``. Changing, removing or inserting any event breaks every later link;
:mod:`reporting.store.verify` recomputes them. Events are appended only inside a writing
transaction (:meth:`~reporting.store.engine.Database.write`), which holds the store's append lock,
so two writers can never fork the chain or reuse a sequence number (which is also unique).
"""

from __future__ import annotations

import json
import logging
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from reporting.store.canonical import Origin, canonical_json, host, now, sha256_hex
from reporting.store.schema import EventRow

log = logging.getLogger(__name__)

GENESIS = "0" * 64
"""The previous hash of the first event."""


def last_event(session: Session) -> EventRow | None:
    return session.scalars(select(EventRow).order_by(EventRow.seq.desc()).limit(1)).first()


def chain_head(session: Session) -> str:
    """The hash of the newest event (:data:`GENESIS` for an empty chain)."""
    last = last_event(session)
    return last.hash if last is not None else GENESIS


def append(
    session: Session,
    *,
    action: str,
    actor: str | None,
    origin: Origin,
    study_id: str | None = None,
    version: int | None = None,
    detail: dict[str, Any] | None = None,
    at: str | None = None,
) -> EventRow:
    """Add one event to the chain (the caller's transaction must hold the append lock)."""
    last = last_event(session)
    seq = 1 if last is None else last.seq + 1
    prev = GENESIS if last is None else last.hash
    fields: dict[str, Any] = {
        "seq": seq,
        "at": at or now(),
        "actor": actor,
        "action": action,
        "study_id": study_id,
        "version": version,
        "origin": origin.value,
        "host": host(),
        "detail": detail or {},
        "prev_hash": prev,
    }
    body = canonical_json(fields)
    row = EventRow(
        seq=seq,
        at=fields["at"],
        actor=actor,
        action=action,
        study_id=study_id,
        version=version,
        origin=origin.value,
        host=fields["host"],
        body=body,
        prev_hash=prev,
        hash=sha256_hex(body),
    )
    session.add(row)
    session.flush()
    log.debug("event %d %s %s v%s by %s", seq, action, study_id, version, actor)
    return row


def body_of(row: EventRow) -> dict[str, Any]:
    """The fields an event was hashed from (decoded from its stored bytes)."""
    value = json.loads(bytes(row.body))
    assert isinstance(value, dict)
    return value


def describe(row: EventRow) -> str:
    """``event 12 (sign DEMO-0001 v2)`` for messages."""
    what = " ".join(
        x for x in (row.action, row.study_id, f"v{row.version}" if row.version else None) if x
    )
    return f"event {row.seq} ({what})"
