"""Lab mode: signed-in browser sessions, time-limited lockout and the store's own random keys.

``web_sessions`` holds server-side sessions (only the SHA-256 of the cookie's token and of the
session's CSRF token); ``users.locked_until`` makes a lockout end by itself; ``store_keys`` keeps
random keys the store makes for itself (one keys the hash of a mistyped user name in the audit
trail, one derives each session's CSRF token). No append-only table is touched, so no trigger
is removed or installed here.

Revision ID: 0003_web_sessions
Revises: 0002
Create Date: 2026-12-02
"""

from __future__ import annotations

import datetime as dt
import secrets

import sqlalchemy as sa
from alembic import op

revision = "0003_web_sessions"
down_revision = "0002"
branch_labels = None
depends_on = None

KEYS = ("audit_name_hmac", "csrf_hmac")
"""The keys made here (:mod:`reporting.store.sessions` makes any missing one on first use)."""


def upgrade() -> None:
    op.add_column("users", sa.Column("locked_until", sa.String(40), nullable=True))
    op.create_table(
        "web_sessions",
        sa.Column("token_sha256", sa.String(64), primary_key=True),
        sa.Column("user_name", sa.String(64), nullable=False),
        sa.Column("csrf_sha256", sa.String(64), nullable=False),
        sa.Column("created_at", sa.String(40), nullable=False),
        sa.Column("last_seen_at", sa.String(40), nullable=False),
        sa.Column("address", sa.String(64), nullable=False),
        sa.Column("ended_at", sa.String(40), nullable=True),
        sa.Column("end_reason", sa.String(20), nullable=True),
    )
    op.create_index("ix_web_sessions_user_name", "web_sessions", ["user_name"])
    keys = op.create_table(
        "store_keys",
        sa.Column("name", sa.String(40), primary_key=True),
        sa.Column("key_hex", sa.String(128), nullable=False),
        sa.Column("created_at", sa.String(40), nullable=False),
    )
    made = dt.datetime.now(dt.UTC).isoformat(timespec="microseconds")
    op.bulk_insert(
        keys, [{"name": n, "key_hex": secrets.token_hex(32), "created_at": made} for n in KEYS]
    )


def downgrade() -> None:
    raise NotImplementedError("the store's history is append-only; restore a backup instead")
