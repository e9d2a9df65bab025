"""The decision log: records, Merkle nodes, the log head and idempotency keys.

Revision ID: 0001
Revises:
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "decision_records",
        sa.Column("log_index", sa.BigInteger(), autoincrement=False, nullable=False),
        sa.Column("id", sa.String(36), nullable=False),
        sa.Column("recorded_at", sa.String(27), nullable=False),
        sa.Column("caller", sa.String(200), nullable=True),
        sa.Column("input_sha256", sa.String(64), nullable=False),
        sa.Column("answer_sha256", sa.String(64), nullable=False),
        sa.Column("service_version", sa.String(100), nullable=False),
        sa.Column("leaf_sha256", sa.LargeBinary(32), nullable=False),
        sa.Column("mode", sa.String(8), nullable=False),
        sa.Column("problem", sa.LargeBinary(), nullable=True),
        sa.Column("answer", sa.LargeBinary(), nullable=True),
        sa.Column("pruned_at", sa.String(27), nullable=True),
        sa.CheckConstraint("log_index >= 0", name="ck_decision_records_log_index"),
        sa.CheckConstraint("mode IN ('full', 'digest')", name="ck_decision_records_mode"),
        sa.PrimaryKeyConstraint("log_index"),
        sa.UniqueConstraint("id"),
    )
    op.create_index("ix_decision_records_caller", "decision_records",
                    ["caller", "log_index"])
    op.create_index("ix_decision_records_recorded_at", "decision_records", ["recorded_at"])
    op.create_table(
        "log_nodes",
        sa.Column("level", sa.Integer(), autoincrement=False, nullable=False),
        sa.Column("idx", sa.BigInteger(), autoincrement=False, nullable=False),
        sa.Column("hash", sa.LargeBinary(32), nullable=False),
        sa.CheckConstraint("level >= 1", name="ck_log_nodes_level"),
        sa.PrimaryKeyConstraint("level", "idx"),
    )
    head = op.create_table(
        "log_head",
        sa.Column("id", sa.Integer(), autoincrement=False, nullable=False),
        sa.Column("size", sa.BigInteger(), nullable=False),
        sa.Column("frontier", sa.LargeBinary(), nullable=False),
        sa.CheckConstraint("id = 1", name="ck_log_head_single_row"),
        sa.PrimaryKeyConstraint("id"),
    )
    op.bulk_insert(head, [{"id": 1, "size": 0, "frontier": b""}])
    op.create_table(
        "idempotency_keys",
        sa.Column("caller", sa.String(200), nullable=False),
        sa.Column("key", sa.String(255), nullable=False),
        sa.Column("input_sha256", sa.String(64), nullable=False),
        sa.Column("decision_id", sa.String(36), nullable=False),
        sa.Column("response", sa.LargeBinary(), nullable=False),
        sa.Column("expires_at", sa.String(27), nullable=False),
        sa.ForeignKeyConstraint(["decision_id"], ["decision_records.id"]),
        sa.PrimaryKeyConstraint("caller", "key"),
    )
    op.create_index("ix_idempotency_keys_expires_at", "idempotency_keys", ["expires_at"])


def downgrade() -> None:
    # A decision log is not dropped by a downgrade: its records are the audit trail.
    raise RuntimeError("the decision log cannot be downgraded; restore a backup instead")
