"""The decision store wired into /v1/solve: the ``decision`` object, what is recorded in
each mode, the caller label, the start-up rules and a store that fails; on SQLite and on
PostgreSQL.

Digests are recomputed with the independent ``rfc8785`` package (the reference
implementation of RFC 8785 in Python, by Trail of Bits), never with the service's own
encoder.
"""

from __future__ import annotations

import functools
import hashlib
import io
import json
import urllib.request
from concurrent.futures import ThreadPoolExecutor
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

import pytest
import rfc8785
from servers import clean_app
from sqlalchemy import create_engine, text

import service
import service.http.recording
from service.records.errors import SchemaNotCurrent, StoreUnavailable
from service.records.store import DecisionStore, make_engine

#: scipy.optimize.linear_sum_assignment's docstring example; its optimum is 5.
PROBLEM = {"sources": [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}],
           "sinks": [{"id": "c0"}, {"id": "c1"}, {"id": "c2"}],
           "costs": [[4, 1, 3], [2, 0, 5], [3, 2, 2]]}
#: Fractional costs: the answer holds decimals, whose RFC 8785 form differs from orjson's.
FRACTIONAL = {"sources": [{"id": "depot", "supply": 3}],
              "sinks": [{"id": "shop-a", "demand": 2}, {"id": "shop-b", "demand": 1}],
              "costs": [[1.25, 1e-6]]}
#: The example of the README's "Using it", whose digests its "Decision records" quotes.
PROBLEM_OF_README = {"sources": [{"id": "north", "supply": 2}, {"id": "south", "supply": 1}],
                     "sinks": [{"id": "fridge"}, {"id": "oven"},
                               {"id": "washer", "penalty": 50}],
                     "costs": [[20, 35, 60], [30, 25, None]]}
ROOT = Path(__file__).resolve().parents[2]
FIELDS = {"id", "recorded_at", "input_sha256", "answer_sha256", "log_index",
          "service_version", "caller"}
TOKEN_NAMED = "tok-north-0123456789abcdef"
TOKEN_PLAIN = "tok-south-fedcba9876543210"


def sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def log_size(app: Any) -> int:
    store, _ = app.extensions["certimatch.recorder"].open()
    return store.head()[0]


def solve(client: Any, body: Any = PROBLEM, **headers: str) -> Any:
    return client.post("/v1/solve", data=json.dumps(body), headers=headers,
                       content_type="application/json")


# -- the decision object ---------------------------------------------------------------


@pytest.mark.parametrize("body", [PROBLEM, FRACTIONAL], ids=["whole", "fractional"])
def test_every_answer_carries_its_decision_with_recomputable_digests(make_app, body):
    app = make_app()
    client = app.test_client()
    first, second = solve(client, body), solve(client, body)
    assert first.status_code == second.status_code == 200
    answers = [r.get_json() for r in (first, second)]
    for index, answer in enumerate(answers):
        decision = answer.pop("decision")
        assert set(decision) == FIELDS
        # RFC 8785 canonical JSON, by the rfc8785 package, then SHA-256 (FIPS 180-4)
        assert decision["input_sha256"] == sha(rfc8785.dumps(body))
        assert decision["answer_sha256"] == sha(rfc8785.dumps(answer))
        assert decision["log_index"] == index
        assert decision["service_version"] == service.__version__
        assert decision["caller"] is None              # no tokens configured
        moment = datetime.fromisoformat(decision["recorded_at"])
        assert moment.utcoffset() is not None and moment.utcoffset().total_seconds() == 0
        assert decision["recorded_at"].endswith("Z")
    assert answers[0] == answers[1]
    assert first.get_json()["decision"]["id"] != second.get_json()["decision"]["id"]


def test_the_answer_without_its_decision_is_the_same_bytes(make_app):
    # The determinism promise (README, "Determinism"): the answer comes first, its
    # decision last, and everything before the decision is byte for byte the same.
    client = make_app().test_client()
    bodies = [solve(client).data for _ in range(3)]
    heads = {b.rsplit(b',"decision":', 1)[0] for b in bodies}
    assert len(heads) == 1 and len(set(bodies)) == 3


def test_full_mode_keeps_the_canonical_problem_and_answer(make_app):
    app = make_app()
    response = solve(app.test_client(), FRACTIONAL).get_json()
    decision = response.pop("decision")
    store, _ = app.extensions["certimatch.recorder"].open()
    stored = store.get(decision["id"])
    assert stored is not None and stored.mode == "full"
    assert stored.decision.to_dict() == decision
    assert stored.problem == rfc8785.dumps(FRACTIONAL)
    assert stored.answer == rfc8785.dumps(response)
    assert all(ok for _, ok, _ in stored.body_checks())


def test_digest_mode_keeps_provenance_only(make_app):
    app = make_app(RECORD="digest")
    decision = solve(app.test_client()).get_json()["decision"]
    store, _ = app.extensions["certimatch.recorder"].open()
    stored = store.get(decision["id"])
    assert stored is not None and stored.mode == "digest"
    assert stored.problem is None and stored.answer is None
    assert stored.decision.to_dict() == decision


def test_recording_off_keeps_nothing_and_leaves_id_and_index_null(make_app, database_url):
    app = make_app(RECORD="off")
    answer = solve(app.test_client()).get_json()
    decision = answer.pop("decision")
    assert decision["id"] is None and decision["log_index"] is None
    assert decision["input_sha256"] == sha(rfc8785.dumps(PROBLEM))
    assert decision["answer_sha256"] == sha(rfc8785.dumps(answer))
    assert log_size(app) == 0


def test_an_answer_that_fails_the_check_is_not_recorded(make_app, objective_off_by_one):
    app = make_app()
    response = solve(app.test_client())
    assert response.status_code == 500
    assert response.get_json()["type"].endswith("certificate-failure")
    assert log_size(app) == 0


def test_a_refused_problem_is_not_recorded(make_app):
    app = make_app()
    response = solve(app.test_client(), {"sources": [{"id": "a", "supply": -1}]})
    assert response.status_code == 422
    assert log_size(app) == 0


def test_the_verifier_takes_an_answer_with_its_decision(make_app):
    client = make_app().test_client()
    answer = solve(client).get_json()
    checked = client.post("/v1/verify", json={**PROBLEM, "answer": answer})
    assert checked.status_code == 200 and checked.get_json()["valid"] is True


def test_the_readme_snippet_recomputes_both_digests(make_app, monkeypatch):
    # README, "Decision records": its client-side snippet, run against this app, and the
    # digests it quotes are those of the live answer.
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    section = readme.split("### Decision records", 1)[1].split("\n### ", 1)[0]
    snippet = section.split("```python\n", 1)[1].split("```", 1)[0]
    client = make_app().test_client()
    seen: list[Any] = []

    def urlopen(request: Any) -> io.BytesIO:
        response = client.post("/v1/solve", data=request.data,
                               headers=dict(request.header_items()))
        seen.append(response.get_json())
        return io.BytesIO(response.data)

    monkeypatch.setattr(urllib.request, "urlopen", urlopen)
    exec(compile(snippet, "README.md", "exec"), {})     # its asserts are the check
    decision = seen[0]["decision"]
    for name in ("input_sha256", "answer_sha256"):
        assert decision[name][:8] in snippet and decision[name] in section, name
    assert rfc8785.dumps(PROBLEM_OF_README).decode() in section


# -- the caller ------------------------------------------------------------------------


def test_the_caller_is_the_token_name_or_the_start_of_its_digest(make_app, tmp_path):
    tokens = tmp_path / "tokens"
    tokens.write_text(f"{TOKEN_NAMED} dispatch-desk   # the front office\n"
                      f"sha256:{sha(TOKEN_PLAIN.encode())}\n", encoding="utf-8")
    app = make_app(TOKENS_FILE=str(tokens))
    client = app.test_client()
    named = solve(client, Authorization=f"Bearer {TOKEN_NAMED}")
    plain = solve(client, Authorization=f"Bearer {TOKEN_PLAIN}")
    assert named.get_json()["decision"]["caller"] == "dispatch-desk"
    assert plain.get_json()["decision"]["caller"] == "sha256:" + sha(TOKEN_PLAIN.encode())[:12]
    # The token itself is written nowhere: not in an answer, not in the store.
    store, _ = app.extensions["certimatch.recorder"].open()
    for response in (named, plain):
        assert TOKEN_NAMED.encode() not in response.data
        assert TOKEN_PLAIN.encode() not in response.data
        stored = store.get(response.get_json()["decision"]["id"])
        assert stored is not None
        kept = repr(stored).encode()
        assert TOKEN_NAMED.encode() not in kept and TOKEN_PLAIN.encode() not in kept


@pytest.mark.parametrize("line", [f"{TOKEN_NAMED} two words", f"{TOKEN_NAMED} a:b",
                                  f"{TOKEN_NAMED} " + "n" * 65])
def test_a_bad_caller_name_stops_start_up_naming_the_line(make_app, tmp_path, line):
    tokens = tmp_path / "tokens"
    tokens.write_text(f"# callers\n{line}\n", encoding="utf-8")
    with pytest.raises(ValueError, match="TOKENS_FILE line 2: after the token comes at most "
                                         "one caller name"):
        make_app(TOKENS_FILE=str(tokens))


# -- start-up --------------------------------------------------------------------------


def test_a_fresh_data_folder_gets_its_database_and_key(tmp_path, new_app):
    # The README's demo: no setting at all, the embedded database is made on first start.
    data = tmp_path / "fresh"
    app = new_app({"DATA_DIR": str(data)})
    assert (data / "decisions.sqlite3").exists() and (data / "signing-key.pem").exists()
    assert (data / "signing-key.pem").stat().st_mode & 0o077 == 0
    assert solve(app.test_client()).get_json()["decision"]["log_index"] == 0
    # a second start uses them as they are
    again = new_app({"DATA_DIR": str(data)})
    assert solve(again.test_client()).get_json()["decision"]["log_index"] == 1


def test_a_database_with_tables_but_no_schema_is_refused(database_url, tmp_path):
    engine = create_engine(database_url)
    with engine.begin() as conn:
        conn.execute(text("CREATE TABLE parts_on_hand (id INTEGER PRIMARY KEY)"))
    engine.dispose()
    with pytest.raises(SchemaNotCurrent, match="run `certimatch db upgrade`"):
        clean_app({"DATABASE_URL": database_url, "DATA_DIR": str(tmp_path)})


def test_a_schema_of_an_unknown_revision_is_refused(make_app, database_url, tmp_path):
    make_app()                                          # creates the schema
    engine = create_engine(database_url)
    with engine.begin() as conn:
        conn.execute(text("UPDATE alembic_version SET version_num = '9999_future'"))
    engine.dispose()
    with pytest.raises(SchemaNotCurrent, match="does not know"):
        make_app()


def test_an_unreachable_database_stops_start_up_unless_recording_is_off(tmp_path, new_app):
    url = "postgresql+psycopg://postgres@127.0.0.1:1/none"     # nothing listens on port 1
    with pytest.raises(StoreUnavailable, match="cannot be reached"):
        new_app({"DATABASE_URL": url, "DATA_DIR": str(tmp_path)})
    app = new_app({"DATABASE_URL": url, "DATA_DIR": str(tmp_path), "RECORD": "off"})
    response = solve(app.test_client())
    assert response.status_code == 200
    assert response.get_json()["decision"]["id"] is None


# -- a store that fails ----------------------------------------------------------------


def _hold_the_log(database_url: str):  # type: ignore[no-untyped-def]
    """A connection holding the log's lock (as an appender does), until closed."""
    engine = make_engine(database_url)
    conn = engine.connect().execution_options(certimatch_write=True)
    transaction = conn.begin()
    conn.execute(text("SELECT size FROM log_head WHERE id = 1 FOR UPDATE")
                 if engine.dialect.name == "postgresql" else text("SELECT 1"))
    if engine.dialect.name == "sqlite":
        conn.execute(text("UPDATE log_head SET size = size WHERE id = 1"))
    return engine, conn, transaction


def test_a_store_that_refuses_the_write_is_a_503_with_nothing_written(make_app, database_url,
                                                                      monkeypatch):
    monkeypatch.setattr(service.http.recording, "make_engine",
                        functools.partial(make_engine, lock_timeout_s=0.3))
    app = make_app()
    client = app.test_client()
    assert solve(client).status_code == 200
    engine, conn, transaction = _hold_the_log(database_url)
    try:
        refused = solve(client, FRACTIONAL, **{"Idempotency-Key": "held"})
    finally:
        transaction.rollback()
        conn.close()
        engine.dispose()
    assert refused.status_code == 503
    assert refused.mimetype == "application/problem+json"
    assert refused.get_json()["type"] == "urn:certimatch:problem:store-unavailable"
    # nothing of it: the next decision takes the next place, and the key is still free
    assert log_size(app) == 1
    again = solve(client, FRACTIONAL, **{"Idempotency-Key": "held"})
    assert again.status_code == 200 and again.get_json()["decision"]["log_index"] == 1
    store, _ = app.extensions["certimatch.recorder"].open()
    assert [d.log_index for d in store.page()] == [0, 1]


def test_a_database_gone_mid_run_is_a_503(make_app):
    app = make_app()
    recorder = app.extensions["certimatch.recorder"]
    recorder.close()
    recorder._store = DecisionStore(make_engine("postgresql+psycopg://postgres@127.0.0.1:1/x"))
    response = solve(app.test_client())
    assert response.status_code == 503
    assert response.get_json()["type"] == "urn:certimatch:problem:store-unavailable"


# -- Idempotency-Key -------------------------------------------------------------------


def test_the_same_key_and_body_return_the_stored_bytes_and_record_nothing(make_app):
    app = make_app()
    client = app.test_client()
    first = solve(client, **{"Idempotency-Key": "ticket-run-7"})
    again = solve(client, **{"Idempotency-Key": "ticket-run-7"})
    assert first.status_code == again.status_code == 200
    assert again.data == first.data
    assert log_size(app) == 1
    # the draft's form, a Structured Fields string, names the same key
    quoted = solve(client, **{"Idempotency-Key": '"ticket-run-7"'})
    assert quoted.data == first.data and log_size(app) == 1


def test_the_same_key_with_another_body_is_refused(make_app):
    app = make_app()
    client = app.test_client()
    assert solve(client, **{"Idempotency-Key": "k-1"}).status_code == 200
    refused = solve(client, FRACTIONAL, **{"Idempotency-Key": "k-1"})
    assert refused.status_code == 422
    assert refused.mimetype == "application/problem+json"
    assert refused.get_json()["type"] == "urn:certimatch:problem:idempotency-key-reused"
    assert "24 hours" in refused.get_json()["detail"]
    assert log_size(app) == 1


def test_keys_are_kept_per_caller(make_app):
    app = make_app(TOKENS=f"{TOKEN_NAMED},{TOKEN_PLAIN}")
    client = app.test_client()
    one = solve(client, **{"Idempotency-Key": "shared", "Authorization": f"Bearer {TOKEN_NAMED}"})
    two = solve(client, FRACTIONAL, **{"Idempotency-Key": "shared",
                                       "Authorization": f"Bearer {TOKEN_PLAIN}"})
    assert one.status_code == two.status_code == 200
    assert one.get_json()["decision"]["id"] != two.get_json()["decision"]["id"]
    assert log_size(app) == 2


def test_a_key_expires_after_24_hours(make_app):
    app = make_app()
    client = app.test_client()
    first = solve(client, **{"Idempotency-Key": "daily"})
    store, _ = app.extensions["certimatch.recorder"].open()
    later = datetime.fromisoformat(first.get_json()["decision"]["recorded_at"]) \
        + timedelta(hours=24, seconds=1)
    store.clock = lambda: later
    reused = solve(client, FRACTIONAL, **{"Idempotency-Key": "daily"})
    assert reused.status_code == 200
    assert reused.get_json()["decision"]["log_index"] == 1


def test_concurrent_requests_with_one_key_record_one_decision(make_app):
    app = make_app()

    def send(_: int) -> bytes:
        return solve(app.test_client(), **{"Idempotency-Key": "burst"}).data

    with ThreadPoolExecutor(4) as pool:
        bodies = list(pool.map(send, range(8)))
    assert len(set(bodies)) == 1
    assert log_size(app) == 1


def test_the_key_is_ignored_when_recording_is_off(make_app):
    client = make_app(RECORD="off").test_client()
    assert solve(client, **{"Idempotency-Key": "k"}).status_code == 200
    assert solve(client, FRACTIONAL, **{"Idempotency-Key": "k"}).status_code == 200


@pytest.mark.parametrize("value", ['""', "k" * 256, "caf\u00e9", '"open', '"a"b"', '"a\\x"'])
def test_a_bad_key_is_a_400_naming_the_header(make_app, value):
    response = make_app().test_client().post(
        "/v1/solve", data=json.dumps(PROBLEM).encode(), content_type="application/json",
        headers=[("Idempotency-Key", value.encode("utf-8").decode("latin-1"))])
    assert response.status_code == 400
    problem = response.get_json()
    assert problem["type"] == "urn:certimatch:problem:invalid-parameter"
    assert problem["parameter"] == "Idempotency-Key"


# -- retention -------------------------------------------------------------------------


def test_retention_removes_old_bodies_and_keeps_the_log_verifiable(make_app):
    app = make_app(RETENTION_DAYS="2")
    client = app.test_client()
    old = solve(client).get_json()["decision"]
    recorder = app.extensions["certimatch.recorder"]
    store, _ = recorder.open()
    recorded = datetime.fromisoformat(old["recorded_at"])
    store.clock = lambda: recorded + timedelta(days=2, seconds=1)
    recorder._pruned_at = None                  # as if the hour between passes had gone by
    new = solve(client, FRACTIONAL).get_json()["decision"]   # the pass runs after it
    kept = store.get(old["id"])
    assert kept is not None and kept.problem is None and kept.answer is None
    assert kept.pruned_at is not None and kept.decision.to_dict() == old
    fresh = store.get(new["id"])
    assert fresh is not None and fresh.problem is not None      # newer than 2 days
    record = client.get(f"/v1/decisions/{old['id']}").get_json()
    assert record["problem"] is None and record["answer"] is None
    result = client.post(f"/v1/decisions/{old['id']}/verify").get_json()
    assert result["valid"] is True                # leaf and inclusion still hold
    assert "answer" not in {c["name"] for c in result["checks"]}


def test_without_retention_nothing_is_pruned(make_app):
    app = make_app()
    client = app.test_client()
    old = solve(client).get_json()["decision"]
    recorder = app.extensions["certimatch.recorder"]
    store, _ = recorder.open()
    store.clock = lambda: datetime.fromisoformat(old["recorded_at"]) + timedelta(days=3650)
    solve(client, FRACTIONAL)
    kept = store.get(old["id"])
    assert kept is not None and kept.problem is not None
