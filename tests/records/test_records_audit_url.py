"""``certimatch audit check --url URL`` against a real gunicorn on SQLite and PostgreSQL:
an intact log exits 0; a byte changed in a stored answer or problem, a deleted row and
two swapped rows, done directly in the database, exit 2 and are named with the record's
log index and id. ``POST /v1/decisions/{id}/verify`` names the same damage. The
decisions are real solves (optimum cross-checked with scipy in audit_helpers)."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import requests
from audit_helpers import problem, solved
from servers import Gunicorn
from sqlalchemy import text

from service.cli import main
from service.records.store import make_engine

RECORDS = 6


@pytest.fixture
def served(database_url: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
           ) -> Iterator[tuple[Gunicorn, list[dict[str, Any]], Any]]:
    for name in [n for n in __import__("os").environ if n.startswith("CERTIMATCH_")]:
        monkeypatch.delenv(name)
    (tmp_path / "server").mkdir()
    server = Gunicorn(tmp_path / "server", workers=1,
                      env={"CERTIMATCH_DATABASE_URL": database_url,
                           "CERTIMATCH_DATA_DIR": str(tmp_path / "data")})
    with server:
        answers = []
        for seed in range(RECORDS):
            body = problem(seed)
            r = requests.post(server.base + "/v1/solve", json=body, timeout=60)
            assert r.status_code == 200, r.text
            answer = r.json()
            assert answer["objective"] == solved(body)["objective"]
            answers.append(answer)
        engine = make_engine(database_url)
        yield server, answers, engine
        engine.dispose()


def _check(server: Gunicorn, capsys: pytest.CaptureFixture[str]) -> tuple[int, list[str]]:
    key = requests.get(server.base + "/v1/log/checkpoint", timeout=30).json()["public_key"]
    code = main(["audit", "check", "--url", server.base, "--public-key", key])
    return code, capsys.readouterr().out.splitlines()


def _verify(server: Gunicorn, decision_id: str) -> dict[str, Any]:
    r = requests.post(f"{server.base}/v1/decisions/{decision_id}/verify", timeout=60)
    assert r.status_code == 200, r.text
    return r.json()


def _failed(result: dict[str, Any]) -> list[str]:
    return [c["name"] for c in result["checks"] if not c["passed"]]


def test_an_intact_log_checks_over_http(served: Any, capsys) -> None:
    server, answers, _ = served
    code, lines = _check(server, capsys)
    assert code == 0, lines
    assert lines[-1].startswith(f"audit check: VALID ({RECORDS} records, {RECORDS} answers "
                                "re-verified")
    assert _failed(_verify(server, answers[2]["decision"]["id"])) == []


@pytest.mark.parametrize("column", ["answer", "problem"])
def test_a_changed_byte_is_named_over_http(served: Any, capsys, column: str) -> None:
    server, answers, engine = served
    victim = answers[3]["decision"]
    with engine.begin() as conn:
        body = conn.execute(text(f"SELECT {column} FROM decision_records WHERE "
                                 "log_index = 3")).scalar()
        changed = bytes(body).replace(b'"tech-1"', b'"tech-7"')
        assert changed != bytes(body)
        conn.execute(text(f"UPDATE decision_records SET {column} = :b WHERE log_index = 3"),
                     {"b": changed})
    code, lines = _check(server, capsys)
    assert code == 2
    assert lines[0] == (f"record 3 (id {victim['id']}): the stored {column} does not hash "
                        "to its digest: it was changed")
    assert _failed(_verify(server, victim["id"])) == [f"{column}_digest"]


def test_a_deleted_row_is_named_over_http(served: Any, capsys) -> None:
    server, answers, engine = served
    with engine.begin() as conn:
        conn.execute(text("DELETE FROM decision_records WHERE log_index = 2"))
    code, lines = _check(server, capsys)
    assert code == 2
    # Record 3's proof needs the lost leaf 2, so the service cannot serve it either.
    neighbour, after = answers[3]["decision"]["id"], answers[4]["decision"]["id"]
    assert lines[0] == (f"record 4 (id {after}): records 2 to 3 missing before it: "
                        "dropped, or the records reordered")
    assert "the export holds 4 records but the checkpoint covers 6 records" in lines[1]
    assert lines[2].startswith(f"record 3 (id {neighbour}): the service cannot serve it "
                               "(500): the decision log lacks stored nodes")
    assert "inclusion" in _failed(_verify(server, neighbour))


def test_two_swapped_rows_are_named_over_http(served: Any, capsys) -> None:
    server, answers, engine = served
    with engine.begin() as conn:
        for old, new in ((0, 1000), (1, 0), (1000, 1)):
            conn.execute(text("UPDATE decision_records SET log_index = :n "
                              "WHERE log_index = :o"), {"n": new, "o": old})
    code, lines = _check(server, capsys)
    assert code == 2
    first, second = answers[0]["decision"]["id"], answers[1]["decision"]["id"]
    assert lines[0].startswith("the records do not make up the signed tree")
    assert (f"record 0 (id {second}): its inclusion proof does not lead to the signed "
            "root: the record or the stored tree was changed") in lines
    assert (f"record 1 (id {first}): its inclusion proof does not lead to the signed "
            "root: the record or the stored tree was changed") in lines
    for moved in (first, second):
        assert {"leaf", "inclusion"} <= set(_failed(_verify(server, moved)))


def test_an_unreachable_service_exits_4(tmp_path: Path, capsys) -> None:
    from servers import free_port

    code = main(["audit", "check", "--url", f"http://127.0.0.1:{free_port()}"])
    assert code == 4
    assert "cannot reach" in capsys.readouterr().err
