"""``certimatch solve --alternatives K``: the next-best plans asked for, listed in the table
with what each costs more and how it differs from the optimum."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from service.cli import main

#: The scipy.optimize.linear_sum_assignment docstring example; its optimum is 5, and the
#: six permutations cost 5, 6, 6, 7, 9, 11 (worked by hand).
GOOD = {"sources": [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}],
        "sinks": [{"id": "c0"}, {"id": "c1"}, {"id": "c2"}],
        "costs": [[4, 1, 3], [2, 0, 5], [3, 2, 2]]}


def _run(capsys: pytest.CaptureFixture[str], tmp_path: Path, *argv: str
         ) -> tuple[int, str]:
    path = tmp_path / "problem.json"
    path.write_text(json.dumps(GOOD))
    code = main(["solve", str(path), "--local", *argv])
    return code, capsys.readouterr().out


def test_the_table_lists_the_alternatives(capsys, tmp_path):
    code, out = _run(capsys, tmp_path, "--format", "table", "--alternatives", "3")
    assert code == 0
    assert "next-best plans: 3 of 3 asked" in out
    rows = [line.split() for line in out.splitlines() if line.lstrip().startswith("#")]
    assert [(r[0], r[1], r[2]) for r in rows] == [("#1", "6", "+1"), ("#2", "6", "+1"),
                                                  ("#3", "7", "+2")]
    # the first runner-up swaps r0 and r1: two pairs taken up, two dropped
    assert rows[0][3:] == ["+r0→c0,", "+r1→c1,", "-r0→c1,", "-r1→c0"]
    assert "certificate check: VALID" in out


def test_all_plans_when_fewer_exist(capsys, tmp_path):
    code, out = _run(capsys, tmp_path, "--format", "table", "--alternatives", "9")
    assert code == 0
    assert "5 is all there is" in out


def test_the_json_answer_carries_them(capsys, tmp_path):
    code, out = _run(capsys, tmp_path, "--alternatives", "2")
    assert code == 0
    assert [a["objective"] for a in json.loads(out)["alternatives"]] == [6, 6]


def test_a_bad_k_is_the_services_422(capsys, tmp_path):
    path = tmp_path / "problem.json"
    path.write_text(json.dumps(GOOD))
    code = main(["solve", str(path), "--local", "--alternatives", "51"])
    err = capsys.readouterr().err
    assert code != 0 and "/alternatives" in err
