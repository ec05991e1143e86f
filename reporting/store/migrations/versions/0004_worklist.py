"""The lab's worklist: versions say whether they await a reader, a derived ``worklist`` table holds
each study's latest status (indexed, so a worklist of 100,000 studies is a few index reads), and
``assignments`` the reader a study is assigned to.

SQLite rebuilds the versions table here (a batch migration), which drops its triggers: they are
removed first on both backends and installed again at the end. Existing versions do not await a
reader; the worklist is filled from each study's latest version and its signature.

Revision ID: 0004_worklist
Revises: 0003_web_sessions
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

from reporting.store import triggers

revision = "0004_worklist"
down_revision = "0003_web_sessions"
branch_labels = None
depends_on = None

_FILL = """
INSERT INTO worklist (study_pk, status, version, author, updated_at, study_date, awaiting_reader)
SELECT v.study_pk,
       CASE WHEN s.id IS NULL THEN 'preliminary'
            WHEN v.status = 'preliminary' THEN 'signed'
            ELSE 'amended' END,
       v.version, v.author, COALESCE(s.signed_at, v.created_at), v.study_date, v.awaiting_reader
FROM versions v LEFT JOIN signatures s ON s.version_pk = v.id
WHERE v.version = (SELECT MAX(w.version) FROM versions w WHERE w.study_pk = v.study_pk)
"""


def upgrade() -> None:
    bind = op.get_bind()
    dialect = bind.dialect.name
    triggers.remove(op.execute, dialect, ["versions"])
    with op.batch_alter_table(
        "versions", recreate="always" if dialect == "sqlite" else "auto"
    ) as batch:
        batch.add_column(
            sa.Column("awaiting_reader", sa.Boolean, nullable=False, server_default=sa.false())
        )
    triggers.install(op.execute, dialect, ["versions"])
    op.create_table(
        "worklist",
        sa.Column("study_pk", sa.Integer, sa.ForeignKey("studies.id"), primary_key=True),
        sa.Column("status", sa.String(20), nullable=False),
        sa.Column("version", sa.Integer, nullable=False),
        sa.Column("author", sa.String(64), nullable=False),
        sa.Column("updated_at", sa.String(40), nullable=False),
        sa.Column("study_date", sa.String(10)),
        sa.Column("awaiting_reader", sa.Boolean, nullable=False),
        sa.Column("assigned_reader", sa.String(64)),
    )
    op.create_index("ix_worklist_status_date", "worklist", ["status", "study_date"])
    op.create_index("ix_worklist_date", "worklist", ["study_date"])
    op.create_index("ix_worklist_reader_date", "worklist", ["assigned_reader", "study_date"])
    op.create_table(
        "assignments",
        sa.Column("study_pk", sa.Integer, sa.ForeignKey("studies.id"), primary_key=True),
        sa.Column("reader", sa.String(64), nullable=False),
        sa.Column("assigned_by", sa.String(64), nullable=False),
        sa.Column("assigned_at", sa.String(40), nullable=False),
    )
    op.create_index("ix_assignments_reader", "assignments", ["reader"])
    op.execute(_FILL)


def downgrade() -> None:
    raise NotImplementedError("the store's history is append-only; restore a backup instead")
