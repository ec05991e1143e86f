"""The first store schema: users, studies, versions, signatures and the audit events.

Revision ID: 0001
Revises:
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

from reporting.store import triggers

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "users",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("name", sa.String(64), nullable=False, unique=True),
        sa.Column("full_name", sa.String(200), nullable=False),
        sa.Column("roles", sa.String(100), nullable=False),
        sa.Column("password_hash", sa.String(200), nullable=False),
        sa.Column("must_change_password", sa.Boolean, nullable=False),
        sa.Column("failed_attempts", sa.Integer, nullable=False),
        sa.Column("locked", sa.Boolean, nullable=False),
        sa.Column("created_at", sa.String(40), nullable=False),
    )
    op.create_table(
        "studies",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("study_id", sa.String(64), nullable=False, unique=True),
        sa.Column("patient_id", sa.String(64)),
        sa.Column("created_at", sa.String(40), nullable=False),
    )
    op.create_index("ix_studies_patient_id", "studies", ["patient_id"])
    op.create_table(
        "versions",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("study_pk", sa.Integer, sa.ForeignKey("studies.id"), nullable=False),
        sa.Column("version", sa.Integer, nullable=False),
        sa.Column("parent_version", sa.Integer),
        sa.Column("status", sa.String(20), nullable=False),
        sa.Column("author", sa.String(64), nullable=False),
        sa.Column("created_at", sa.String(40), nullable=False),
        sa.Column("reason", sa.Text),
        sa.Column("content", sa.LargeBinary, nullable=False),
        sa.Column("content_sha256", sa.String(64), nullable=False),
        sa.UniqueConstraint("study_pk", "version", name="uq_versions_study_version"),
    )
    op.create_index("ix_versions_study_pk", "versions", ["study_pk"])
    op.create_table(
        "signatures",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column(
            "version_pk", sa.Integer, sa.ForeignKey("versions.id"), nullable=False, unique=True
        ),
        sa.Column("signer", sa.String(64), nullable=False),
        sa.Column("signer_name", sa.String(200), nullable=False),
        sa.Column("signed_at", sa.String(40), nullable=False),
        sa.Column("meaning", sa.String(200), nullable=False),
        sa.Column("record_json", sa.LargeBinary, nullable=False),
        sa.Column("record_sha256", sa.String(64), nullable=False),
        sa.Column("pdf", sa.LargeBinary, nullable=False),
        sa.Column("pdf_sha256", sa.String(64), nullable=False),
        sa.Column("chain_head", sa.String(64), nullable=False),
    )
    op.create_table(
        "events",
        sa.Column("seq", sa.Integer, primary_key=True, autoincrement=False),
        sa.Column("at", sa.String(40), nullable=False),
        sa.Column("actor", sa.String(64)),
        sa.Column("action", sa.String(40), nullable=False),
        sa.Column("study_id", sa.String(64)),
        sa.Column("version", sa.Integer),
        sa.Column("origin", sa.String(10), nullable=False),
        sa.Column("host", sa.String(255), nullable=False),
        sa.Column("body", sa.LargeBinary, nullable=False),
        sa.Column("prev_hash", sa.String(64), nullable=False),
        sa.Column("hash", sa.String(64), nullable=False, unique=True),
    )
    op.create_index("ix_events_study_id", "events", ["study_id"])
    triggers.install(op.execute, op.get_bind().dialect.name)


def downgrade() -> None:
    raise NotImplementedError("the store's history is append-only; restore a backup instead")
