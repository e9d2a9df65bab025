"""The decision store on SQLite and PostgreSQL: schema, appends, reads, proofs,
idempotency, retention, failures. Leaves and roots are recomputed outside the store (the
rfc8785 package for the leaf bytes, an in-memory RFC 9162 tree for the root)."""

from __future__ import annotations

import hashlib

import pytest
import rfc8785
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from records_helpers import Clock, decision_input, sha
from sqlalchemy import select, text

from service.records.errors import IdempotencyKeyReused, SchemaNotCurrent, StoreUnavailable
from service.records.merkle import MemoryTree, verify_consistency, verify_inclusion
from service.records.migrate import require_current, schema_status, upgrade
from service.records.model import DECISION_FIELDS, NewDecision
from service.records.store import DecisionStore, make_engine
from service.records.tables import decision_records, metadata


def _fill(store: DecisionStore, n: int, **kwargs) -> list:
    return [store.append(decision_input(i, **kwargs)).decision for i in range(n)]


def test_schema_is_refused_until_upgraded(database_url: str) -> None:
    engine = make_engine(database_url)
    status = schema_status(engine)
    assert status.current is None and not status.at_head
    with pytest.raises(SchemaNotCurrent, match=r"run `certimatch db upgrade`"):
        require_current(engine)
    assert upgrade(engine).at_head
    assert upgrade(engine).at_head                 # a second upgrade changes nothing
    require_current(engine)
    with engine.begin() as conn:
        # the migration creates exactly the tables the code uses
        assert compare_metadata(MigrationContext.configure(conn), metadata) == []
        conn.execute(text("UPDATE alembic_version SET version_num = 'ffff'"))
    with pytest.raises(SchemaNotCurrent, match="ffff, which this version does not know"):
        require_current(engine)
    engine.dispose()


def test_appends_are_numbered_from_zero_and_leaves_are_rfc8785(store: DecisionStore) -> None:
    decisions = _fill(store, 13)
    assert [d.log_index for d in decisions] == list(range(13))
    assert len({d.id for d in decisions}) == 13
    assert [d.recorded_at for d in decisions] == sorted(d.recorded_at for d in decisions)
    for d in decisions:
        stored = store.get(d.id)
        assert stored is not None and stored.decision == d
        assert set(d.to_dict()) == set(DECISION_FIELDS)
        # the leaf is the RFC 8785 JSON of the seven fields (independent implementation)
        assert stored.leaf_sha256 == hashlib.sha256(b"\x00" + rfc8785.dumps(d.to_dict())).digest()
        assert all(ok for _, ok, _ in stored.body_checks())


def test_root_and_proofs_match_an_independent_tree(store: DecisionStore) -> None:
    decisions = _fill(store, 21)
    leaves = [hashlib.sha256(b"\x00" + rfc8785.dumps(d.to_dict())).digest() for d in decisions]
    tree = MemoryTree(leaves)
    size, root = store.head()
    assert (size, root) == (21, tree.root())
    for n in (1, 2, 5, 8, 13, 21):
        for i in range(n):
            proof = store.inclusion_proof(i, n)
            assert proof == tree.inclusion_proof(i, n)
            assert verify_inclusion(leaves[i], i, n, proof, tree.root(n))
        for old in range(0, n + 1):
            proof = store.consistency_proof(old, n)
            assert verify_consistency(old, n, tree.root(old), tree.root(n), proof)
    with pytest.raises(ValueError, match="tree size must be a whole number from 0 to 21"):
        store.inclusion_proof(0, 22)


def test_pages_in_log_order(store: DecisionStore) -> None:
    ds = [store.append(decision_input(i, caller="alice" if i % 3 else "bob")).decision
          for i in range(10)]
    assert store.page(limit=4) == ds[:4]
    assert store.page(after=ds[3].id, limit=100) == ds[4:]
    assert store.page(caller="bob") == [d for d in ds if d.caller == "bob"]
    assert store.page(after=ds[3].id, caller="bob") == [ds[6], ds[9]]
    with pytest.raises(LookupError, match="no decision has the id 'nope'"):
        store.page(after="nope")
    for bad in (0, 1001):
        with pytest.raises(ValueError, match="limit must be a whole number from 1 to 1000"):
            store.page(limit=bad)


def test_digest_mode_keeps_no_bodies(store: DecisionStore) -> None:
    d = store.append(decision_input(1, full=False)).decision
    stored = store.get(d.id)
    assert stored is not None and stored.mode == "digest"
    assert stored.problem is None and stored.answer is None
    assert all(ok for _, ok, _ in stored.body_checks())
    with pytest.raises(ValueError, match="give both the problem and the answer"):
        NewDecision(None, sha(b"a"), sha(b"b"), "0.1.0", b"{}", None)


@pytest.mark.parametrize(("fields", "message"), [
    ({"caller": "x" * 201}, "caller must be 1 to 200 characters"),
    ({"caller": ""}, "caller must be 1 to 200 characters"),
    ({"service_version": "v" * 101}, "service_version must be 1 to 100 characters"),
    ({"input_sha256": "AB" * 32}, "input_sha256 must be 64 lower-case hex digits"),
])
def test_new_decisions_are_checked_alike_on_every_backend(fields: dict, message: str) -> None:
    base = {"caller": "alice", "input_sha256": sha(b"p"), "answer_sha256": sha(b"a"),
            "service_version": "0.1.0"}
    with pytest.raises(ValueError, match=message):
        NewDecision(**{**base, **fields})


def test_idempotency_keys_are_bounded(store: DecisionStore) -> None:
    for key in ("", "k" * 256):
        with pytest.raises(ValueError, match="1 to 255 characters"):
            store.append(decision_input(1), idempotency_key=key, render=lambda d: b"")
        with pytest.raises(ValueError, match="1 to 255 characters"):
            store.replay("alice", key, sha(b"x"))
    assert store.head()[0] == 0


def test_an_unrecorded_decision_has_no_id_nor_index() -> None:
    from service.records.model import Decision
    d = Decision.unrecorded(sha(b"p"), sha(b"a"), "0.1.0", None)
    assert d.id is None and d.log_index is None and d.recorded_at.endswith("Z")
    assert set(d.to_dict()) == set(DECISION_FIELDS)


def test_idempotency_key_replays_the_same_bytes(store: DecisionStore, clock: Clock) -> None:
    render = lambda d: rfc8785.dumps({"answer": 1, "decision": d.to_dict()})  # noqa: E731
    first = store.append(decision_input(1), idempotency_key="k-1", render=render)
    again = store.append(decision_input(1), idempotency_key="k-1", render=render)
    assert again.replayed and again.decision == first.decision
    assert again.response == first.response
    assert store.replay("alice", "k-1", decision_input(1).input_sha256) == again
    assert store.head()[0] == 1                            # nothing new recorded
    with pytest.raises(IdempotencyKeyReused) as reused:
        store.append(decision_input(2), idempotency_key="k-1", render=render)
    assert reused.value.status == 422
    assert reused.value.problem()["type"].endswith(":idempotency-key-reused")
    with pytest.raises(IdempotencyKeyReused):
        store.replay("alice", "k-1", decision_input(2).input_sha256)
    # keys are per caller
    other = store.append(decision_input(1, caller="bob"), idempotency_key="k-1", render=render)
    assert not other.replayed and other.decision.log_index == 1
    # and expire after 24 hours
    clock.advance(hours=24, seconds=1)
    assert store.replay("alice", "k-1", decision_input(2).input_sha256) is None
    fresh = store.append(decision_input(2), idempotency_key="k-1", render=render)
    assert not fresh.replayed and fresh.decision.log_index == 2
    clock.advance(hours=25)
    assert store.purge_idempotency() == 2


def test_failure_inside_an_append_leaves_nothing(store: DecisionStore) -> None:
    _fill(store, 3)
    before = store.head()

    def broken(decision):
        raise RuntimeError("the response could not be made")

    with pytest.raises(RuntimeError):
        store.append(decision_input(9), idempotency_key="k", render=broken)
    assert store.head() == before
    with store.engine.connect() as conn:
        assert conn.execute(select(decision_records.c.log_index)).scalars().all() == [0, 1, 2]
    assert store.append(decision_input(9)).decision.log_index == 3


def test_retention_removes_bodies_and_keeps_the_log(store: DecisionStore, clock: Clock) -> None:
    old = _fill(store, 5)
    clock.advance(days=31)
    young = store.append(decision_input(7)).decision
    root = store.head()
    assert store.prune(older_than_days=30, batch=2) == 5      # in three transactions
    assert store.prune(older_than_days=30) == 0            # once only
    for d in old:
        stored = store.get(d.id)
        assert stored is not None and stored.problem is None and stored.answer is None
        assert stored.pruned_at is not None
        assert all(ok for _, ok, detail in stored.body_checks())
    kept = store.get(young.id)
    assert kept is not None and kept.problem is not None
    assert store.head() == root                             # leaves and root unchanged
    with pytest.raises(ValueError, match="at least 1"):
        store.prune(0)


def test_unreachable_database_is_503_store_unavailable() -> None:
    engine = make_engine("postgresql+psycopg://postgres@127.0.0.1:1/test",
                         connect_args={"connect_timeout": 2})
    store = DecisionStore(engine)
    with pytest.raises(StoreUnavailable) as caught:
        store.append(decision_input(1))
    problem = caught.value.problem()
    assert problem["status"] == 503 and problem["type"].endswith(":store-unavailable")
    with pytest.raises(StoreUnavailable):
        schema_status(engine)


def test_a_held_log_lock_times_out_as_unavailable_and_writes_nothing(database_url: str) -> None:
    engine = make_engine(database_url, lock_timeout_s=0.5)
    upgrade(engine)
    store = DecisionStore(engine)
    store.append(decision_input(0))
    holder = DecisionStore(make_engine(database_url))

    def hold(decision):
        with pytest.raises(StoreUnavailable):               # the other appender gives up
            store.append(decision_input(2))
        return b"{}"

    holder.append(decision_input(1), idempotency_key="k", render=hold)
    assert store.head()[0] == 2
    assert [d.log_index for d in store.page()] == [0, 1]
    holder.engine.dispose()
    engine.dispose()


def test_unknown_backend_is_refused() -> None:
    with pytest.raises(ValueError, match="must name sqlite or postgresql, not mysql"):
        make_engine("mysql://root@127.0.0.1/test")
