"""Versions keep their study date, indexed: the prior-study lookup is one indexed query.

SQLite rebuilds the versions table here (a batch migration), which drops its triggers: they are
removed first on both backends and installed again at the end.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02
"""

from __future__ import annotations

import json

import sqlalchemy as sa
from alembic import op

from reporting.store import triggers

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None


def upgrade() -> None:
    bind = op.get_bind()
    dialect = bind.dialect.name
    triggers.remove(op.execute, dialect, ["versions"])
    # SQLite rebuilds the table (as any batch migration that alters columns does); PostgreSQL alters it
    with op.batch_alter_table(
        "versions", recreate="always" if dialect == "sqlite" else "auto"
    ) as batch:
        batch.add_column(sa.Column("study_date", sa.String(10)))
    rows = bind.execute(sa.text("SELECT id, content FROM versions")).all()
    for pk, content in rows:
        date = json.loads(bytes(content))["study"]["study"]["date"]
        bind.execute(
            sa.text("UPDATE versions SET study_date = :d WHERE id = :pk"), {"d": date, "pk": pk}
        )
    op.create_index("ix_versions_study_date", "versions", ["study_date"])
    triggers.install(op.execute, dialect, ["versions"])


def downgrade() -> None:
    raise NotImplementedError("the store's history is append-only; restore a backup instead")
