"""The store's tables (SQLAlchemy 2 declarative models).

``studies`` holds a study's identity (its id and patient, fixed at first import); ``versions`` every
version of it with the canonical study bytes and their SHA-256; ``signatures`` the signed record
JSON and PDF bytes with their SHA-256; ``events`` the append-only audit trail, each row holding the
canonical JSON bytes it was hashed from and the hash of its predecessor. ``users`` (passwords,
lockout) is a table whose rows change, and every change to it is an audited event; so are
``web_sessions`` (signed-in browser sessions, :mod:`reporting.store.sessions`) and ``store_keys``
(random keys the store keeps for itself, e.g. to hash typed user names in the audit trail).
``worklist`` (one row per study, derived from its latest version and signature, rewritten with
every append) and ``assignments`` (the reader a study is assigned to) change too; neither holds
anything the history does not (an assignment is an audit event as well).

Versions, signatures and events (and studies) are append-only in the database as well: the
migrations install triggers refusing UPDATE and DELETE (and TRUNCATE on PostgreSQL), see
:mod:`reporting.store.triggers`.
"""

from __future__ import annotations

from sqlalchemy import (
    Boolean,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

HEX_SHA256 = 64
APPEND_ONLY_TABLES = ("studies", "versions", "signatures", "events")


class Base(DeclarativeBase):
    pass


class User(Base):
    __tablename__ = "users"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(64), unique=True)
    full_name: Mapped[str] = mapped_column(String(200))
    roles: Mapped[str] = mapped_column(String(100))  # comma-separated Role values, sorted
    password_hash: Mapped[str] = mapped_column(String(200))
    must_change_password: Mapped[bool] = mapped_column(Boolean, default=False)
    failed_attempts: Mapped[int] = mapped_column(Integer, default=0)
    locked: Mapped[bool] = mapped_column(Boolean, default=False)
    created_at: Mapped[str] = mapped_column(String(40))
    # UTC ISO time the lock ends; NULL while locked: until an admin unlocks (migration 0003)
    locked_until: Mapped[str | None] = mapped_column(String(40), default=None)


class StudyRow(Base):
    __tablename__ = "studies"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    study_id: Mapped[str] = mapped_column(String(64), unique=True)
    patient_id: Mapped[str | None] = mapped_column(String(64), index=True)
    created_at: Mapped[str] = mapped_column(String(40))


class VersionRow(Base):
    __tablename__ = "versions"
    __table_args__ = (UniqueConstraint("study_pk", "version", name="uq_versions_study_version"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    study_pk: Mapped[int] = mapped_column(ForeignKey("studies.id"), index=True)
    version: Mapped[int] = mapped_column(Integer)
    parent_version: Mapped[int | None] = mapped_column(Integer)
    status: Mapped[str] = mapped_column(String(20))  # VersionStatus at creation
    author: Mapped[str] = mapped_column(String(64))
    created_at: Mapped[str] = mapped_column(String(40))
    reason: Mapped[str | None] = mapped_column(Text)
    content: Mapped[bytes] = mapped_column(LargeBinary)
    content_sha256: Mapped[str] = mapped_column(String(HEX_SHA256))
    study_date: Mapped[str | None] = mapped_column(String(10))
    awaiting_reader: Mapped[bool] = mapped_column(Boolean, default=False)


Index("ix_versions_study_date", VersionRow.study_date)


class WorklistRow(Base):
    """One row per study: its latest version's worklist status (kept by every append; derived)."""

    __tablename__ = "worklist"

    study_pk: Mapped[int] = mapped_column(ForeignKey("studies.id"), primary_key=True)
    status: Mapped[str] = mapped_column(String(20))  # WorklistStatus
    version: Mapped[int] = mapped_column(Integer)
    author: Mapped[str] = mapped_column(String(64))
    updated_at: Mapped[str] = mapped_column(String(40))
    study_date: Mapped[str | None] = mapped_column(String(10))
    awaiting_reader: Mapped[bool] = mapped_column(Boolean, default=False)
    assigned_reader: Mapped[str | None] = mapped_column(String(64))  # as in assignments


Index("ix_worklist_status_date", WorklistRow.status, WorklistRow.study_date)
Index("ix_worklist_date", WorklistRow.study_date)
Index("ix_worklist_reader_date", WorklistRow.assigned_reader, WorklistRow.study_date)


class AssignmentRow(Base):
    """The reader a study is assigned to (changes; every change is an audit event)."""

    __tablename__ = "assignments"

    study_pk: Mapped[int] = mapped_column(ForeignKey("studies.id"), primary_key=True)
    reader: Mapped[str] = mapped_column(String(64), index=True)
    assigned_by: Mapped[str] = mapped_column(String(64))
    assigned_at: Mapped[str] = mapped_column(String(40))


class SignatureRow(Base):
    __tablename__ = "signatures"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    version_pk: Mapped[int] = mapped_column(ForeignKey("versions.id"), unique=True)
    signer: Mapped[str] = mapped_column(String(64))
    signer_name: Mapped[str] = mapped_column(String(200))
    signed_at: Mapped[str] = mapped_column(String(40))
    meaning: Mapped[str] = mapped_column(String(200))
    record_json: Mapped[bytes] = mapped_column(LargeBinary)
    record_sha256: Mapped[str] = mapped_column(String(HEX_SHA256))
    pdf: Mapped[bytes] = mapped_column(LargeBinary)
    pdf_sha256: Mapped[str] = mapped_column(String(HEX_SHA256))
    chain_head: Mapped[str] = mapped_column(String(HEX_SHA256))  # printed on the PDF


class EventRow(Base):
    __tablename__ = "events"

    seq: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=False)
    at: Mapped[str] = mapped_column(String(40))
    actor: Mapped[str | None] = mapped_column(String(64))
    action: Mapped[str] = mapped_column(String(40))
    study_id: Mapped[str | None] = mapped_column(String(64), index=True)
    version: Mapped[int | None] = mapped_column(Integer)
    origin: Mapped[str] = mapped_column(String(10))
    host: Mapped[str] = mapped_column(String(255))
    body: Mapped[bytes] = mapped_column(LargeBinary)  # the canonical JSON that was hashed
    prev_hash: Mapped[str] = mapped_column(String(HEX_SHA256))
    hash: Mapped[str] = mapped_column(String(HEX_SHA256), unique=True)


class WebSessionRow(Base):
    """A signed-in browser session (lab mode); the cookie's token is never stored, only its hash."""

    __tablename__ = "web_sessions"

    token_sha256: Mapped[str] = mapped_column(String(HEX_SHA256), primary_key=True)
    user_name: Mapped[str] = mapped_column(String(64), index=True)
    csrf_sha256: Mapped[str] = mapped_column(String(HEX_SHA256))
    created_at: Mapped[str] = mapped_column(String(40))  # UTC ISO text (sortable)
    last_seen_at: Mapped[str] = mapped_column(String(40))
    address: Mapped[str] = mapped_column(String(64))
    ended_at: Mapped[str | None] = mapped_column(String(40), default=None)
    end_reason: Mapped[str | None] = mapped_column(String(20), default=None)


class StoreKey(Base):
    """A random secret the store made for itself (hex), by purpose."""

    __tablename__ = "store_keys"

    name: Mapped[str] = mapped_column(String(40), primary_key=True)
    key_hex: Mapped[str] = mapped_column(String(128))
    created_at: Mapped[str] = mapped_column(String(40))
