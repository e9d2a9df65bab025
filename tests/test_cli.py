"""The certimatch command line, answered in-process (--local): exit codes and streams.

The same commands over real HTTP are in test_gunicorn.py.
"""

from __future__ import annotations

import io
import json
import socket
from pathlib import Path
from typing import Any

import pytest

from service import cli
from service.cli import DEMO_FILES, demo_problem, main

DEMO_DIR = Path(__file__).resolve().parents[1] / "service" / "demo"


def _write(tmp_path: Path, doc: Any, name: str = "problem.json") -> str:
    path = tmp_path / name
    path.write_text(json.dumps(doc))
    return str(path)


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def _solve_local(capsys: pytest.CaptureFixture[str], path: str) -> dict[str, Any]:
    code, out, err = _run(capsys, "solve", path, "--local")
    assert code == 0, err
    answer: dict[str, Any] = json.loads(out)
    return answer


@pytest.mark.parametrize("name", DEMO_FILES)
def test_solve_demo_file_exits_0_with_answer_on_stdout(capsys, name):
    code, out, err = _run(capsys, "solve", str(DEMO_DIR / name), "--local")
    assert code == 0, err
    assert err == ""
    answer = json.loads(out)
    assert answer["status"] == "optimal"
    assert answer["objective"] == answer["certificate"]["dual_objective"]


@pytest.mark.parametrize("name", DEMO_FILES)
def test_demo_problems_load_as_package_data(name):
    problem = demo_problem(name)
    assert problem == json.loads((DEMO_DIR / name).read_text())


def test_repair_demo_shows_waiting_tickets_and_an_unused_slot(capsys):
    # The scenario is only worth showing if slots are short, skills matter and an urgent
    # ticket is never the one that waits; guard the data against edits that lose that.
    problem = demo_problem("repair_tickets.json")
    answer = _solve_local(capsys, str(DEMO_DIR / "repair_tickets.json"))
    sinks = {s["id"]: s for s in problem["sinks"]}
    sources = [s["id"] for s in problem["sources"]]
    assert 8 <= len(sources) and 20 <= len(sinks)
    assert sum(s["supply"] for s in problem["sources"]) < len(sinks)
    assert all(2 <= s["supply"] <= 4 for s in problem["sources"])
    assert answer["unmet"] and all("penalty" in sinks[u["id"]] for u in answer["unmet"])
    assert answer["unused"]
    column = {sid: j for j, sid in enumerate(sinks)}
    for row in answer["allocation"]:
        travel = problem["costs"][sources.index(row["from"])][column[row["to"]]]
        assert travel is not None, f"{row['from']} is not certified for {row['to']}"
        assert row["cost"] == travel
    # Optimum found independently with networkx.min_cost_flow when the data was written.
    assert answer["objective"] == 589


def test_parts_demo_uses_the_depot_link_and_leaves_the_soft_van_short(capsys):
    problem = demo_problem("parts_network.json")
    answer = _solve_local(capsys, str(DEMO_DIR / "parts_network.json"))
    node_ids = {n["id"] for n in problem["nodes"]}
    link = [r for r in answer["allocation"] if r["from"] in node_ids and r["to"] in node_ids]
    assert link and link[0]["flow"] > 0
    soft = [s["id"] for s in problem["sinks"] if "penalty" in s]
    assert [u["id"] for u in answer["unmet"]] == soft
    # Optimum found independently with networkx.min_cost_flow when the data was written.
    assert answer["objective"] == 1497.5


def test_solve_reads_standard_input(capsys, monkeypatch):
    body = (DEMO_DIR / "repair_tickets.json").read_bytes()
    monkeypatch.setattr("sys.stdin", io.TextIOWrapper(io.BytesIO(body)))
    code, out, _ = _run(capsys, "solve", "-", "--local")
    assert code == 0
    assert json.loads(out)["objective"] == 589


def test_rejected_unmet_demand_exits_2_with_the_witness_on_stderr(capsys, tmp_path):
    problem = {
        "sources": [{"id": "van-a", "supply": 1}],
        "sinks": [{"id": "stop-1"}, {"id": "stop-2"}],
        "costs": [[3, 4]],
        "unmet_demand": "reject",
    }
    code, out, err = _run(capsys, "solve", _write(tmp_path, problem), "--local")
    assert code == 2
    assert out == ""
    doc = json.loads(err)
    assert doc["status"] == 422
    assert doc["type"].endswith("infeasible")
    assert doc["witness"]["shortfall"] == 1


def test_same_shortage_without_reject_is_optimal(capsys, tmp_path):
    # Control for the test above: the exit code follows the policy, not the shortage.
    problem = {
        "sources": [{"id": "van-a", "supply": 1}],
        "sinks": [{"id": "stop-1"}, {"id": "stop-2"}],
        "costs": [[3, 4]],
    }
    answer = _solve_local(capsys, _write(tmp_path, problem))
    assert answer["unmet"] == [{"id": "stop-2", "amount": 1}]


def test_malformed_file_exits_1_with_the_problem_document(capsys, tmp_path):
    path = tmp_path / "broken.json"
    path.write_bytes(b'{"sources": [{"id": "a"}], "sinks": [')
    code, out, err = _run(capsys, "solve", str(path), "--local")
    assert code == 1
    assert out == ""
    doc = json.loads(err)
    assert doc["status"] == 400
    assert {"type", "title", "detail"} <= doc.keys()


def test_invalid_problem_exits_1_not_2(capsys, tmp_path):
    # Also 422, but a broken request is not an infeasible one: scripts must tell them apart.
    problem = {"sources": [{"id": "a"}], "sinks": [{"id": "b", "demand": -1}], "costs": [[1]]}
    code, out, err = _run(capsys, "solve", _write(tmp_path, problem), "--local")
    assert code == 1
    doc = json.loads(err)
    assert doc["status"] == 422
    assert not doc["type"].endswith("infeasible")
    assert any(e["pointer"] == "/sinks/0/demand" for e in doc["errors"])


def test_missing_file_exits_1(capsys, tmp_path):
    code, out, err = _run(capsys, "solve", str(tmp_path / "nope.json"), "--local")
    assert code == 1
    assert out == ""
    assert "cannot read" in err


def test_unreachable_server_exits_1(capsys):
    with socket.socket() as s:  # a port that was free a moment ago: nothing listens there
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    path = str(DEMO_DIR / "repair_tickets.json")
    code, out, err = _run(
        capsys, "solve", path, "--url", f"http://127.0.0.1:{port}", "--timeout", "5"
    )
    assert code == 1
    assert out == ""
    assert "cannot reach" in err


def test_url_defaults_to_the_environment(capsys, monkeypatch):
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    monkeypatch.setenv("CERTIMATCH_URL", f"http://127.0.0.1:{port}")
    code, _, err = _run(capsys, "solve", str(DEMO_DIR / "repair_tickets.json"))
    assert code == 1
    assert f"127.0.0.1:{port}" in err


def test_usage_error_exits_1_not_2(capsys):
    # argparse's own code 2 would read as "infeasible" to a script.
    code, _, err = _run(capsys, "solve", "x.json", "--local", "--url", "http://h")
    assert code == 1
    assert "not allowed with" in err


def test_help_exits_0(capsys):
    code, out, _ = _run(capsys, "--help")
    assert code == 0
    for command in ("serve", "solve", "verify", "demo"):
        assert command in out


@pytest.fixture
def solved_demo(capsys) -> dict[str, Any]:
    problem = demo_problem("parts_network.json")
    return {**problem, "answer": _solve_local(capsys, str(DEMO_DIR / "parts_network.json"))}


def test_verify_of_the_service_answer_exits_0(capsys, tmp_path, solved_demo):
    code, out, err = _run(capsys, "verify", _write(tmp_path, solved_demo), "--local")
    assert code == 0, err
    verdict = json.loads(out)
    assert verdict["valid"] is True
    assert verdict["checks"] and all(c["passed"] for c in verdict["checks"])


def _raise_objective(answer: dict[str, Any]) -> None:
    answer["objective"] += 1


def _drop_a_shipment(answer: dict[str, Any]) -> None:
    del answer["allocation"][0]


def _shift_a_potential(answer: dict[str, Any]) -> None:
    # wh-harbour -> depot-mill carries flow strictly between 0 and its capacity, so its
    # reduced cost must be exactly 0; moving the potential of one end breaks that.
    answer["certificate"]["potentials"]["depot-mill"] += 1


@pytest.mark.parametrize("tamper", [_raise_objective, _drop_a_shipment, _shift_a_potential])
def test_verify_of_a_tampered_answer_exits_2(capsys, tmp_path, solved_demo, tamper):
    tamper(solved_demo["answer"])
    code, out, err = _run(capsys, "verify", _write(tmp_path, solved_demo), "--local")
    assert code == 2, err
    verdict = json.loads(out)
    assert verdict["valid"] is False
    assert any(not c["passed"] for c in verdict["checks"])


def test_verify_without_answer_exits_1(capsys, tmp_path):
    problem = demo_problem("parts_network.json")
    code, out, err = _run(capsys, "verify", _write(tmp_path, problem), "--local")
    assert code == 1
    assert out == ""
    assert json.loads(err)["status"] == 422


def _flag(argv: list[str], name: str) -> str | None:
    return argv[argv.index(name) + 1] if name in argv else None


def test_serve_leaves_bind_and_workers_to_the_config_file(monkeypatch, tmp_path):
    # The deploy config reads its bind and worker count from the environment; flags the
    # user did not give must not override it.
    conf = tmp_path / "gunicorn.conf.py"
    monkeypatch.setattr(cli, "_gunicorn_config", lambda: conf)
    argv = cli._gunicorn_argv(None, None, None)
    assert _flag(argv, "--config") == str(conf)
    assert "--bind" not in argv and "--workers" not in argv
    argv = cli._gunicorn_argv(None, 9001, 3)
    assert (_flag(argv, "--bind"), _flag(argv, "--workers")) == ("127.0.0.1:9001", "3")
    assert argv[-1] == "service.app:create_app()"


def test_serve_without_config_file_uses_our_defaults(monkeypatch):
    monkeypatch.setattr(cli, "_gunicorn_config", lambda: None)
    argv = cli._gunicorn_argv(None, None, None)
    assert "--config" not in argv
    assert (_flag(argv, "--bind"), _flag(argv, "--workers")) == ("127.0.0.1:8080", "2")
    assert _flag(cli._gunicorn_argv("::1", 81, None), "--bind") == "[::1]:81"
