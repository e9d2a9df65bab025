"""The exact reference checker is itself checked before it judges the service.

* Every answer of ``POST /v1/solve`` on 225 seeded problems of nine families is judged valid,
  and its objective and hard shortfall equal the lexicographic optimum computed by networkx
  (``maximum_flow_value`` for stage 1, ``network_simplex`` for stage 2; networkx 3.x).
* The README's worked example, with the potentials printed there, is valid, and the
  README's figures (objective 95, dual objective 3 x 50 - (10 + 30 + 15 + 0)) follow.
* Each check of the reference fails on the answer it is about (controls: a checker that
  accepts everything would pass the first test).
"""

from __future__ import annotations

import copy
from fractions import Fraction

import pytest
from exact_http import PROBLEM, post
from exact_optimum import optimum
from exact_problems import FAMILIES, instance
from exact_reference import check_answer, decimal, read_problem

SEEDS = range(25)



@pytest.mark.parametrize("family", sorted(FAMILIES))
def test_reference_accepts_every_answer_and_agrees_with_networkx(client, family):
    answered = 0
    for seed in SEEDS:
        problem = instance(family, seed)
        status, answer = post(client, "/v1/solve", problem)
        shortfall, best = optimum(problem)      # networkx, see module docstring
        if status == 422 and answer["type"] == PROBLEM + "infeasible":
            assert problem.get("unmet_demand") == "reject" and shortfall > 0, (seed, answer)
            continue
        assert status == 200, (seed, answer)
        answered += 1
        valid, reasons = check_answer(problem, answer)
        assert valid, (seed, reasons)
        assert answer["certificate"]["hard_shortfall"] == shortfall, seed
        scale = read_problem(problem).scale
        assert round(decimal(answer["objective"]) * scale) == best * scale, (seed, best)
    assert answered >= len(SEEDS) // 2


README_PROBLEM = {
    "sources": [{"id": "north", "supply": 2}, {"id": "south", "supply": 1}],
    "sinks": [{"id": "fridge"}, {"id": "oven"}, {"id": "washer", "penalty": 50}],
    "costs": [[20, 35, 60], [30, 25, None]],
}

# README, "The certificate, in plain words": the answer and the potentials printed there.
README_ANSWER = {
    "objective": 95, "flow_value": 2,
    "allocation": [{"from": "north", "to": "fridge", "flow": 1, "cost": 20},
                   {"from": "south", "to": "oven", "flow": 1, "cost": 25}],
    "unmet": [{"id": "washer", "amount": 1}], "unused": [{"id": "north", "amount": 1}],
    "certificate": {
        "negated": False,
        "potentials": {"north": 50, "south": 40, "fridge": 30, "oven": 15, "washer": 0},
        "virtual_potentials": {"super_source": 50, "super_sink": 0, "hard_pool": 0},
        "hard_shortfall": 0,
        "cut": {"sink_side": [], "sinks": [], "demand": 0, "capacity": 0},
        "dual_objective": 3 * 50 - (10 + 30 + 15 + 0)},
}


def test_reference_accepts_the_readme_example():
    assert check_answer(README_PROBLEM, README_ANSWER) == (True, [])
    assert optimum(README_PROBLEM) == (0, Fraction(95))


def _broken(change) -> set[str]:
    answer = copy.deepcopy(README_ANSWER)
    change(answer)
    valid, reasons = check_answer(README_PROBLEM, answer)
    assert not valid
    return {name for name, _ in reasons}


@pytest.mark.parametrize("check, change", [
    ("sense", lambda a: a["certificate"].update(negated=True)),
    ("allocation_arcs", lambda a: a["allocation"].append(dict(a["allocation"][0]))),
    ("allocation_arcs", lambda a: a["allocation"][0].update(arc=0)),
    ("allocation_costs", lambda a: a["allocation"][0].update(cost=21)),
    ("supply", lambda a: a["allocation"].append(
        {"from": "south", "to": "fridge", "flow": 1, "cost": 30})),
    ("demand", lambda a: a["allocation"][1].update(flow=2, cost=50)),
    ("unused", lambda a: a.update(unused=[])),
    ("unmet", lambda a: a["unmet"].append({"id": "washer", "amount": 1})),
    ("unmet", lambda a: a["unmet"][0].update(hard=True)),      # the washer has a penalty
    ("flow_value", lambda a: a.update(flow_value=3)),
    ("objective", lambda a: a.update(objective=95.5)),
    ("hard_shortfall", lambda a: a["certificate"].update(hard_shortfall=1)),
    ("shortfall_cut", lambda a: a["certificate"]["cut"].update(sink_side=["oven"])),
    ("potentials", lambda a: a["certificate"]["potentials"].pop("oven")),
    ("potentials", lambda a: a["certificate"]["potentials"].update(oven=15.5)),
    ("dual_feasibility", lambda a: a["certificate"]["potentials"].update(washer=-11)),
    ("complementary_slackness", lambda a: a["certificate"]["potentials"].update(oven=16)),
    ("dual_objective", lambda a: a["certificate"].update(dual_objective=94)),
])
def test_each_reference_check_fails_on_its_own_defect(check, change):
    assert check in _broken(change)


def test_reference_reads_potentials_of_fractional_data_on_the_grid():
    # Fractional data: a reported decimal stands for its value rounded to the 10**-6 grid
    # (half to even, exactly); whole-number data: a reported value must be whole.
    problem = {**README_PROBLEM, "costs": [[20.5, 35, 60], [30, 25, None]]}
    answer = copy.deepcopy(README_ANSWER)
    answer["allocation"][0]["cost"] = 20.5
    answer["objective"] = answer["certificate"]["dual_objective"] = 95.5
    # the only change to the README's proof: fridge's potential follows the dearer arc
    answer["certificate"]["potentials"]["fridge"] = 29.5
    valid, reasons = check_answer(problem, answer)
    assert valid, reasons
    answer["certificate"]["potentials"]["oven"] = 15.0000004      # rounds to 15.000000
    assert check_answer(problem, answer)[0]
    answer["certificate"]["potentials"]["oven"] = 15.0000006      # rounds to 15.000001
    assert not check_answer(problem, answer)[0]
