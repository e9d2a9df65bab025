"""The decision store: an append-only log of decisions in one total order.

The pipeline calls it through a small interface (:class:`DecisionStore`): ``replay`` an
``Idempotency-Key`` before solving, ``append`` after, and the read methods for the log
endpoints. Nothing above it sees SQLAlchemy.

One order, whole or nothing
---------------------------
Every append is one transaction that first takes the log's lock, then reads the log's
size and frontier, writes the record at ``log_index = size`` with its leaf hash, the
Merkle nodes the leaf completes, the idempotency key if any, and the new head. On
PostgreSQL the lock is ``SELECT … FOR UPDATE`` on the single ``log_head`` row, on SQLite
the database's write lock taken by ``BEGIN IMMEDIATE``; either way a second appender
(another worker, another replica) waits for the first to commit, so log indexes are
given gap-free in commit order. A crash or ``kill -9`` before the commit leaves nothing
(the database rolls the transaction back); after it, all of it.

SQLite runs in WAL mode (readers never wait for the writer) with
``synchronous=FULL`` (a committed decision survives a power cut, not only a crash: its
caller was told its ``log_index``) and a busy timeout, so appenders queue rather than
fail. Any database error becomes :class:`StoreUnavailable` (503), with nothing written.

Retention
---------
:meth:`DecisionStore.prune` is the only statement that changes a record: it sets
``problem`` and ``answer`` to NULL (and ``pruned_at``) on records older than the cut-off.
The seven decision fields and the leaf hash stay, so every proof and every check of the
log still holds; only the re-verification of those answers is no longer possible.
"""

from __future__ import annotations

import uuid
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

from sqlalchemy import Connection, Engine, create_engine, delete, event, insert, select, update
from sqlalchemy.engine import make_url

from service.records.errors import IdempotencyKeyReused, StoreUnavailable
from service.records.merkle import Frontier
from service.records.model import Decision, NewDecision, rfc3339
from service.records.reads import WRITE, LogReader, decision_columns, row_decision, split
from service.records.tables import decision_records, idempotency_keys, log_head, log_nodes

__all__ = ["IDEMPOTENCY_TTL", "MAX_IDEMPOTENCY_KEY", "Appended", "DecisionStore",
           "make_engine"]

#: How long an Idempotency-Key is remembered (per caller).
IDEMPOTENCY_TTL = timedelta(hours=24)
#: Longest Idempotency-Key kept (the column's width); the HTTP edge refuses longer ones.
MAX_IDEMPOTENCY_KEY = 255
#: How long an appender waits for the log lock before the store counts as unavailable.
LOCK_TIMEOUT_S = 30


def make_engine(url: str, *, lock_timeout_s: float = LOCK_TIMEOUT_S,
                **options: Any) -> Engine:
    """An engine for the store's URL, set up for the rules above; PostgreSQL goes
    through psycopg 3 whatever driver the URL names. ``lock_timeout_s`` bounds the wait
    for the log lock (then the store answers StoreUnavailable)."""
    parsed = make_url(url)
    if parsed.get_backend_name() == "postgresql":
        parsed = parsed.set(drivername="postgresql+psycopg")
        options.setdefault("pool_pre_ping", True)
        args = options.setdefault("connect_args", {})
        args.setdefault("connect_timeout", 10)
        engine = create_engine(parsed, **options)

        @event.listens_for(engine, "connect")
        def _pg_timeouts(dbapi_connection: Any, record: Any) -> None:
            with dbapi_connection.cursor() as cursor:
                cursor.execute(f"SET lock_timeout = '{int(lock_timeout_s * 1000)}ms'")
            dbapi_connection.commit()

        return engine
    if parsed.get_backend_name() != "sqlite":
        raise ValueError(f"CERTIMATCH_DATABASE_URL must name sqlite or postgresql, "
                         f"not {parsed.get_backend_name()}")
    if parsed.database and parsed.database != ":memory:":
        Path(parsed.database).parent.mkdir(parents=True, exist_ok=True)
    args = options.setdefault("connect_args", {})
    args.setdefault("timeout", lock_timeout_s)
    engine = create_engine(parsed, **options)

    @event.listens_for(engine, "connect")
    def _sqlite_setup(dbapi_connection: Any, record: Any) -> None:
        # Hand transaction control to the "begin" hook below (pysqlite's own BEGIN is
        # deferred and cannot be made IMMEDIATE per transaction).
        dbapi_connection.isolation_level = None
        cursor = dbapi_connection.cursor()
        cursor.execute("PRAGMA journal_mode=WAL")
        cursor.execute("PRAGMA synchronous=FULL")
        cursor.execute("PRAGMA foreign_keys=ON")
        cursor.execute(f"PRAGMA busy_timeout={int(lock_timeout_s * 1000)}")
        cursor.close()

    @event.listens_for(engine, "begin")
    def _sqlite_begin(conn: Connection) -> None:
        immediate = conn.get_execution_options().get(WRITE)
        conn.exec_driver_sql("BEGIN IMMEDIATE" if immediate else "BEGIN")

    return engine


@dataclass(frozen=True)
class Appended:
    """The outcome of an append: the decision and, with an Idempotency-Key, the response
    to send. ``replayed`` is True when the key had already answered this body: then
    nothing new was recorded and ``response`` is the stored one."""

    decision: Decision
    response: bytes | None
    replayed: bool = False


class DecisionStore(LogReader):
    """The log: appends and retention here, reads inherited from :class:`LogReader`."""

    def __init__(self, engine: Engine, *, idempotency_ttl: timedelta = IDEMPOTENCY_TTL,
                 clock: Callable[[], datetime] = lambda: datetime.now(UTC)) -> None:
        super().__init__(engine)
        self.idempotency_ttl = idempotency_ttl
        self.clock = clock

    def append(self, new: NewDecision, *, idempotency_key: str | None = None,
               render: Callable[[Decision], bytes] | None = None) -> Appended:
        """Record one decision at the end of the log.

        With ``idempotency_key``, ``render(decision)`` makes the response bytes, stored
        with the key in the same transaction; a key that answered the same body before
        (and has not expired) returns that response instead and records nothing; one
        that answered a different body raises IdempotencyKeyReused.
        """
        if idempotency_key is not None and render is None:
            raise ValueError("an idempotency key needs render, to store the response")
        _check_key(idempotency_key)
        with self._transaction(write=True) as conn:
            head = conn.execute(select(log_head.c.size, log_head.c.frontier)
                                .where(log_head.c.id == 1).with_for_update()).one()
            now = self.clock()
            if idempotency_key is not None:
                earlier = self._replay(conn, new.caller, idempotency_key, new.input_sha256,
                                       now)
                if earlier is not None:
                    return earlier
            size = int(head.size)
            decision = Decision(str(uuid.uuid4()), rfc3339(now), new.input_sha256,
                                new.answer_sha256, size, new.service_version, new.caller)
            leaf = decision.leaf_hash()
            frontier = Frontier(size, split(bytes(head.frontier)))
            made = frontier.append(leaf)
            conn.execute(insert(decision_records).values(
                log_index=size, id=decision.id, recorded_at=decision.recorded_at,
                caller=new.caller, input_sha256=new.input_sha256,
                answer_sha256=new.answer_sha256, service_version=new.service_version,
                leaf_sha256=leaf, mode=new.mode, problem=new.problem, answer=new.answer))
            if len(made) > 1:
                conn.execute(insert(log_nodes), [{"level": level, "idx": index, "hash": h}
                                                 for level, index, h in made[1:]])
            moved = conn.execute(update(log_head)
                                 .where(log_head.c.id == 1, log_head.c.size == size)
                                 .values(size=size + 1, frontier=b"".join(frontier.hashes)))
            if moved.rowcount != 1:       # only if something bypassed the lock
                raise StoreUnavailable("the decision log moved during an append; "
                                       "nothing was recorded")
            response = None
            if idempotency_key is not None:
                assert render is not None
                response = render(decision)
                conn.execute(insert(idempotency_keys).values(
                    caller=new.caller or "", key=idempotency_key,
                    input_sha256=new.input_sha256, decision_id=decision.id,
                    response=response, expires_at=rfc3339(now + self.idempotency_ttl)))
        return Appended(decision, response)

    def replay(self, caller: str | None, key: str, input_sha256: str) -> Appended | None:
        """The stored answer to a caller's Idempotency-Key for this body, or None when the
        key is new or expired; IdempotencyKeyReused when it answered another body."""
        _check_key(key)
        with self._transaction() as conn:
            return self._replay(conn, caller, key, input_sha256, self.clock(), purge=False)

    def _replay(self, conn: Connection, caller: str | None, key: str, input_sha256: str,
                now: datetime, purge: bool = True) -> Appended | None:
        row = conn.execute(select(idempotency_keys).where(
            idempotency_keys.c.caller == (caller or ""),
            idempotency_keys.c.key == key)).one_or_none()
        if row is None:
            return None
        if row.expires_at <= rfc3339(now):
            if purge:                     # an expired key may be used afresh
                conn.execute(delete(idempotency_keys).where(
                    idempotency_keys.c.caller == (caller or ""),
                    idempotency_keys.c.key == key))
            return None
        if row.input_sha256 != input_sha256:
            raise IdempotencyKeyReused(
                "this Idempotency-Key was used for a different request body; use a new key "
                f"for a new request (keys are remembered for "
                f"{int(self.idempotency_ttl.total_seconds() // 3600)} hours)")
        record = conn.execute(select(*decision_columns()).where(
            decision_records.c.id == row.decision_id)).one()
        return Appended(row_decision(record), bytes(row.response), replayed=True)

    def prune(self, older_than_days: int, batch: int = 1000) -> int:
        """Remove the problem and answer of records older than ``older_than_days`` days,
        keeping their decision fields and leaf; the number of records pruned. Works in
        batches of short transactions, so appends go on in between."""
        if older_than_days < 1:
            raise ValueError("older_than_days must be at least 1")
        now = self.clock()
        cutoff = rfc3339(now - timedelta(days=older_than_days))
        c = decision_records.c
        total = 0
        while True:
            with self._transaction(write=True) as conn:
                due = (select(c.log_index).where(c.recorded_at < cutoff, c.pruned_at.is_(None),
                                                 c.mode == "full")
                       .order_by(c.log_index).limit(batch).scalar_subquery())
                result = conn.execute(update(decision_records).where(c.log_index.in_(due))
                                      .values(problem=None, answer=None,
                                              pruned_at=rfc3339(now)))
            total += int(result.rowcount)
            if result.rowcount < batch:
                return total

    def purge_idempotency(self) -> int:
        """Forget expired Idempotency-Keys; the number forgotten."""
        with self._transaction(write=True) as conn:
            result = conn.execute(delete(idempotency_keys).where(
                idempotency_keys.c.expires_at <= rfc3339(self.clock())))
            return int(result.rowcount)


def _check_key(key: str | None) -> None:
    if key is not None and not 0 < len(key) <= MAX_IDEMPOTENCY_KEY:
        raise ValueError(f"an Idempotency-Key must be 1 to {MAX_IDEMPOTENCY_KEY} characters")
