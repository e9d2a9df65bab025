"""``certimatch db upgrade``, ``audit export`` and ``audit check`` on SQLite and
PostgreSQL, with real decisions (solved by the pipeline, optimum cross-checked with
scipy) and tampering done directly in the database: each piece of damage is named and
the exit code is 2; an intact log exits 0. The exit codes are the ones the command's
--help states."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
from audit_helpers import fill, new_decision, problem, solved, worse_answer
from sqlalchemy import text

from service.cli import main
from service.records.migrate import schema_status, upgrade
from service.records.signing import GENERATED_KEY_NAME, Signer, load_or_create_key
from service.records.store import DecisionStore, make_engine

RECORDS = 10


@pytest.fixture
def env(database_url: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> dict[str, str]:
    """The service's environment: its database and data directory (with its key)."""
    for name in [n for n in __import__("os").environ if n.startswith("CERTIMATCH_")]:
        monkeypatch.delenv(name)
    data = tmp_path / "data"
    values = {"CERTIMATCH_DATABASE_URL": database_url, "CERTIMATCH_DATA_DIR": str(data)}
    for name, value in values.items():
        monkeypatch.setenv(name, value)
    return values


@pytest.fixture
def service_store(env: dict[str, str]) -> Any:
    engine = make_engine(env["CERTIMATCH_DATABASE_URL"])
    upgrade(engine)
    key = load_or_create_key(None, env["CERTIMATCH_DATA_DIR"])
    store = DecisionStore(engine)
    store.signer = Signer(key)          # type: ignore[attr-defined]
    yield store
    engine.dispose()


@pytest.fixture
def ids(service_store: DecisionStore) -> list[str]:
    return fill(service_store, RECORDS)


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def _audit(capsys: pytest.CaptureFixture[str], tmp_path: Path,
           *extra: str) -> tuple[int, list[str]]:
    export = tmp_path / "decisions.jsonl"
    code, _, err = _run(capsys, "audit", "export", "-o", str(export))
    assert code == 0, err
    code, out, err = _run(capsys, "audit", "check", str(export), *extra)
    return code, out.splitlines()


def test_db_upgrade_creates_the_default_sqlite_store(tmp_path: Path, monkeypatch,
                                                     capsys) -> None:
    for name in [n for n in __import__("os").environ if n.startswith("CERTIMATCH_")]:
        monkeypatch.delenv(name)
    monkeypatch.setenv("CERTIMATCH_DATA_DIR", str(tmp_path / "data"))
    code, out, _ = _run(capsys, "db", "upgrade")
    assert code == 0 and "at revision" in out
    assert (tmp_path / "data" / "decisions.sqlite3").is_file()
    assert _run(capsys, "db", "upgrade")[0] == 0              # idempotent


def test_db_upgrade_on_both_backends(env: dict[str, str], capsys) -> None:
    engine = make_engine(env["CERTIMATCH_DATABASE_URL"])
    assert not schema_status(engine).at_head
    code, _, _ = _run(capsys, "db", "upgrade")
    assert code == 0 and schema_status(engine).at_head
    with engine.begin() as conn:
        conn.execute(text("UPDATE alembic_version SET version_num = 'ffff'"))
    code, _, err = _run(capsys, "db", "upgrade")
    assert code == 1 and "ffff, which this version does not know" in err
    engine.dispose()


def test_export_refuses_a_schema_that_is_behind(env: dict[str, str], tmp_path: Path,
                                                capsys) -> None:
    load_or_create_key(None, env["CERTIMATCH_DATA_DIR"])
    code, _, err = _run(capsys, "audit", "export", "-o", str(tmp_path / "e.jsonl"))
    assert code == 1 and "run `certimatch db upgrade`" in err
    assert not (tmp_path / "e.jsonl").exists()


def test_export_never_makes_a_key(service_store: DecisionStore, env: dict[str, str],
                                  tmp_path: Path, capsys) -> None:
    (Path(env["CERTIMATCH_DATA_DIR"]) / GENERATED_KEY_NAME).unlink()
    code, _, err = _run(capsys, "audit", "export", "-o", str(tmp_path / "e.jsonl"))
    assert code == 1 and "no signing key at" in err
    assert not (Path(env["CERTIMATCH_DATA_DIR"]) / GENERATED_KEY_NAME).exists()


def test_an_intact_log_checks(ids: list[str], service_store: DecisionStore, tmp_path: Path,
                              capsys) -> None:
    key = service_store.signer.public_key_b64          # type: ignore[attr-defined]
    code, lines = _audit(capsys, tmp_path, "--public-key", key)
    assert code == 0, lines
    assert lines == [f"audit check: VALID ({RECORDS} records, {RECORDS} answers "
                     f"re-verified; signed log of {RECORDS} records, root "
                     f"{service_store.head()[1].hex()})"]
    code, out, _ = _run(capsys, "audit", "check", str(tmp_path / "decisions.jsonl"), "--json")
    assert code == 0
    assert json.loads(out) == {"ok": True, "records": RECORDS, "size": RECORDS,
                               "root_sha256": service_store.head()[1].hex(),
                               "reverified": RECORDS, "findings": []}


def test_export_since_a_date_checks_the_tail(ids: list[str], service_store: DecisionStore,
                                             tmp_path: Path, capsys) -> None:
    assert _run(capsys, "audit", "export", "--since", "2000-01-01",
                "-o", str(tmp_path / "all.jsonl"))[0] == 0
    assert _run(capsys, "audit", "export", "--since", "2999-01-01T00:00:00+02:00",
                "-o", str(tmp_path / "none.jsonl"))[0] == 0
    assert len((tmp_path / "all.jsonl").read_bytes().splitlines()) == RECORDS + 2
    assert len((tmp_path / "none.jsonl").read_bytes().splitlines()) == 2
    for name in ("all.jsonl", "none.jsonl"):
        assert _run(capsys, "audit", "check", str(tmp_path / name))[0] == 0
    code, _, err = _run(capsys, "audit", "export", "--since", "last tuesday", "-o", "x")
    assert code == 1 and "--since: must be a date" in err


def _flip(store: DecisionStore, column: str, log_index: int) -> None:
    with store.engine.begin() as conn:
        body = bytearray(conn.execute(text(f"SELECT {column} FROM decision_records "
                                           "WHERE log_index = :i"), {"i": log_index}).scalar())
        body[len(body) // 2] ^= 0x04                    # one bit of one byte
        conn.execute(text(f"UPDATE decision_records SET {column} = :b WHERE log_index = :i"),
                     {"b": bytes(body), "i": log_index})


@pytest.mark.parametrize("column", ["answer", "problem"])
def test_a_changed_byte_in_a_stored_body_is_named(ids: list[str], service_store: DecisionStore,
                                                  tmp_path: Path, capsys, column: str) -> None:
    _flip(service_store, column, 6)
    code, lines = _audit(capsys, tmp_path)
    assert code == 2
    assert lines[0] == (f"line 8, record 6 (id {ids[6]}): the stored {column} does not "
                        "hash to its digest: it was changed")
    assert lines[-1] == (f"audit check: NOT VALID (1 finding; {RECORDS} records, "
                         f"{RECORDS - 1} answers re-verified)")


def test_a_deleted_row_is_named(ids: list[str], service_store: DecisionStore, tmp_path: Path,
                                capsys) -> None:
    with service_store.engine.begin() as conn:
        conn.execute(text("DELETE FROM decision_records WHERE log_index = 3"))
    code, lines = _audit(capsys, tmp_path)
    assert code == 2
    assert lines[0] == (f"line 5, record 4 (id {ids[4]}): record 3 missing before it: "
                        "dropped, or the records reordered")
    assert lines[-2] == (f"the export holds {RECORDS - 1} records but the checkpoint covers "
                         f"{RECORDS} records: records were dropped or added")


def test_two_swapped_rows_are_named(ids: list[str], service_store: DecisionStore,
                                    tmp_path: Path, capsys) -> None:
    with service_store.engine.begin() as conn:
        for old, new in ((1, 1000), (2, 1), (1000, 2)):
            conn.execute(text("UPDATE decision_records SET log_index = :n "
                              "WHERE log_index = :o"), {"n": new, "o": old})
    code, lines = _audit(capsys, tmp_path)
    assert code == 2
    assert lines[:2] == [
        f"line 3, record 1 (id {ids[2]}): its decision fields do not hash to its stored "
        "leaf: the record was changed",
        f"line 4, record 2 (id {ids[1]}): its decision fields do not hash to its stored "
        "leaf: the record was changed"]
    assert lines[2].startswith("the records do not make up the signed tree")


def test_a_row_added_in_the_database_is_named(ids: list[str], service_store: DecisionStore,
                                              tmp_path: Path, capsys) -> None:
    # A forged decision appended by hand, with a leaf that fits its fields: only the
    # signed checkpoint (and the head it was made from) knows the log had 10 records.
    from service.records.model import Decision

    last = service_store.get(ids[-1])
    assert last is not None
    forged = Decision(**{**last.decision.to_dict(), "id": "f0f0f0f0-0000-4000-8000-000000000000",
                         "log_index": RECORDS})
    with service_store.engine.begin() as conn:
        conn.execute(text(
            "INSERT INTO decision_records (log_index, id, recorded_at, caller, input_sha256, "
            "answer_sha256, service_version, leaf_sha256, mode, problem, answer) VALUES "
            "(:i, :id, :t, :c, :p, :a, :v, :leaf, 'full', :pb, :ab)"),
            {"i": RECORDS, "id": forged.id, "t": forged.recorded_at, "c": forged.caller,
             "p": forged.input_sha256, "a": forged.answer_sha256,
             "v": forged.service_version, "leaf": forged.leaf_hash(), "pb": last.problem,
             "ab": last.answer})
    code, lines = _audit(capsys, tmp_path)
    assert code == 2
    assert lines[:2] == [
        f"the export holds {RECORDS + 1} records but the checkpoint covers {RECORDS} "
        "records: records were dropped or added",
        f"line {RECORDS + 2}, record {RECORDS} (id {forged.id}): past the {RECORDS} records "
        "of the signed checkpoint: the record was added to the log"]


def test_an_added_record_in_the_export_is_named(ids: list[str], service_store: DecisionStore,
                                                tmp_path: Path, capsys) -> None:
    export = tmp_path / "decisions.jsonl"
    assert _run(capsys, "audit", "export", "-o", str(export))[0] == 0
    lines = export.read_bytes().splitlines(keepends=True)
    export.write_bytes(b"".join(lines[:6] + [lines[5]] + lines[6:]))   # record 4 twice
    code, out, _ = _run(capsys, "audit", "check", str(export))
    assert code == 2
    assert out.splitlines()[0] == (f"line 7, record 4 (id {ids[4]}): log index 4 where 5 "
                                   "was due: the record was added, repeated or reordered")


def test_a_wrong_answer_with_true_digests_fails_the_verifier(
        service_store: DecisionStore, tmp_path: Path, capsys) -> None:
    body = problem(7)
    good = solved(body)
    forged = worse_answer(body, good)
    assert forged["objective"] > good["objective"]       # the exchange costs something
    bad = service_store.append(new_decision(body, forged)).decision
    code, lines = _audit(capsys, tmp_path)
    assert code == 2
    assert lines[0].startswith(f"line 2, record 0 (id {bad.id}): the stored answer fails "
                               "the verifier: ")
    code, lines = _audit(capsys, tmp_path, "--no-reverify")
    assert code == 0                                     # only the verifier sees it


def test_a_checkpoint_of_another_key_is_named(ids: list[str], tmp_path: Path,
                                              capsys) -> None:
    other = Signer(load_or_create_key(None, tmp_path / "elsewhere"))
    code, lines = _audit(capsys, tmp_path, "--public-key", other.public_key_b64)
    assert code == 2
    assert lines[0] == "checkpoint: the checkpoint names a public key other than the pinned one"


def test_usage_errors_exit_1(tmp_path: Path, capsys) -> None:
    assert _run(capsys, "audit", "check", str(tmp_path / "missing.jsonl"))[0] == 1
    assert _run(capsys, "audit", "check", "x", "--public-key", "abc")[0] == 1
    assert _run(capsys, "audit", "export")[0] == 1                   # -o is required
    code, _, err = _run(capsys, "audit", "check")                    # neither FILE nor --url
    assert code == 1 and "give an export FILE or --url URL" in err
    code, _, err = _run(capsys, "audit", "check", "x", "--url", "http://127.0.0.1:9")
    assert code == 1 and "not both" in err
    (tmp_path / "junk").write_text("not an export\n")
    code, out, _ = _run(capsys, "audit", "check", str(tmp_path / "junk"))
    assert code == 2 and out.startswith("line 1: not the header")


def test_readme_and_help_give_the_same_exit_codes(capsys) -> None:
    import re

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text()
    section = readme.split("## What an auditor does", 1)[1].split("\n## ", 1)[0]
    rows = {int(m.group(1)): m.group(2) for m in re.finditer(r"^\| (\d) \| (.*)$", section,
                                                             re.MULTILINE)}
    assert sorted(rows) == [0, 1, 2, 4]
    code, out, _ = _run(capsys, "audit", "check", "--help")
    assert code == 0
    assert "0 everything holds; 2 damage was found" in " ".join(out.split())
    assert rows[0].startswith("everything holds") and rows[2].startswith("damage was found")
    assert "4 the service (--url) could not be reached" in " ".join(out.split())
    assert rows[4].startswith("`--url`: the service could not be reached")
    for command in (("audit", "export"), ("db", "upgrade")):
        code, out, _ = _run(capsys, *command, "--help")
        assert code == 0 and "exit codes: 0" in out and "; 1 " in out
