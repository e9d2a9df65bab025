"""Reading the log: records, pages, the head, proofs. Nothing here writes."""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from typing import Any

from sqlalchemy import Connection, Engine, func, select, tuple_
from sqlalchemy.exc import DBAPIError
from sqlalchemy.exc import TimeoutError as PoolTimeout

from service.records.errors import LogDamaged, StoreUnavailable
from service.records.merkle import (
    Frontier,
    NodeKey,
    consistency_ranges,
    cover,
    inclusion_ranges,
    range_hash,
)
from service.records.model import Decision, StoredDecision
from service.records.signing import Checkpoint, Signer
from service.records.tables import decision_records, log_head, log_nodes

__all__ = ["MAX_PAGE", "WRITE", "LogReader", "decision_columns", "row_decision", "split"]

#: Execution option that makes a transaction an appender (SQLite: BEGIN IMMEDIATE).
WRITE = "certimatch_write"
#: Largest page of GET /v1/decisions.
MAX_PAGE = 1000


def decision_columns() -> tuple[Any, ...]:
    c = decision_records.c
    return (c.id, c.recorded_at, c.input_sha256, c.answer_sha256, c.log_index,
            c.service_version, c.caller)


def row_decision(row: Any) -> Decision:
    return Decision(row.id, row.recorded_at, row.input_sha256, row.answer_sha256,
                    int(row.log_index), row.service_version, row.caller)


def split(frontier: bytes) -> list[bytes]:
    """The 32-byte hashes of a stored frontier."""
    return [frontier[i:i + 32] for i in range(0, len(frontier), 32)]


def _stored(row: Any) -> StoredDecision:
    return StoredDecision(row_decision(row), bytes(row.leaf_sha256), row.mode,
                          None if row.problem is None else bytes(row.problem),
                          None if row.answer is None else bytes(row.answer), row.pruned_at)


def _reason(error: Exception) -> str:
    """The driver's first line, without SQLAlchemy's statement and link."""
    orig = getattr(error, "orig", None) or error
    text = str(orig).strip()
    return text.splitlines()[0] if text else type(orig).__name__


class LogReader:
    """Read access to the log over one engine."""

    def __init__(self, engine: Engine) -> None:
        self.engine = engine

    @contextmanager
    def _transaction(self, write: bool = False) -> Iterator[Connection]:
        """One transaction; database errors leave it rolled back as StoreUnavailable."""
        try:
            with self.engine.connect() as conn:
                if write:
                    conn = conn.execution_options(**{WRITE: True})
                with conn.begin():
                    yield conn
        except (DBAPIError, PoolTimeout) as e:
            raise StoreUnavailable(f"the decision store is unavailable: {_reason(e)}") from e

    def head(self) -> tuple[int, bytes]:
        """The log's size and root hash."""
        with self._transaction() as conn:
            return self._head(conn)

    def _head(self, conn: Connection) -> tuple[int, bytes]:
        row = conn.execute(select(log_head.c.size, log_head.c.frontier)
                           .where(log_head.c.id == 1)).one()
        frontier = Frontier(int(row.size), split(bytes(row.frontier)))
        return frontier.size, frontier.root()

    def checkpoint(self, signer: Signer) -> Checkpoint:
        """The latest signed checkpoint."""
        return signer.sign(*self.head())

    def get(self, decision_id: str) -> StoredDecision | None:
        """A record by decision id, or None."""
        with self._transaction() as conn:
            row = conn.execute(select(decision_records)
                               .where(decision_records.c.id == decision_id)).one_or_none()
        return None if row is None else _stored(row)

    def page(self, after: str | None = None, limit: int = 100,
             caller: str | None = None) -> list[Decision]:
        """Decisions in log order (ascending ``log_index``), those after the decision
        ``after`` (exclusive), of one caller if given. LookupError for an unknown
        ``after``; ValueError for a limit outside 1..MAX_PAGE."""
        if not 1 <= limit <= MAX_PAGE:
            raise ValueError(f"limit must be a whole number from 1 to {MAX_PAGE}")
        query = select(*decision_columns()).order_by(decision_records.c.log_index)
        with self._transaction() as conn:
            if after is not None:
                start = conn.execute(select(decision_records.c.log_index)
                                     .where(decision_records.c.id == after)).scalar()
                if start is None:
                    raise LookupError(f"no decision has the id {after!r}")
                query = query.where(decision_records.c.log_index > start)
            if caller is not None:
                query = query.where(decision_records.c.caller == caller)
            rows = conn.execute(query.limit(limit)).all()
        return [row_decision(r) for r in rows]

    def newest(self, before: int | None = None, limit: int = 50, caller: str | None = None,
               since: str | None = None, until: str | None = None
               ) -> list[tuple[Decision, bytes | None]]:
        """Decisions newest first (descending ``log_index``) with their stored answers
        (None when not kept): those below the log index ``before``, of one caller, recorded
        at or after ``since`` and before ``until`` (RFC 3339 text), when given. For the
        audit page; ValueError for a limit outside 1..MAX_PAGE."""
        if not 1 <= limit <= MAX_PAGE:
            raise ValueError(f"limit must be a whole number from 1 to {MAX_PAGE}")
        c = decision_records.c
        query = select(*decision_columns(), c.answer).order_by(c.log_index.desc())
        if before is not None:
            query = query.where(c.log_index < before)
        if caller is not None:
            query = query.where(c.caller == caller)
        if since is not None:
            query = query.where(c.recorded_at >= since)
        if until is not None:
            query = query.where(c.recorded_at < until)
        with self._transaction() as conn:
            rows = conn.execute(query.limit(limit)).all()
        return [(row_decision(r), None if r.answer is None else bytes(r.answer)) for r in rows]

    def inclusion_proof(self, log_index: int, size: int) -> list[bytes]:
        """RFC 9162 inclusion proof of the leaf at ``log_index`` in the tree of ``size``."""
        with self._transaction() as conn:
            self._within(conn, size)
            ranges = inclusion_ranges(log_index, size)
            nodes = self._nodes(conn, (key for r in ranges for key in cover(*r)))
        return [range_hash(lo, hi, nodes) for lo, hi in ranges]

    def consistency_proof(self, old: int, new: int) -> list[bytes]:
        """RFC 9162 consistency proof between tree sizes ``old`` and ``new``."""
        with self._transaction() as conn:
            self._within(conn, new)
            if old == new or old == 0:
                return []
            ranges = consistency_ranges(old, new)
            nodes = self._nodes(conn, (key for r in ranges for key in cover(*r)))
        return [range_hash(lo, hi, nodes) for lo, hi in ranges]

    def frontier_at(self, size: int) -> list[bytes]:
        """The perfect subtrees that make up the first ``size`` leaves, largest first."""
        with self._transaction() as conn:
            self._within(conn, size)
            keys = cover(0, size)
            nodes = self._nodes(conn, keys)
        return [nodes[k] for k in keys]

    def first_index_since(self, recorded_at: str) -> int:
        """The log index of the first record at or after an RFC 3339 time (the size when
        there is none)."""
        with self._transaction() as conn:
            found = conn.execute(select(func.min(decision_records.c.log_index))
                                 .where(decision_records.c.recorded_at >= recorded_at)).scalar()
            return int(found) if found is not None else self._head(conn)[0]

    def records(self, start: int = 0, stop: int | None = None,
                batch: int = 500) -> Iterator[StoredDecision]:
        """Stored records with ``start <= log_index < stop`` in log order, read in batches
        of short transactions (a long export never holds the database)."""
        while stop is None or start < stop:
            query = (select(decision_records).where(decision_records.c.log_index >= start)
                     .order_by(decision_records.c.log_index).limit(batch))
            if stop is not None:
                query = query.where(decision_records.c.log_index < stop)
            with self._transaction() as conn:
                rows = conn.execute(query).all()
            if not rows:
                return
            for row in rows:
                yield _stored(row)
            start = int(rows[-1].log_index) + 1

    def beyond_head(self, limit: int = MAX_PAGE) -> list[StoredDecision]:
        """Records at or past the head's size. An append moves the head in the same
        transaction as it writes its record, so these were added by hand; one statement,
        so one snapshot of both tables even under concurrent appends."""
        c = decision_records.c
        size = select(log_head.c.size).where(log_head.c.id == 1).scalar_subquery()
        query = (select(decision_records).where(c.log_index >= size)
                 .order_by(c.log_index).limit(limit))
        with self._transaction() as conn:
            return [_stored(r) for r in conn.execute(query).all()]

    def _within(self, conn: Connection, size: int) -> None:
        current = self._head(conn)[0]
        if not 0 <= size <= current:
            raise ValueError(f"tree size must be a whole number from 0 to {current}")

    def _nodes(self, conn: Connection, keys: Iterable[NodeKey]) -> dict[NodeKey, bytes]:
        """The stored hashes of perfect nodes: leaves from the records, the rest from
        log_nodes. LogDamaged when one is missing."""
        wanted = set(keys)
        leaves = sorted(i for level, i in wanted if level == 0)
        upper = sorted(k for k in wanted if k[0] > 0)
        found: dict[NodeKey, bytes] = {}
        if leaves:
            rows = conn.execute(select(decision_records.c.log_index,
                                       decision_records.c.leaf_sha256)
                                .where(decision_records.c.log_index.in_(leaves)))
            found.update({(0, int(r.log_index)): bytes(r.leaf_sha256) for r in rows})
        if upper:
            rows = conn.execute(select(log_nodes.c.level, log_nodes.c.idx, log_nodes.c.hash)
                                .where(tuple_(log_nodes.c.level, log_nodes.c.idx).in_(upper)))
            found.update({(int(r.level), int(r.idx)): bytes(r.hash) for r in rows})
        missing = wanted - set(found)
        if missing:
            shown = ", ".join(f"level {lv} index {i}" for lv, i in sorted(missing)[:5])
            raise LogDamaged(f"the decision log lacks stored nodes ({shown}): rows were "
                             "deleted; run certimatch audit check")
        return found
