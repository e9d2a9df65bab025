"""Exit codes 0, 2, 3 and 1 of solve, and the files that keep the whole answer.

Answered in this process (--local). The hand-worked problems say how their numbers come
about; OWASP's "CSV Injection" page is the source of the characters a spreadsheet runs.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
from pathlib import Path
from typing import Any

import pytest

from service.cli import main, transport

DEMO_DIR = Path(__file__).resolve().parents[2] / "service" / "demo"

# Nothing can be routed: no technician is certified for any ticket. Worked by hand:
# every ticket is unmet (fridge 2 units, hard; oven 1 unit, penalty 40), every slot idle,
# and the objective is the oven's penalty alone, 40. Common practice, no source.
NOTHING_ROUTABLE = {
    "sources": [{"id": "north", "supply": 2}, {"id": "south"}],
    "sinks": [{"id": "fridge", "demand": 2}, {"id": "oven", "penalty": 40}],
    "costs": [[None, None], [None, None]],
}


def _write(tmp_path: Path, doc: Any, name: str = "problem.json") -> str:
    path = tmp_path / name
    path.write_text(json.dumps(doc))
    return str(path)


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def _rows(path: Path) -> list[list[str]]:
    return list(csv.reader(io.StringIO(path.read_text())))


def test_a_day_with_nothing_routable_exits_3_and_keeps_the_whole_answer(capsys, tmp_path):
    problem = _write(tmp_path, NOTHING_ROUTABLE)
    plan, unmet, unused, summary = (tmp_path / n for n in (
        "plan.csv", "unmet.csv", "unused.csv", "summary.json"))
    code, out, err = _run(capsys, "solve", problem, "--local", "--format", "csv",
                          "-o", str(plan), "--unmet-csv", str(unmet),
                          "--unused-csv", str(unused), "--summary-json", str(summary))
    assert code == 3
    assert out == ""
    assert _rows(plan) == [["from", "to", "flow", "cost"]]
    # every cell is null: no source reaches either sink (README "Why a sink waits")
    assert _rows(unmet) == [["id", "amount", "demand", "hard", "reason", "reduced_cost"],
                            ["fridge", "2", "2", "true", "no-eligible-source", ""],
                            ["oven", "1", "1", "false", "no-eligible-source", ""]]
    assert _rows(unused) == [["id", "amount", "supply"], ["north", "2", "2"],
                             ["south", "1", "1"]]
    doc = json.loads(summary.read_text())
    assert (doc["exit_code"], doc["outcome"]) == (3, "hard-demand-unmet")
    record = doc["inputs"][0]
    assert record["input_sha256"] == hashlib.sha256(Path(problem).read_bytes()).hexdigest()
    assert {k: record[k] for k in ("objective", "flow_value", "hard_unmet", "soft_unmet",
                                   "unmet_sinks", "unmet_units", "unused_sources",
                                   "unused_units", "allocation_rows")} == {
        "objective": 40, "flow_value": 0, "hard_unmet": 2, "soft_unmet": 1, "unmet_sinks": 2,
        "unmet_units": 3, "unused_sources": 2, "unused_units": 3, "allocation_rows": 0}
    assert record["files"] == {"answer": str(plan), "unmet_csv": str(unmet),
                               "unused_csv": str(unused)}
    assert "some hard demand is left unmet" in record["meaning"]
    assert err.splitlines() == [f"certimatch: {problem}: HARD DEMAND UNMET: 2 units; "
                                "objective 40, 0 units routed, 3 units unmet on 2 sinks, "
                                "3 units of supply unused -> exit 3"]


def test_only_soft_demand_unmet_exits_0(capsys, tmp_path):
    unmet = tmp_path / "unmet.csv"
    code, _, err = _run(capsys, "solve", str(DEMO_DIR / "repair_tickets.json"), "--local",
                        "--unmet-csv", str(unmet))
    assert code == 0, err
    rows = _rows(unmet)[1:]
    problem = json.loads((DEMO_DIR / "repair_tickets.json").read_text())
    soft = {s["id"] for s in problem["sinks"] if "penalty" in s}
    assert rows and all(r[3] == "false" and r[0] in soft for r in rows)


def test_infeasible_exits_2_writes_the_summary_and_leaves_the_plan_alone(capsys, tmp_path):
    problem = _write(tmp_path, {**NOTHING_ROUTABLE, "unmet_demand": "reject"})
    plan, unmet, summary = tmp_path / "plan.csv", tmp_path / "unmet.csv", tmp_path / "s.json"
    plan.write_text("yesterday's plan")
    code, out, err = _run(capsys, "solve", problem, "--local", "-o", str(plan),
                          "--unmet-csv", str(unmet), "--summary-json", str(summary))
    assert code == 2
    assert plan.read_text() == "yesterday's plan"
    assert not unmet.exists()
    assert json.loads(err)["type"].endswith(":infeasible")   # stderr: the document alone
    record = json.loads(summary.read_text())["inputs"][0]
    assert (record["exit_code"], record["outcome"], record["http_status"]) == (
        2, "infeasible", 422)
    assert record["problem"]["witness"]["shortfall"] == 2
    assert record["files"] == {}


def test_invalid_problem_exits_1_with_the_problem_in_the_summary(capsys, tmp_path):
    problem = _write(tmp_path, {"sources": [{"id": "a"}], "sinks": [{"id": "b", "demand": -1}],
                                "costs": [[1]]})
    summary = tmp_path / "s.json"
    code, _, _ = _run(capsys, "solve", problem, "--local", "--summary-json", str(summary))
    assert code == 1
    doc = json.loads(summary.read_text())
    assert (doc["exit_code"], doc["outcome"]) == (1, "error")
    assert doc["inputs"][0]["problem"]["errors"][0]["pointer"] == "/sinks/0/demand"


def test_unreadable_file_exits_1_with_a_summary_saying_so(capsys, tmp_path):
    summary = tmp_path / "s.json"
    code, _, err = _run(capsys, "solve", str(tmp_path / "missing.json"), "--local",
                        "--summary-json", str(summary))
    assert code == 1
    assert "cannot read" in err
    record = json.loads(summary.read_text())["inputs"][0]
    assert record["input_sha256"] is None and record["http_status"] is None
    assert "cannot read" in record["message"]


def test_table_format_of_a_plan_with_hard_demand_unmet_exits_3(capsys, tmp_path):
    code, out, _ = _run(capsys, "solve", _write(tmp_path, NOTHING_ROUTABLE), "--local",
                        "--format", "table")
    assert code == 3
    assert "fridge      2  hard demand" in out
    assert out.splitlines()[-1].startswith("certificate check: VALID")


# --- what the service will add: "hard" on unmet rows, a "decision" ----------------------

def _answers_with(monkeypatch: pytest.MonkeyPatch, change: Any) -> None:
    """The local service, with every 200 answer of /v1/solve passed through ``change``."""
    real = transport._local_post

    def patched() -> transport.Post:
        post = real()

        def answer(path: str, body: bytes, headers: Any = None) -> transport.Reply:
            reply = post(path, body, headers)
            if path != "/v1/solve" or reply.status != 200:
                return reply
            doc = json.loads(reply.text)
            change(doc)
            return transport.Reply(200, reply.content_type, json.dumps(doc))

        return answer

    monkeypatch.setattr(transport, "_local_post", patched)


def test_a_hard_flag_on_unmet_rows_is_used_as_given(capsys, tmp_path, monkeypatch):
    def mark_hard(doc: dict[str, Any]) -> None:
        for row in doc["unmet"]:
            row["hard"] = True

    _answers_with(monkeypatch, mark_hard)
    # One soft sink left waiting; a service that calls it hard is believed.
    problem = {"sources": [{"id": "a"}], "sinks": [{"id": "x"}, {"id": "y", "penalty": 9}],
               "costs": [[1, 1]]}
    unmet = tmp_path / "unmet.csv"
    code, _, _ = _run(capsys, "solve", _write(tmp_path, problem), "--local",
                      "--unmet-csv", str(unmet))
    assert code == 3
    # a's one slot goes to x: y's only server is full
    assert _rows(unmet)[1] == ["y", "1", "1", "true", "capacity", ""]


def test_the_decision_object_is_kept_in_json_and_summary(capsys, tmp_path, monkeypatch):
    decision = {"id": "d-1", "recorded": True}
    _answers_with(monkeypatch, lambda doc: doc.update(decision=decision))
    summary = tmp_path / "s.json"
    code, out, _ = _run(capsys, "solve", str(DEMO_DIR / "parts_network.json"), "--local",
                        "--summary-json", str(summary))
    assert code == 0
    assert json.loads(out)["decision"] == decision
    assert json.loads(summary.read_text())["inputs"][0]["decision"] == decision


# --- spreadsheet safety as an option ----------------------------------------------------

# OWASP "CSV Injection": cells starting with = + - @ (and tab, carriage return) are run
# as formulas; the quote is on our list so that one quote can always be taken off again.
RISKY = ["=SUM(A1)", "+1 east", "-5 west", "@home", "'quoted", "plain"]


def _risky_problem() -> dict[str, Any]:
    return {"sources": [{"id": i} for i in RISKY], "sinks": [{"id": "s" + i} for i in RISKY],
            "costs": [[1 if i == j else None for j in range(len(RISKY))]
                      for i in range(len(RISKY))]}


def test_spreadsheet_safe_by_default_and_reversible(capsys, tmp_path):
    code, out, _ = _run(capsys, "solve", _write(tmp_path, _risky_problem()), "--local",
                        "--format", "csv")
    assert code == 0
    rows = list(csv.reader(io.StringIO(out)))[1:]
    sources = [r[0] for r in rows]
    assert sources == ["'=SUM(A1)", "'+1 east", "'-5 west", "'@home", "''quoted", "plain"]
    assert [s[1:] if s.startswith("'") else s for s in sources] == RISKY


def test_no_spreadsheet_safe_writes_ids_exactly(capsys, tmp_path):
    problem = _write(tmp_path, {**_risky_problem(), "costs": [[None] * 6] * 6})
    plan, unmet, unused = tmp_path / "p.csv", tmp_path / "u.csv", tmp_path / "i.csv"
    code, out, _ = _run(capsys, "solve", problem, "--local", "--format", "csv",
                        "--no-spreadsheet-safe", "-o", str(plan), "--unmet-csv", str(unmet),
                        "--unused-csv", str(unused))
    assert code == 3
    assert [r[0] for r in _rows(unmet)[1:]] == ["s" + i for i in RISKY]
    assert [r[0] for r in _rows(unused)[1:]] == RISKY


# --- verify --answer --------------------------------------------------------------------

def test_verify_takes_the_answer_from_its_own_file(capsys, tmp_path):
    problem = str(DEMO_DIR / "parts_network.json")
    code, out, _ = _run(capsys, "solve", problem, "--local")
    assert code == 0
    answer = tmp_path / "answer.json"
    answer.write_text(out)
    code, out, err = _run(capsys, "verify", problem, "--answer", str(answer), "--local")
    assert code == 0, err
    assert json.loads(out)["valid"] is True
    forged = json.loads(answer.read_text())
    forged["objective"] -= 1
    answer.write_text(json.dumps(forged))
    code, out, _ = _run(capsys, "verify", problem, "--answer", str(answer), "--local")
    assert code == 2
    assert json.loads(out)["valid"] is False


def test_verify_answer_for_a_csv_problem(capsys, tmp_path):
    table = tmp_path / "costs.csv"
    table.write_text(",ticket-1,ticket-2\ntech-a,5,1\ntech-b,9,\n")
    code, out, _ = _run(capsys, "solve", str(table), "--local")
    assert code == 0
    answer = tmp_path / "answer.json"
    answer.write_text(out)
    code, out, _ = _run(capsys, "verify", str(table), "--answer", str(answer), "--local")
    assert code == 0
    assert json.loads(out)["valid"] is True


def test_verify_refuses_two_answers(capsys, tmp_path):
    problem = str(DEMO_DIR / "parts_network.json")
    _, out, _ = _run(capsys, "solve", problem, "--local")
    both = _write(tmp_path, {**json.loads(Path(problem).read_text()),
                             "answer": json.loads(out)})
    code, _, err = _run(capsys, "verify", both, "--answer", both, "--local")
    assert code == 1
    assert "already holds" in err


def test_hard_unmet_is_counted_from_the_rows_or_taken_from_the_certificate():
    from service.cli.outcome import hard_unmet

    answer = {"certificate": {"hard_shortfall": 2}}
    known = [{"amount": 2, "hard": True}, {"amount": 5, "hard": False}]
    assert hard_unmet(known, answer) == 2
    unknown = [{"amount": 2, "hard": None}, {"amount": 5, "hard": None}]
    assert hard_unmet(unknown, answer) == 2                 # the problem was not read
    # Should the rows and the certificate ever disagree, the shortfall is not hidden.
    assert hard_unmet([{"amount": 3, "hard": True}], answer) == 3
    assert hard_unmet([{"amount": 1, "hard": False}], answer) == 2
    assert hard_unmet([], {"certificate": {"hard_shortfall": 0}}) == 0
