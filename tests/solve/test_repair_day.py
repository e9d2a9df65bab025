"""The realistic demo day (service/demo/repair_day.json): what tests/perf/repair_day.py
writes, solved and verified under min and bottleneck, its threshold held to the networkx
reference of tests/solve/test_bottleneck.py."""

from __future__ import annotations

import json
from fractions import Fraction
from typing import Any

from tests.perf.repair_day import DAY, make_day
from tests.solve.test_bottleneck import _reference_threshold


def test_the_day_is_what_the_generator_writes() -> None:
    assert json.loads(DAY.read_text(encoding="utf-8")) == make_day()


def test_the_day_solves_and_verifies_under_both_objectives(solve: Any, verify: Any) -> None:
    day = make_day()
    assert (len(day["sources"]), len(day["sinks"])) == (40, 300)
    _, plain = solve(day)
    status, short = solve({**day, "objective": "bottleneck"})
    assert status == 200
    theta = short["certificate"]["bottleneck"]["threshold"]
    # reference: networkx maximum flows over the sorted costs (tests/solve/test_bottleneck.py)
    assert Fraction(theta) == _reference_threshold({**day, "objective": "bottleneck"})
    longest = max(r["cost"] // r["flow"] for r in plain["allocation"])
    assert theta <= longest and plain["objective"] <= short["objective"]
    for objective, answer in (("min", plain), ("bottleneck", short)):
        status, verdict = verify({**day, "objective": objective}, answer)
        assert status == 200 and verdict["valid"]
        assert set(answer["data"]) == {r["id"] for r in day["sources"] + day["sinks"]}
