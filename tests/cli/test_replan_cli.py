"""--fixed, --previous and --change-penalty: the files become the problem's fields; the
table and the report show pins and changes. Answered in-process (--local)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest

from service.cli import main

PROBLEM = {"sources": [{"id": "ann", "supply": 2}, {"id": "bob", "supply": 2}],
           "sinks": [{"id": "t1"}, {"id": "t2"}, {"id": "t3", "penalty": 40}],
           "costs": [[10, 20, 30], [15, 12, None]]}


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def _files(tmp_path: Path) -> tuple[str, str]:
    problem = tmp_path / "day.json"
    problem.write_text(json.dumps(PROBLEM))
    pins = tmp_path / "pins.csv"
    pins.write_text("from,to,flow\nbob,t1,1\n")
    return str(problem), str(pins)


def test_pins_from_csv_and_previous_answer(capsys: Any, tmp_path: Path) -> None:
    problem, pins = _files(tmp_path)
    code, out, err = _run(capsys, "solve", problem, "--local", "-q")
    assert code == 0, err
    first = json.loads(out)
    (tmp_path / "first.json").write_text(out)
    # by hand, the first plan: ann->t1 (10), bob->t2 (12), ann->t3 (30): 52
    assert first["objective"] == 52
    code, out, err = _run(capsys, "solve", problem, "--local", "-q", "--fixed", pins,
                          "--previous", str(tmp_path / "first.json"), "--change-penalty", "3")
    assert code == 0, err
    answer = json.loads(out)
    # by hand: bob->t1 pinned (15), bob->t2 kept (12), ann->t3 kept (30), ann->t1 moved
    # (penalty 3): 60; moving bob->t2 to ann instead would cost 20 + 3 + 3 more
    assert answer["objective"] == 60
    assert answer["changes"] == {"kept": 2, "moved": 1, "penalty": 3}
    assert [r for r in answer["allocation"] if r.get("fixed")] == [
        {"from": "bob", "to": "t1", "flow": 1, "cost": 15, "fixed": True}]
    code, out, err = _run(capsys, "solve", problem, "--local", "-q", "--fixed", pins,
                          "--previous", str(tmp_path / "first.json"), "--change-penalty", "3",
                          "--format", "table")
    assert code == 0, err
    assert "1 pinned" in out and "2 units kept, 1 moved, penalty 3" in out
    assert "VALID" in out


def test_pins_from_json_and_report(capsys: Any, tmp_path: Path) -> None:
    problem, _ = _files(tmp_path)
    pins = tmp_path / "pins.json"
    pins.write_text(json.dumps([{"from": "ann", "to": "t2", "flow": 1}]))
    code, out, err = _run(capsys, "solve", problem, "--local", "-q", "--fixed", str(pins))
    assert code == 0, err
    (tmp_path / "answer.json").write_text(out)
    code, _, err = _run(capsys, "report", problem, "--answer", str(tmp_path / "answer.json"),
                        "--fixed", str(pins), "-o", str(tmp_path / "r.html"))
    assert code == 0, err
    page = (tmp_path / "r.html").read_text()
    assert "<h2>Pins</h2>" in page and "(pinned)" in page and "NOT VALID" not in page
    # the same answer without the pins answers another problem: not valid
    code, _, err = _run(capsys, "verify", problem, "--answer", str(tmp_path / "answer.json"))
    assert code != 0


@pytest.mark.parametrize(("argv", "words"), [
    (["--previous", "x.json"], "go together"),
    (["--change-penalty", "2"], "go together"),
])
def test_previous_and_penalty_go_together(capsys: Any, tmp_path: Path, argv: list[str],
                                          words: str) -> None:
    problem, _ = _files(tmp_path)
    code, _, err = _run(capsys, "solve", problem, "--local", *argv)
    assert code != 0 and words in err


def test_bad_pins_csv_named(capsys: Any, tmp_path: Path) -> None:
    problem, _ = _files(tmp_path)
    bad = tmp_path / "bad.csv"
    bad.write_text("from,to,units\nbob,t1,1\n")
    code, _, err = _run(capsys, "solve", problem, "--local", "--fixed", str(bad))
    assert code != 0 and "header must be from,to,flow" in err
