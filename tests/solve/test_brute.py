"""The brute-force enumeration of tests/brute.py held to two outside references, so that
the ranked answers checked against it are checked against something right."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import linear_sum_assignment

from tests.brute import plans
from tests.reference import solve_networkx


def _matrix_problem(rng, n, m, forbid_p=0.0, objective="min"):
    costs = rng.integers(0, 20, size=(n, m)).tolist()
    for i in range(n):
        for j in range(m):
            if rng.random() < forbid_p:
                costs[i][j] = None
    return {"sources": [{"id": f"s{i}"} for i in range(n)],
            "sinks": [{"id": f"t{j}"} for j in range(m)], "costs": costs,
            "objective": objective}


@pytest.mark.parametrize("seed", range(12))
def test_best_plan_is_the_assignment_optimum(seed):
    # reference library: scipy.optimize.linear_sum_assignment on the full matrix
    rng = np.random.default_rng(seed)
    n, m = int(rng.integers(1, 6)), int(rng.integers(1, 6))
    problem = _matrix_problem(rng, n, m, objective="max" if seed % 3 == 0 else "min")
    found = plans(problem)
    rows, cols = linear_sum_assignment(np.array(problem["costs"]),
                                       maximize=problem["objective"] == "max")
    assert found[0].objective == int(np.array(problem["costs"])[rows, cols].sum())
    # every plan listed serves min(n, m) tickets, each once
    assert all(sum(a for _, a in p.flows) == min(n, m) for p in found)


def test_every_permutation_is_a_plan():
    # common practice, no source: a complete n x n assignment has n! perfect matchings
    rng = np.random.default_rng(3)
    assert len(plans(_matrix_problem(rng, 5, 5))) == 120


@pytest.mark.parametrize("seed", range(12))
def test_best_plan_matches_networkx_on_transportation(seed):
    # reference library: networkx network simplex (tests/reference.py)
    rng = np.random.default_rng([seed, 7])
    n, m = int(rng.integers(1, 4)), int(rng.integers(1, 4))
    sinks = [{"id": f"t{j}", "demand": int(rng.integers(1, 3))} for j in range(m)]
    for t in sinks:
        if rng.random() < 0.4:
            t["penalty"] = int(rng.integers(0, 30))
    arcs = [{"from": f"s{i}", "to": f"t{j}", "cost": int(rng.integers(-5, 15)),
             "capacity": int(rng.integers(1, 3)) if rng.random() < 0.5 else None}
            for i in range(n) for j in range(m) if rng.random() < 0.8]
    if not arcs:
        arcs = [{"from": "s0", "to": "t0", "cost": 1}]
    problem = {"sources": [{"id": f"s{i}", "supply": int(rng.integers(1, 4))}
                           for i in range(n)], "sinks": sinks, "arcs": arcs}
    assert plans(problem)[0].objective == solve_networkx(problem).objective
