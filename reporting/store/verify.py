"""``store verify``: recompute every hash and compare every row with the event that records it.

Checks, in order: the event chain (sequence without gaps, each ``prev_hash`` the previous hash,
each hash the SHA-256 of the event's stored bytes, the columns equal to those bytes); each version
(its content's SHA-256, and the facts of its import/amend event); each signature (the SHA-256 of
the stored record JSON and PDF, and the facts of its sign event); no event naming a version or
signature that is gone. The first problem found is raised as
:class:`~reporting.store.errors.IntegrityFailure`, naming the broken link.

Residual risk: whoever controls the database can rewrite it whole — events, hashes and all —
and the rewritten store verifies. Only a chain head kept outside the store (printed on signed
PDFs, written with exports; checked with ``--expect-head``) reveals that.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

from sqlalchemy import select

from reporting.store import audit
from reporting.store.canonical import sha256_hex
from reporting.store.engine import Database
from reporting.store.errors import IntegrityFailure, StoreError
from reporting.store.schema import EventRow, SignatureRow, StudyRow, VersionRow
from reporting.store.versions import signature_facts, version_facts

VERSION_ACTIONS = ("import", "save", "amend", "addendum")
MIN_HEAD_PREFIX = 12


@dataclass(frozen=True)
class Verified:
    head: str
    events: int
    versions: int
    signatures: int
    expected_at: int | None  # sequence number of the --expect-head event


def verify(db: Database, expect_head: str | None = None) -> Verified:
    if expect_head is not None:
        expect_head = expect_head.strip().lower()
        if len(expect_head) < MIN_HEAD_PREFIX or any(
            c not in "0123456789abcdef" for c in expect_head
        ):
            raise StoreError(
                "--expect-head", f"give the chain head as hex (at least {MIN_HEAD_PREFIX} digits)"
            )
    with db.read() as session:
        events = session.scalars(select(EventRow).order_by(EventRow.seq)).all()
        head = _chain(db.shown, events)
        by_version = {(e.study_id, e.version, e.action): e for e in events if e.version is not None}
        rows = session.execute(
            select(VersionRow, StudyRow.study_id).join(StudyRow, StudyRow.id == VersionRow.study_pk)
        ).all()
        found = {(sid, v.version) for v, sid in rows}
        for row, sid in rows:
            _version(db.shown, row, sid, by_version)
        signatures = session.execute(
            select(SignatureRow, VersionRow, StudyRow.study_id)
            .join(VersionRow, VersionRow.id == SignatureRow.version_pk)
            .join(StudyRow, StudyRow.id == VersionRow.study_pk)
        ).all()
        signed = {(sid, v.version) for _, v, sid in signatures}
        for sig, row, sid in signatures:
            _signature(db.shown, sig, row, sid, by_version)
        for e in events:
            key = (e.study_id, e.version)
            if e.action in VERSION_ACTIONS and key not in found:
                raise IntegrityFailure(db.shown, f"{audit.describe(e)}: its version row is missing")
            if e.action == "sign" and key not in signed:
                raise IntegrityFailure(
                    db.shown, f"{audit.describe(e)}: its signature row is missing"
                )
    at = None
    if expect_head is not None:
        at = next((e.seq for e in events if e.hash.startswith(expect_head)), None)
        if at is None:
            raise IntegrityFailure(
                db.shown,
                f"the chain does not contain the expected head {expect_head}: the store was "
                "rewritten, or the head is from another store",
            )
    return Verified(head, len(events), len(rows), len(signatures), at)


def _chain(where: str, events: Iterable[EventRow]) -> str:
    prev = audit.GENESIS
    for seq, e in enumerate(events, start=1):
        name = audit.describe(e)
        if e.seq != seq:
            raise IntegrityFailure(where, f"event {seq} is missing (next is {name})")
        if e.prev_hash != prev:
            raise IntegrityFailure(
                where, f"{name}: does not link to event {seq - 1} (previous hash differs)"
            )
        if _hash_of(e.body) != e.hash:
            raise IntegrityFailure(where, f"{name}: its hash does not match its stored bytes")
        body = audit.body_of(e)
        columns = {
            "seq": e.seq,
            "at": e.at,
            "actor": e.actor,
            "action": e.action,
            "study_id": e.study_id,
            "version": e.version,
            "origin": e.origin,
            "host": e.host,
            "prev_hash": e.prev_hash,
        }
        changed = sorted(k for k, v in columns.items() if body.get(k) != v)
        if changed:
            raise IntegrityFailure(
                where, f"{name}: column {', '.join(changed)} differs from the hashed event"
            )
        prev = e.hash
    return prev


def _hash_of(value: Any) -> str | None:
    """SHA-256 of a stored binary column; ``None`` when it no longer holds bytes (a text or number
    written over it outside segreport: altered, whatever it now says)."""
    if not isinstance(value, bytes | bytearray | memoryview):
        return None
    return sha256_hex(bytes(value))


def _differs(facts: dict[str, Any], body: dict[str, Any]) -> list[str]:
    detail = body.get("detail", {})
    return sorted(k for k, v in facts.items() if detail.get(k) != v)


def _version(where: str, row: VersionRow, sid: str, by: dict[Any, EventRow]) -> None:
    name = f"study {sid} version {row.version}"
    if _hash_of(row.content) != row.content_sha256:
        raise IntegrityFailure(where, f"{name}: the stored content does not match its SHA-256")
    event = next((by[k] for a in VERSION_ACTIONS if (k := (sid, row.version, a)) in by), None)
    if event is None:
        raise IntegrityFailure(where, f"{name}: no audit event records it")
    changed = _differs(version_facts(row, sid), audit.body_of(event))
    if changed:
        raise IntegrityFailure(
            where, f"{name}: {', '.join(changed)} differs from {audit.describe(event)}"
        )


def _signature(
    where: str, sig: SignatureRow, row: VersionRow, sid: str, by: dict[Any, EventRow]
) -> None:
    name = f"signature of study {sid} version {row.version}"
    if _hash_of(sig.record_json) != sig.record_sha256:
        raise IntegrityFailure(
            where, f"{name}: the stored record does not match its SHA-256 (altered)"
        )
    if _hash_of(sig.pdf) != sig.pdf_sha256:
        raise IntegrityFailure(
            where, f"{name}: the stored PDF does not match its SHA-256 (altered)"
        )
    event = by.get((sid, row.version, "sign"))
    if event is None:
        raise IntegrityFailure(where, f"{name}: no audit event records it")
    changed = _differs(signature_facts(sig, row), audit.body_of(event))
    if changed:
        raise IntegrityFailure(
            where, f"{name}: {', '.join(changed)} differs from {audit.describe(event)}"
        )
