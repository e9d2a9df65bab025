"""Audit: export and check round trips, and tampering — in the database and in the
exported file — found and named, on both backends."""

from __future__ import annotations

import io
from typing import Any

import orjson
import pytest
from records_helpers import decision_input, sha
from sqlalchemy import text

from service.records.audit import check, export, export_lines, verify_decision
from service.records.model import NewDecision
from service.records.signing import Signer
from service.records.store import DecisionStore


def _reverify(problem: Any, answer: Any) -> tuple[bool, str]:
    """A stand-in verifier with a rule one can break: the objective is three times the
    number in the first source's id (the service passes its own verifier here)."""
    expected = 3 * int(problem["sources"][0]["id"].split("-")[1])
    if answer["objective"] == expected:
        return True, "objective checks"
    return False, f"/objective: is {answer['objective']}, the problem gives {expected}"


def _export(store: DecisionStore, signer: Signer, since: str | None = None) -> list[bytes]:
    out = io.BytesIO()
    export(store, signer, out, since)
    return out.getvalue().splitlines()


def _check(lines: list[bytes], signer: Signer) -> list[str]:
    return check(lines, _reverify, signer.public_key_b64).findings


@pytest.fixture
def filled(store: DecisionStore) -> DecisionStore:
    for i in range(12):
        store.append(decision_input(i, caller="alice" if i % 2 else None, full=i != 5))
    return store


def test_round_trip_checks_every_record(filled: DecisionStore, signer: Signer) -> None:
    lines = _export(filled, signer)
    report = check(lines, _reverify, signer.public_key_b64)
    assert report.ok, report.findings
    assert (report.records, report.size, report.reverified) == (12, 12, 11)
    assert report.root_sha256 == filled.head()[1].hex()
    assert lines == list(export_lines(filled, signer))          # byte for byte stable
    for line in lines:
        assert orjson.loads(line) is not None


def test_export_since_checks_the_tail(filled: DecisionStore, signer: Signer,
                                      clock) -> None:  # type: ignore[no-untyped-def]
    clock.advance(days=2)
    since = clock.now.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    for i in range(12, 15):
        filled.append(decision_input(i))
    lines = _export(filled, signer, since)
    header = orjson.loads(lines[0])
    assert header["start"] == 12 and len(header["frontier"]) == 2      # 12 = 8 + 4
    report = check(lines, _reverify, signer.public_key_b64)
    assert report.ok, report.findings
    assert report.records == 3 and report.size == 15


def test_a_wrong_answer_recorded_is_named(store: DecisionStore, signer: Signer) -> None:
    problem, answer = b'{"sources":[{"id":"tech-4","supply":2}]}', b'{"objective":13}'
    bad = store.append(NewDecision("alice", sha(problem), sha(answer), "0.1.0",
                                   problem, answer)).decision
    findings = _check(_export(store, signer), signer)
    assert findings == [f"line 2, record 0 (id {bad.id}): the stored answer fails the "
                        "verifier: /objective: is 13, the problem gives 12"]
    result = verify_decision(store, signer, bad.id, _reverify)
    assert result is not None and not result["valid"]
    assert [c["name"] for c in result["checks"] if not c["passed"]] == ["answer"]


def _sql(store: DecisionStore, statement: str, **params: Any) -> None:
    with store.engine.begin() as conn:
        conn.execute(text(statement), params)


def _flip_byte(store: DecisionStore, column: str, log_index: int) -> None:
    with store.engine.begin() as conn:
        body = bytearray(conn.execute(text(f"SELECT {column} FROM decision_records "
                                           "WHERE log_index = :i"), {"i": log_index}).scalar())
        body[10] ^= 0x01                       # one bit of one byte
        conn.execute(text(f"UPDATE decision_records SET {column} = :b WHERE log_index = :i"),
                     {"b": bytes(body), "i": log_index})


def _id(store: DecisionStore, log_index: int) -> str:
    return store.page(limit=1000)[log_index].id  # type: ignore[return-value]


@pytest.mark.parametrize(("column", "digest"), [("answer", "answer"), ("problem", "problem")])
def test_a_changed_byte_in_a_stored_body_is_named(filled: DecisionStore, signer: Signer,
                                                  column: str, digest: str) -> None:
    victim = _id(filled, 7)
    _flip_byte(filled, column, 7)
    findings = _check(_export(filled, signer), signer)
    assert len(findings) == 1
    assert findings[0].startswith(f"line 9, record 7 (id {victim}): the stored {digest} ")
    result = verify_decision(filled, signer, victim, _reverify)
    assert result is not None and not result["valid"]
    failed = [c for c in result["checks"] if not c["passed"]]
    assert [c["name"] for c in failed] == [f"{digest}_digest"]
    assert "it was changed" in failed[0]["detail"]


def test_a_deleted_row_is_named(filled: DecisionStore, signer: Signer) -> None:
    _sql(filled, "DELETE FROM decision_records WHERE log_index = 4")
    findings = _check(_export(filled, signer), signer)
    assert findings[0].startswith("line 6, record 5 ")
    assert "record 4 missing before it" in findings[0]
    assert "checkpoint covers 12 records" in findings[-1]
    # the neighbours still prove their inclusion from the stored nodes; the lost leaf's
    # own proof path is gone for those that need it
    neighbour = verify_decision(filled, signer, _id(filled, 4), _reverify)   # now record 5
    assert neighbour is not None
    assert {c["name"]: c["passed"] for c in neighbour["checks"]}["inclusion"] is False


def test_two_swapped_rows_are_named(filled: DecisionStore, signer: Signer) -> None:
    a, b = _id(filled, 2), _id(filled, 3)
    _sql(filled, "UPDATE decision_records SET log_index = 1000 WHERE log_index = 2")
    _sql(filled, "UPDATE decision_records SET log_index = 2 WHERE log_index = 3")
    _sql(filled, "UPDATE decision_records SET log_index = 3 WHERE log_index = 1000")
    findings = _check(_export(filled, signer), signer)
    assert findings[0] == (f"line 4, record 2 (id {b}): its decision fields do not hash to "
                           "its stored leaf: the record was changed")
    assert findings[1].startswith(f"line 5, record 3 (id {a}): its decision fields")
    assert findings[-1].startswith("the records do not make up the signed tree")
    for moved in (a, b):
        result = verify_decision(filled, signer, moved, _reverify)
        assert result is not None and not result["valid"]


def test_a_changed_decision_field_is_named(filled: DecisionStore, signer: Signer) -> None:
    victim = _id(filled, 9)
    _sql(filled, "UPDATE decision_records SET caller = 'mallory' WHERE log_index = 9")
    findings = _check(_export(filled, signer), signer)
    assert findings[0] == (f"line 11, record 9 (id {victim}): its decision fields do not "
                           "hash to its stored leaf: the record was changed")
    result = verify_decision(filled, signer, victim)
    assert result is not None
    assert {c["name"]: c["passed"] for c in result["checks"]} == {
        "leaf": False, "problem_digest": True, "answer_digest": True, "checkpoint": True,
        "inclusion": False}


def test_a_record_rewritten_with_its_leaf_breaks_the_signed_root(
        filled: DecisionStore, signer: Signer) -> None:
    before = _export(filled, signer)
    victim = filled.get(_id(filled, 3))
    assert victim is not None
    forged = victim.decision.__class__(**{**victim.decision.to_dict(), "caller": "mallory"})
    with filled.engine.begin() as conn:
        conn.execute(text("UPDATE decision_records SET caller = 'mallory', leaf_sha256 = :h "
                          "WHERE log_index = 3"), {"h": forged.leaf_hash()})
    # the old signed checkpoint no longer matches what the records make up
    lines = _export(filled, signer)[:-1] + before[-1:]
    findings = _check(lines, signer)
    assert findings == ["the records do not make up the signed tree: a record was changed "
                        "together with its stored leaf, or the checkpoint is of another log"]
    result = verify_decision(filled, signer, victim.decision.id)
    assert result is not None and not result["valid"]    # the stored nodes still disagree


@pytest.mark.parametrize(("edit", "named"), [
    (lambda ls: ls[:4] + ls[5:], "line 5, record 4 (id {4}): record 3 missing before it"),
    (lambda ls: ls[:5] + [ls[4]] + ls[5:], "line 6, record 3 (id {3}): log index 3 where 4 was"),
    (lambda ls: ls[:3] + [ls[4], ls[3]] + ls[5:],
     "line 4, record 3 (id {3}): record 2 missing before it"),
    (lambda ls: ls[:-1], "no checkpoint line: the export is truncated"),
    (lambda ls: ls[:-1] + [ls[-1].replace(b'"size":12', b'"size":11')],
     "checkpoint: the signature does not match the size and root"),
    (lambda ls: ls[:7] + [ls[7].replace(b'"objective":', b'"objective":1')] + ls[8:],
     "line 8, record 6 (id {6}): the stored answer does not hash to its digest"),
])
def test_an_edited_export_is_named(filled: DecisionStore, signer: Signer, edit: Any,
                                   named: str) -> None:
    ids = {i: _id(filled, i) for i in range(12)}
    findings = _check(edit(_export(filled, signer)), signer)
    expected = named.format(*[ids[i] for i in range(12)])
    assert any(f.startswith(expected) for f in findings), findings


def test_a_checkpoint_of_another_key_is_refused(filled: DecisionStore, signer: Signer) -> None:
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    other = Signer(Ed25519PrivateKey.generate())
    findings = check(_export(filled, other), _reverify, signer.public_key_b64).findings
    assert findings == ["checkpoint: the checkpoint names a public key other than the "
                        "pinned one"]
    assert check(_export(filled, other), _reverify).ok          # unpinned: its own key


def test_garbage_is_named_not_crashed(signer: Signer) -> None:
    assert check([b"not json"]).findings == [
        "line 1: not the header of a certimatch-decision-log export"]
    header = b'{"export":"certimatch-decision-log","frontier":[],"start":0,"version":1}'
    assert check([header, b"[1,2", b'{"decision":{"id":1}}']).findings == [
        "line 2: not JSON",
        "line 3: not a decision record (a decision has exactly the fields id, recorded_at, "
        "input_sha256, answer_sha256, log_index, service_version, caller)",
        "no checkpoint line: the export is truncated"]
    assert check([header, b'{"checkpoint":[1]}']).findings == [
        "checkpoint: not an object of size, root_sha256, signature, public_key and key_id"]
