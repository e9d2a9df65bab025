"""The certimatch command line, answered in-process (--local): exit codes and streams.

The same commands over real HTTP are in test_gunicorn.py.
"""

from __future__ import annotations

import csv
import io
import json
import re
import socket
from pathlib import Path
from typing import Any

import pytest

from service.cli import files, main, serve, talk, transport
from service.cli.demo import DEMO_FILES, demo_problem

DEMO_DIR = Path(__file__).resolve().parents[2] / "service" / "demo"


def _write(tmp_path: Path, doc: Any, name: str = "problem.json") -> str:
    path = tmp_path / name
    path.write_text(json.dumps(doc))
    return str(path)


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def _solve_local(capsys: pytest.CaptureFixture[str], path: str, expect: int = 0
                 ) -> dict[str, Any]:
    code, out, err = _run(capsys, "solve", path, "--local")
    assert code == expect, err
    answer: dict[str, Any] = json.loads(out)
    return answer


@pytest.mark.parametrize("name", DEMO_FILES)
def test_solve_demo_file_exits_0_with_answer_on_stdout(capsys, name):
    code, out, err = _run(capsys, "solve", str(DEMO_DIR / name), "--local")
    assert code == 0, err
    # stderr: the one-line summary alone; every ticket and van left waiting is soft.
    assert err.count("\n") == 1 and err.endswith("-> exit 0\n")
    assert f"{name}: all hard demand met; objective " in err
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


def test_same_shortage_without_reject_is_a_plan_with_exit_3(capsys, tmp_path):
    # Control for the test above: without reject the shortage is a plan (written), and
    # exit 3 says that hard demand is left unmet in it.
    problem = {
        "sources": [{"id": "van-a", "supply": 1}],
        "sinks": [{"id": "stop-1"}, {"id": "stop-2"}],
        "costs": [[3, 4]],
    }
    answer = _solve_local(capsys, _write(tmp_path, problem), expect=3)
    assert answer["unmet"] == [{"id": "stop-2", "amount": 1, "hard": True,
                                "reason": "capacity"}]


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


def test_unreachable_server_exits_4(capsys):
    with socket.socket() as s:  # a port that was free a moment ago: nothing listens there
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    path = str(DEMO_DIR / "repair_tickets.json")
    code, out, err = _run(
        capsys, "solve", path, "--url", f"http://127.0.0.1:{port}", "--timeout", "5"
    )
    assert code == 4
    assert out == ""
    assert "cannot reach" in err and "Connection refused" in err


def test_url_defaults_to_the_environment(capsys, monkeypatch):
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    monkeypatch.setenv("CERTIMATCH_URL", f"http://127.0.0.1:{port}")
    code, _, err = _run(capsys, "solve", str(DEMO_DIR / "repair_tickets.json"))
    assert code == 4
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
    monkeypatch.setattr(serve, "_gunicorn_config", lambda: conf)
    argv = serve._gunicorn_argv(None, None, None)
    assert _flag(argv, "--config") == str(conf)
    assert "--bind" not in argv and "--workers" not in argv
    argv = serve._gunicorn_argv(None, 9001, 3)
    assert (_flag(argv, "--bind"), _flag(argv, "--workers")) == ("127.0.0.1:9001", "3")
    assert argv[-1] == "service.app:create_app()"


def test_serve_without_config_file_uses_our_defaults(monkeypatch):
    monkeypatch.setattr(serve, "_gunicorn_config", lambda: None)
    argv = serve._gunicorn_argv(None, None, None)
    assert "--config" not in argv
    assert (_flag(argv, "--bind"), _flag(argv, "--workers")) == ("127.0.0.1:8080", "2")
    assert _flag(serve._gunicorn_argv("::1", 81, None), "--bind") == "[::1]:81"


# --- CSV cost tables ------------------------------------------------------------------

# Worked by hand: ticket-2 (2 units) can only come from tech-a, which then has no slot
# left, so ticket-1 goes to tech-b and the soft ticket-3 waits at its penalty:
# 2 x 25 + 12 + 30 = 92; ticket-3's only server, tech-b, is full, and no source has a
# slot left: it waits for capacity (README "Why a sink waits"). Common practice, no source.
TABLE = """\
,ticket-1,ticket-2,ticket-3,supply
tech-a,10,25,,2
tech-b,12,,15,1
demand,1,2,1,
penalty,,,30,
"""


def _csv(tmp_path: Path, text: str = TABLE, name: str = "costs.csv",
         encoding: str = "utf-8") -> str:
    path = tmp_path / name
    path.write_bytes(text.encode(encoding))
    return str(path)


def test_csv_table_is_solved_with_supply_demand_and_penalty(capsys, tmp_path):
    code, out, err = _run(capsys, "solve", _csv(tmp_path), "--local")
    assert code == 0, err
    answer = json.loads(out)
    assert answer["objective"] == 92
    assert {(r["from"], r["to"], r["flow"]) for r in answer["allocation"]} == {
        ("tech-a", "ticket-2", 2), ("tech-b", "ticket-1", 1)}
    assert answer["unmet"] == [{"id": "ticket-3", "amount": 1, "hard": False,
                                "reason": "capacity"}]


def test_csv_empty_cells_are_pairs_not_allowed(capsys, tmp_path):
    # Without the supply column and the extra rows every supply and demand is 1 and hard;
    # the cheap-looking pair tech-b -> ticket-2 does not exist, so tech-b takes ticket-1.
    table = ",ticket-1,ticket-2\ntech-a,5,1\ntech-b,9,\n"
    answer = _solve_local(capsys, _csv(tmp_path, table))
    assert {(r["from"], r["to"]) for r in answer["allocation"]} == {
        ("tech-a", "ticket-2"), ("tech-b", "ticket-1")}
    assert answer["objective"] == 10


def test_csv_with_bom_semicolons_and_spaces(capsys, tmp_path):
    table = "\ufeff ; ticket-1 ; ticket-2\n tech-a ; 4 ; 7.5\n tech-b ;  ; 2\n"
    code, out, err = _run(capsys, "solve", _csv(tmp_path, table), "--local",
                          "--delimiter", ";")
    assert code == 0, err
    assert json.loads(out)["objective"] == 6


def test_csv_from_standard_input_needs_input_csv(capsys, monkeypatch):
    monkeypatch.setattr("sys.stdin", io.TextIOWrapper(io.BytesIO(TABLE.encode())))
    code, out, err = _run(capsys, "solve", "-", "--input", "csv", "--local")
    assert code == 0, err
    assert json.loads(out)["objective"] == 92


def test_csv_column_named_supply_can_be_a_sink(capsys, tmp_path):
    table = ",supply,ticket-1\ntech-a,3,5\n"
    answer = _solve_local(capsys, _csv(tmp_path, table))      # "supply" read as supply 3
    assert [(r["to"]) for r in answer["allocation"]] == ["ticket-1"]
    code, out, _ = _run(capsys, "solve", _csv(tmp_path, table), "--local",
                        "--supply-column", "", "--format", "csv")
    assert code == 3          # two hard sinks now, and tech-a has one unit of supply
    assert "tech-a,supply,1,3" in out.splitlines()


@pytest.mark.parametrize(("table", "message"), [
    ("", "no rows"),
    ("corner\ntech-a\n", "names no sinks"),
    (",t1,t2\ntech-a,1\n", "line 2: 2 cells, but the first row has 3"),
    (",t1\ntech-a,cheap\n", "line 2, column 2: 'cheap' is not a number"),
    (",t1\ntech-a,nan\n", "line 2, column 2: 'nan' is not a finite number"),
    (",t1\ntech-a,1,5\n", "line 2: more cells than the first row"),
    (",t1,t1\ntech-a,1,2\n", "line 1, column 3: id 't1' appears twice"),
    (",t1\ntech-a,1\ntech-a,2\n", "line 3, column 1: id 'tech-a' appears twice"),
    (",t1,supply\ntech-a,1,1.5\n", "line 2, column 3: supply must be a whole number"),
    (",t1\ntech-a,1\ndemand,-1\n", "line 3, column 2: demand must be a whole number"),
    (",t1\ntech-a,1\npenalty,-3\n", "line 3, column 2: a penalty must be >= 0"),
    (",t1,supply\ntech-a,1,\ndemand,1,4\n", "line 3, column 3: the 'demand' row has no supply"),
    (",t1\n,1\n", "line 2, column 1: the row has no source id"),
])
def test_csv_mistakes_exit_1_naming_line_and_column(capsys, tmp_path, table, message):
    code, out, err = _run(capsys, "solve", _csv(tmp_path, table), "--local")
    assert code == 1
    assert out == ""
    assert message in err


def test_csv_decimal_comma_gets_a_hint(capsys, tmp_path):
    code, _, err = _run(capsys, "solve", _csv(tmp_path, ";t1\ntech-a;1,5\n"), "--local",
                        "--delimiter", ";")
    assert code == 1
    assert "'1,5' is not a number; write decimals with a dot" in err


def test_csv_that_is_not_utf8_exits_1(capsys, tmp_path):
    code, _, err = _run(capsys, "solve", _csv(tmp_path, ",t\u00e9\nx,1\n", encoding="latin-1"),
                        "--local")
    assert code == 1
    assert "not UTF-8" in err


def test_csv_numbers_out_of_range_are_refused_by_the_service(capsys, tmp_path):
    # The reader checks the form of a cell; the service alone owns the limits.
    code, _, err = _run(capsys, "solve", _csv(tmp_path, ",t1\ntech-a,2000000000\n"), "--local")
    assert code == 1
    assert any(e["pointer"] == "/costs/0/0" for e in json.loads(err)["errors"])


# --- output formats -------------------------------------------------------------------

def test_format_csv_is_the_allocation_for_a_spreadsheet(capsys, tmp_path):
    code, out, err = _run(capsys, "solve", _csv(tmp_path), "--local", "--format", "csv")
    assert code == 0, err
    rows = list(csv.reader(io.StringIO(out)))
    assert rows == [["from", "to", "flow", "cost"], ["tech-a", "ticket-2", "2", "50"],
                    ["tech-b", "ticket-1", "1", "12"]]


def test_format_csv_defuses_ids_a_spreadsheet_would_run(capsys, tmp_path):
    # OWASP "CSV Injection": a cell starting with = + - @ is a formula to a spreadsheet.
    problem = {"sources": [{"id": "=HYPERLINK(1)"}], "sinks": [{"id": "@sum"}],
               "costs": [[-4]]}
    code, out, _ = _run(capsys, "solve", _write(tmp_path, problem), "--local", "--format",
                        "csv")
    assert code == 0
    assert list(csv.reader(io.StringIO(out)))[1] == ["'=HYPERLINK(1)", "'@sum", "1", "-4"]


def test_format_table_reads_like_a_table_and_carries_the_verdict(capsys, tmp_path):
    code, out, err = _run(capsys, "solve", _csv(tmp_path), "--local", "--format", "table")
    assert code == 0, err
    lines = out.splitlines()
    assert lines[0] == "optimal allocation (transportation, solver network_simplex)"
    header = next(line for line in lines if line.strip().startswith("from"))
    assert header.split() == ["from", "to", "flow", "cost"]
    row = next(line for line in lines if "ticket-2" in line)
    assert row.split() == ["tech-a", "ticket-2", "2", "50"]
    # Columns are aligned: the flow column ends at the same place in every row.
    flows = [line for line in lines if line.strip().startswith(("from", "tech-", "total"))]
    ends = {[m.end() for m in re.finditer(r"\S+", line)][-2] for line in flows}
    assert len(flows) == 4 and len(ends) == 1
    assert "ticket-3      1  soft, penalty 30 per unit" in out
    assert "unused supply: none" in lines
    assert "objective: 92 (least total cost plus penalties)" in lines
    assert lines[-1].startswith("certificate check: VALID")


def test_format_table_for_a_json_maximisation(capsys, tmp_path):
    problem = {"sources": [{"id": "crew-a"}, {"id": "crew-b"}],
               "sinks": [{"id": "job-1"}, {"id": "job-2"}], "costs": [[9, 4], [7, 1]]}
    code, out, _ = _run(capsys, "solve", _write(tmp_path, problem), "--local",
                        "--objective", "max", "--format", "table")
    assert code == 0
    assert "objective: 11 (greatest total score less penalties)" in out
    assert out.splitlines()[2].split() == ["from", "to", "flow", "score"]


def test_table_exits_1_when_the_check_of_the_answer_fails(capsys, tmp_path, monkeypatch):
    # Simulates a server whose /v1/verify rejects its own answer: not a result to act on.
    real = transport._local_post

    def lying_verifier() -> talk.Post:
        post = real()

        def answer(path: str, body: bytes, headers: Any = None) -> talk.Reply:
            if path == "/v1/verify":
                return talk.Reply(200, "application/json", json.dumps(
                    {"valid": False, "checks": [{"name": "objective", "passed": False,
                                                 "detail": "objective is 1, recomputed 2"}]}))
            return post(path, body, headers)

        return answer

    monkeypatch.setattr(transport, "_local_post", lying_verifier)
    code, out, _ = _run(capsys, "solve", _csv(tmp_path), "--local", "--format", "table")
    assert code == 1
    assert out.splitlines()[-1] == ("certificate check: INVALID (1 of 1 checks failed: "
                                    "objective)")


def test_objective_option_replaces_the_json_field(capsys, tmp_path):
    problem = {"sources": [{"id": "crew-a"}], "sinks": [{"id": "job-1"}, {"id": "job-2"}],
               "costs": [[3, 8]], "objective": "min"}
    path = _write(tmp_path, problem)
    # One crew for two hard jobs: a plan with one job unmet, exit 3 either way.
    assert _solve_local(capsys, path, expect=3)["allocation"][0]["to"] == "job-1"
    code, out, _ = _run(capsys, "solve", path, "--local", "--objective", "max")
    assert code == 3
    answer = json.loads(out)
    assert answer["allocation"][0]["to"] == "job-2"
    assert answer["certificate"]["negated"] is True


def test_unmet_demand_reject_on_a_csv_exits_2(capsys, tmp_path):
    table = ",stop-1,stop-2\nvan-a,3,4\n"
    code, out, err = _run(capsys, "solve", _csv(tmp_path, table), "--local",
                          "--unmet-demand", "reject")
    assert code == 2
    assert out == ""
    assert json.loads(err)["witness"]["shortfall"] == 1


def test_output_file_holds_the_result_and_stdout_stays_empty(capsys, tmp_path):
    target = tmp_path / "plan.csv"
    code, out, err = _run(capsys, "solve", _csv(tmp_path), "--local", "--format", "csv",
                          "-o", str(target))
    assert code == 0, err
    assert out == ""
    assert target.read_text().startswith("from,to,flow,cost\n")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["costs.csv", "plan.csv"]


def test_output_file_is_not_touched_when_solving_fails(capsys, tmp_path):
    target = tmp_path / "plan.json"
    target.write_text("yesterday's plan")
    table = ",stop-1,stop-2\nvan-a,3,4\n"
    code, _, _ = _run(capsys, "solve", _csv(tmp_path, table), "--local",
                      "--unmet-demand", "reject", "-o", str(target))
    assert code == 2
    assert target.read_text() == "yesterday's plan"


def test_output_into_a_missing_folder_exits_1(capsys, tmp_path):
    code, _, err = _run(capsys, "solve", _csv(tmp_path), "--local", "-o",
                        str(tmp_path / "no" / "such" / "plan.json"))
    assert code == 1
    assert "cannot write" in err


# --- progress -------------------------------------------------------------------------

def test_small_solve_says_one_line_on_stderr_and_nothing_when_quiet(capsys, tmp_path):
    _, _, err = _run(capsys, "solve", _csv(tmp_path), "--local")
    assert err.splitlines() == [
        f"certimatch: {tmp_path / 'costs.csv'}: all hard demand met; objective 92, 3 units "
        "routed, 1 unit unmet on 1 sink, 0 units of supply unused -> exit 0"]
    _, _, err = _run(capsys, "solve", _csv(tmp_path), "--local", "--quiet")
    assert err == ""


def test_progress_lines_on_request(capsys, tmp_path):
    code, out, err = _run(capsys, "solve", _csv(tmp_path), "--local", "--progress")
    assert code == 0
    json.loads(out)                       # stdout is still the answer alone
    lines = err.splitlines()
    assert lines[0].startswith("certimatch: read ")
    assert "2 sources x 3 sinks, 4 of 6 pairs allowed" in lines[0]
    assert "to /v1/solve in this process" in lines[1]
    assert lines[2].startswith("certimatch: answered 200 in ")
    assert lines[3].startswith("certimatch: ") and lines[3].endswith(
        ": all hard demand met; objective 92, 3 units routed, 1 unit unmet on 1 sink, "
        "0 units of supply unused -> exit 0")


def test_big_bodies_get_progress_unless_quiet(capsys, tmp_path, monkeypatch):
    monkeypatch.setattr(files, "PROGRESS_BYTES", 10)
    _, _, err = _run(capsys, "solve", _csv(tmp_path), "--local")
    assert "answered 200" in err
    _, _, err = _run(capsys, "solve", _csv(tmp_path), "--local", "--quiet")
    assert err == ""


def test_progress_names_the_url(capsys, tmp_path):
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    code, _, err = _run(capsys, "solve", _csv(tmp_path), "--url", f"http://127.0.0.1:{port}/",
                        "--timeout", "5", "--progress")
    assert code == 4
    assert f"posting 181 bytes to http://127.0.0.1:{port}/v1/solve" in err


def test_quiet_and_progress_together_are_a_usage_error(capsys, tmp_path):
    code, _, err = _run(capsys, "solve", _csv(tmp_path), "--quiet", "--progress")
    assert code == 1
    assert "not allowed with" in err


# --- help -----------------------------------------------------------------------------

def test_main_help_has_examples_and_exit_codes(capsys):
    code, out, _ = _run(capsys, "--help")
    assert code == 0
    for command in ("serve", "solve", "verify", "report", "demo"):
        assert f"\n    {command} " in out, command
    assert "examples:" in out and "exit codes" in out
    assert "certimatch report problem.json --answer answer.json -o report.html" in out


def test_solve_help_explains_csv_formats_and_exit_codes(capsys):
    code, out, _ = _run(capsys, "solve", "--help")
    assert code == 0
    for words in ("CSV cost tables", "empty cell", "--supply-column", "--demand-row",
                  "--penalty-row", "--format {json,table,csv}", "-o FILE", "--quiet",
                  "--unmet-demand {minimize,reject}", "--unmet-csv FILE",
                  "--summary-json FILE", "--out-dir DIR", "--no-spreadsheet-safe",
                  "--token TOKEN", "--token-file FILE", "CERTIMATCH_TOKEN", "--retries N",
                  "--idempotency-key KEY", "exit codes (solve"):
        assert words in out, words


#: The words each exit code is known by, in the README table, --help and the summary JSON.
EXIT_WORDS = {0: "all hard demand is met", 2: "refused as infeasible",
              3: "some hard demand is left unmet", 4: "transient failure outlasted the retries",
              1: "anything permanent"}


def _readme_exit_rows() -> dict[int, str]:
    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text()
    section = readme.split("## Command line", 1)[1].split("\n## ", 1)[0]
    return {int(m.group(1)): m.group(2) for m in re.finditer(r"^\| (\d) \| (.*)$", section,
                                                             re.MULTILINE)}


def test_one_exit_code_table_in_readme_help_and_summary(capsys):
    from service.cli.outcome import OUTCOMES

    rows = _readme_exit_rows()
    assert sorted(rows) == [0, 1, 2, 3, 4]
    code, out, _ = _run(capsys, "--help")
    assert code == 0
    help_lines = {int(m.group(1)): m.group(2)
                  for m in re.finditer(r"^  (\d)  (.*)$", out, re.MULTILINE)}
    assert sorted(help_lines) == [0, 1, 2, 3, 4]
    for n, words in EXIT_WORDS.items():
        assert words in rows[n], n
        assert words in help_lines[n], n
        assert words in OUTCOMES[n][1], n
    assert "1 > 4 > 2 > 3 > 0" in out
    assert "Retry-After" in out and "--timeout" in out       # "transient", defined


def test_report_help_explains_the_page(capsys):
    code, out, _ = _run(capsys, "report", "--help")
    assert code == 0
    for words in ("--answer ANSWER", "--format {html,svg}", "no script", "exit codes: 0"):
        assert words in out, words


# --- report ---------------------------------------------------------------------------

def test_report_of_a_solved_problem_is_valid(capsys, tmp_path, solved_demo):
    target = tmp_path / "report.html"
    code, out, err = _run(capsys, "report", _write(tmp_path, solved_demo), "-o", str(target))
    assert code == 0, err
    assert out == ""
    page = target.read_text()
    assert page.startswith("<!DOCTYPE html>")
    assert "VALID" in page and "NOT VALID" not in page


def test_report_of_a_tampered_answer_exits_2_and_still_writes(capsys, tmp_path, solved_demo):
    _shift_a_potential(solved_demo["answer"])
    target = tmp_path / "report.html"
    code, _, _ = _run(capsys, "report", _write(tmp_path, solved_demo), "-o", str(target))
    assert code == 2
    assert "NOT VALID" in target.read_text()


def test_report_from_problem_and_answer_files(capsys, tmp_path):
    problem = _csv(tmp_path)
    code, out, _ = _run(capsys, "solve", problem, "--local")
    assert code == 0
    answer = tmp_path / "answer.json"
    answer.write_text(out)
    code, out, err = _run(capsys, "report", problem, "--answer", str(answer))
    assert code == 0, err
    assert "<title>Audit report \u2014 VALID</title>" in out


def test_report_svg_chosen_by_the_output_name(capsys, tmp_path, solved_demo):
    target = tmp_path / "network.svg"
    code, _, err = _run(capsys, "report", _write(tmp_path, solved_demo), "-o", str(target))
    assert code == 0, err
    assert target.read_text().startswith('<?xml version="1.0" encoding="UTF-8"?>\n<svg')


def test_report_without_an_answer_exits_1_saying_how(capsys, tmp_path):
    code, _, err = _run(capsys, "report", str(DEMO_DIR / "repair_tickets.json"))
    assert code == 1
    assert "--answer" in err


def test_report_refuses_two_answers(capsys, tmp_path, solved_demo):
    path = _write(tmp_path, solved_demo)
    code, _, err = _run(capsys, "report", path, "--answer", path)
    assert code == 1
    assert "already holds" in err


def test_report_of_an_invalid_problem_exits_1_with_the_problem_document(capsys, tmp_path,
                                                                        solved_demo):
    solved_demo["sinks"][0]["demand"] = -1
    code, out, err = _run(capsys, "report", _write(tmp_path, solved_demo))
    assert code == 1
    assert out == ""
    assert any(e["pointer"] == "/sinks/0/demand" for e in json.loads(err)["errors"])


def test_report_of_a_file_that_is_not_json_exits_1(capsys, tmp_path):
    path = tmp_path / "answer.json"
    path.write_text('{"sources": NaN}')
    code, _, err = _run(capsys, "report", str(path))
    assert code == 1
    assert "not valid JSON" in err


def test_objective_bottleneck_shows_the_threshold_and_the_reasons(capsys, tmp_path):
    # worked by hand: min pairs a-x (1) and b-y (100); bottleneck pairs a-y and b-x (60
    # each), the longest trip 60; the soft ticket z is reachable only over a 90 trip, above
    # the threshold, so within it whoever could serve it is full. Common practice, no source.
    problem = {"sources": [{"id": "a"}, {"id": "b"}, {"id": "c"}],
               "sinks": [{"id": "x"}, {"id": "y"}, {"id": "z", "penalty": 500}],
               "costs": [[1, 60, None], [60, 100, None], [None, None, 90]]}
    path = _write(tmp_path, problem)
    code, out, err = _run(capsys, "solve", path, "--local", "--objective", "bottleneck")
    assert code == 0, err
    answer = json.loads(out)
    assert answer["certificate"]["bottleneck"]["threshold"] == 60
    assert answer["unmet"] == [{"id": "z", "amount": 1, "hard": False, "reason": "capacity"}]
    code, out, err = _run(capsys, "solve", path, "--local", "--objective", "bottleneck",
                          "--format", "table")
    assert code == 0, err
    assert "longest trip (bottleneck threshold): 60" in out
    assert "capacity (whoever could serve it is full)" in out
