"""``data`` on sources, sinks and nodes: carried through untouched, bounded, checked."""

from __future__ import annotations

import copy
import json
from typing import Any

import numpy as np
import pytest

from schemas.problem import MAX_DATA_BYTES
from tests.reference import INTEGER_FAMILIES, instance


def _with_data(problem: dict[str, Any], rng: np.random.Generator) -> dict[str, Any]:
    out = copy.deepcopy(problem)
    for name in ("sources", "nodes", "sinks"):
        for i, row in enumerate(out.get(name, [])):
            if rng.random() < 0.6:
                row["data"] = {"name": f"{name}-{i}", "skills": ["gas", "electric"][: i % 3],
                               "rank": int(rng.integers(100)), "note": None}
    return out


@pytest.mark.parametrize("family", INTEGER_FAMILIES)
def test_data_changes_nothing_but_comes_back(solve: Any, verify: Any, family: str) -> None:
    # the same problem without data is the reference: data must not change the answer
    for seed in range(12):
        plain = instance(family, seed)
        carried = _with_data(plain, np.random.default_rng(seed))
        s1, a1 = solve(plain)
        s2, a2 = solve(carried)
        assert s1 == s2
        if s1 != 200:
            continue
        sent = {row["id"]: row["data"] for name in ("sources", "nodes", "sinks")
                for row in carried.get(name, []) if "data" in row}
        assert a2.pop("data", {}) == sent
        # each answer has a decision of its own (another id, time and input digest)
        assert a1.pop("decision")["id"] != a2.pop("decision")["id"]
        assert a1 == a2
        status, verdict = verify(carried, {**a2, "data": sent})
        assert status == 200 and verdict["valid"]


def _small() -> dict[str, Any]:
    return {"sources": [{"id": "ann", "data": {"van": "V-3"}}, {"id": "bo"}],
            "sinks": [{"id": "t1", "data": {"address": "4 Birch Lane"}}, {"id": "t2"}],
            "costs": [[1, 2], [2, 1]]}


def test_tampered_data_is_rejected(solve: Any, verify: Any) -> None:
    problem = _small()
    _, answer = solve(problem)
    assert answer["data"] == {"ann": {"van": "V-3"}, "t1": {"address": "4 Birch Lane"}}
    for forged in ({"ann": {"van": "V-4"}, "t1": {"address": "4 Birch Lane"}},
                   {"t1": {"address": "4 Birch Lane"}, "ann": {"van": "V-3"}},
                   {"ann": {"van": "V-3"}},
                   {**answer["data"], "bo": {}}):
        status, verdict = verify(problem, {**answer, "data": forged})
        assert status == 200 and not verdict["valid"]
        assert [c["name"] for c in verdict["checks"] if not c["passed"]] == ["data"]


@pytest.mark.parametrize(("value", "message"), [
    ([1, 2], "must be a JSON object"),
    ("text", "must be a JSON object"),
    ({"k": "x" * MAX_DATA_BYTES}, f"must be at most {MAX_DATA_BYTES} bytes"),
])
@pytest.mark.parametrize("where", ["sources", "sinks"])
def test_bad_data_is_422_naming_the_field(solve: Any, value: Any, message: str,
                                          where: str) -> None:
    problem = _small()
    problem[where][1]["data"] = value
    status, body = solve(problem)
    assert status == 422
    assert [e["pointer"] for e in body["errors"]] == [f"/{where}/1/data"]
    assert body["errors"][0]["detail"].startswith(message)


def test_the_bound_is_on_compact_utf8_json(solve: Any) -> None:
    # {"k":"..."} is 8 bytes around the string; a 2-byte character counts twice
    problem = _small()
    problem["sinks"][1]["data"] = {"k": "é" * ((MAX_DATA_BYTES - 8) // 2)}
    assert len(json.dumps(problem["sinks"][1]["data"], ensure_ascii=False,
                          separators=(",", ":")).encode()) == MAX_DATA_BYTES
    assert solve(problem)[0] == 200
    problem["sinks"][1]["data"]["k"] += "e"
    assert solve(problem)[0] == 422


def test_nodes_carry_data(solve: Any) -> None:
    problem = {"sources": [{"id": "depot"}], "nodes": [{"id": "hub", "data": {"dock": 2}}],
               "sinks": [{"id": "shop"}],
               "arcs": [{"from": "depot", "to": "hub", "cost": 1},
                        {"from": "hub", "to": "shop", "cost": 1}]}
    status, answer = solve(problem)
    assert status == 200 and answer["data"] == {"hub": {"dock": 2}}


def test_null_data_is_none(solve: Any) -> None:
    problem = _small()
    problem["sources"][1]["data"] = None
    status, answer = solve(problem)
    assert status == 200 and "bo" not in answer["data"]
