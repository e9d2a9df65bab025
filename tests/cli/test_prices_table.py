"""``certimatch solve --prices --format table``: the five cheapest overrides, held to every
plan enumerated (tests/brute.py)."""

from __future__ import annotations

import json
from fractions import Fraction
from pathlib import Path

import pytest

from service.cli import main
from tests.brute import plans

# A small dispatch day: four technicians, four tickets, one pair not allowed.
PROBLEM = {"sources": [{"id": "ana"}, {"id": "ben"}, {"id": "cai"}, {"id": "dee"}],
           "sinks": [{"id": "t1"}, {"id": "t2"}, {"id": "t3"}, {"id": "t4"}],
           "costs": [[4, 9, 3, 7], [2, 6, None, 5], [8, 1, 7, 6], [5, 3, 6, 2]]}


def _overrides_by_brute_force(problem: dict) -> list[tuple[str, str, str, Fraction]]:
    every = plans(problem)
    best = every[0]
    used = {key for key, amount in best.flows}
    out = []
    for s, row in zip(problem["sources"], problem["costs"], strict=True):
        for t, c in zip(problem["sinks"], row, strict=True):
            if c is None:
                continue
            key = (s["id"], t["id"], None)
            on = key in used
            others = [p.objective for p in every if (key in dict(p.flows)) != on]
            if others:
                out.append(("forbid" if on else "force", s["id"], t["id"],
                            min(others) - best.objective))
    return sorted(out, key=lambda o: o[3])


def test_the_table_lists_the_five_cheapest_overrides(tmp_path: Path,
                                                     capsys: pytest.CaptureFixture[str]):
    path = tmp_path / "day.json"
    path.write_text(json.dumps(PROBLEM))
    code = main(["solve", str(path), "--local", "--prices", "--format", "table"])
    out = capsys.readouterr().out
    assert code == 0
    lines = out.splitlines()
    start = next(k for k, line in enumerate(lines) if line.startswith("cheapest overrides"))
    rows = [line.split() for line in lines[start + 2:start + 7]]
    want = _overrides_by_brute_force(PROBLEM)
    # reference: tests/brute.py; ties may list in either order, so compare the deltas and
    # that every listed override has the delta brute force gives it
    assert [Fraction(r[3]) for r in rows] == [w[3] for w in want[:5]]
    by_key = {(w[0], w[1], w[2]): w[3] for w in want}
    for what, frm, to, delta in rows:
        assert by_key[(what, frm, to)] == Fraction(delta)
    assert "(5 of " in lines[start]


def test_without_prices_the_table_has_no_overrides(tmp_path: Path,
                                                   capsys: pytest.CaptureFixture[str]):
    path = tmp_path / "day.json"
    path.write_text(json.dumps(PROBLEM))
    assert main(["solve", str(path), "--local", "--format", "table"]) == 0
    assert "cheapest overrides" not in capsys.readouterr().out
