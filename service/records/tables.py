"""The tables of the decision store (SQLAlchemy Core), as the first migration creates them.

``decision_records``
    One row per decision, written once. ``log_index`` is its place in the log (from 0,
    gap-free, given under the log lock). The seven fields of the ``decision`` object are
    stored as they were hashed into the leaf (``recorded_at`` as its RFC 3339 text, fixed
    width, so text order is time order); ``leaf_sha256`` is SHA-256(0x00 || leaf).
    ``problem`` and ``answer`` hold RFC 8785 canonical JSON, NULL under ``digest`` mode
    and after retention has removed them (``pruned_at`` says when). Retention's removal of
    bodies is the only change a row ever sees.
``log_nodes``
    The hash of every perfect subtree of level >= 1 (level 0 is ``leaf_sha256``), written
    once when its last leaf arrives: proofs and roots need O(log n) of them.
``log_head``
    One row (``id`` = 1): the log's size and its frontier (the perfect subtrees along its
    right edge, concatenated). Every append locks this row first, which is what puts all
    appends of all processes and replicas in one order.
``idempotency_keys``
    The response sent for a caller's ``Idempotency-Key``, with the digest of the body it
    answered, until ``expires_at``. ``caller`` is '' for an unauthenticated service.
"""

from __future__ import annotations

from sqlalchemy import (
    BigInteger,
    CheckConstraint,
    Column,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    MetaData,
    String,
    Table,
)

__all__ = ["decision_records", "idempotency_keys", "log_head", "log_nodes", "metadata"]

metadata = MetaData()

decision_records = Table(
    "decision_records", metadata,
    Column("log_index", BigInteger, primary_key=True, autoincrement=False),
    Column("id", String(36), nullable=False, unique=True),
    Column("recorded_at", String(27), nullable=False),
    Column("caller", String(200), nullable=True),
    Column("input_sha256", String(64), nullable=False),
    Column("answer_sha256", String(64), nullable=False),
    Column("service_version", String(100), nullable=False),
    Column("leaf_sha256", LargeBinary(32), nullable=False),
    Column("mode", String(8), nullable=False),
    Column("problem", LargeBinary, nullable=True),
    Column("answer", LargeBinary, nullable=True),
    Column("pruned_at", String(27), nullable=True),
    CheckConstraint("log_index >= 0", name="ck_decision_records_log_index"),
    CheckConstraint("mode IN ('full', 'digest')", name="ck_decision_records_mode"),
)
Index("ix_decision_records_caller", decision_records.c.caller, decision_records.c.log_index)
Index("ix_decision_records_recorded_at", decision_records.c.recorded_at)

log_nodes = Table(
    "log_nodes", metadata,
    Column("level", Integer, primary_key=True, autoincrement=False),
    Column("idx", BigInteger, primary_key=True, autoincrement=False),
    Column("hash", LargeBinary(32), nullable=False),
    CheckConstraint("level >= 1", name="ck_log_nodes_level"),
)

log_head = Table(
    "log_head", metadata,
    Column("id", Integer, primary_key=True, autoincrement=False),
    Column("size", BigInteger, nullable=False),
    Column("frontier", LargeBinary, nullable=False),
    CheckConstraint("id = 1", name="ck_log_head_single_row"),
)

idempotency_keys = Table(
    "idempotency_keys", metadata,
    Column("caller", String(200), primary_key=True),
    Column("key", String(255), primary_key=True),
    Column("input_sha256", String(64), nullable=False),
    Column("decision_id", String(36), ForeignKey("decision_records.id"), nullable=False),
    Column("response", LargeBinary, nullable=False),
    Column("expires_at", String(27), nullable=False),
)
Index("ix_idempotency_keys_expires_at", idempotency_keys.c.expires_at)
