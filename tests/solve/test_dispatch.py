"""Shape dispatch and engines, unbounded cycles, stage 1 (the least hard shortfall and its cut)."""

from __future__ import annotations

from typing import Any

import examples
import numpy as np
import pytest
from examples import arcs, matrix, net_of, unit

from service.errors import Unbounded
from service.solve import dispatch
from service.solve.dispatch import shape_of
from service.solve.feasibility import check_bounded, least_shortfall, shortfall_of_matching, witness

# -- shapes and engines -----------------------------------------------------------------------


def shape_and_solver(problem: dict[str, Any]) -> tuple[str, str]:
    net = net_of(problem)
    solution = dispatch.solve(net)
    assert solution.shape == shape_of(net)
    return solution.shape, solution.solver


def test_square_dense_unit_matrix_is_assignment_on_lapjv():
    assert shape_and_solver(matrix([[4, 1, 3], [2, 0, 5], [3, 2, 2]])) == (
        "assignment", "lapjv")


def test_square_matrix_with_forbidden_cells_stays_on_lapjv():
    # 6 of 9 cells allowed (dense); the surcharge on forbidden cells keeps them unused.
    problem = matrix([[4, None, 3], [2, 0, None], [None, 2, 2]])
    assert shape_and_solver(problem) == ("assignment", "lapjv")
    flow = dispatch.solve(net_of(problem)).flow
    # common practice, no source: the two perfect matchings avoiding the forbidden cells
    # cost 4 + 0 + 2 = 6 and 3 + 2 + 2 = 7
    assert sorted(flow.arc.tolist()) == [0, 4, 8]


def test_square_matrix_whose_allowed_cells_admit_no_perfect_matching():
    # Two sources reach only the first sink: lapjv's best uses a forbidden cell, so the
    # dispatcher moves on, as it does for scipy's "infeasible".
    problem = matrix([[1, None, 2], [1, None, None], [1, None, None]])
    assert shape_and_solver(problem)[1] == "min_cost_flow"


def test_square_matrix_with_costs_beyond_exact_float64_goes_to_scipy():
    # 6 decimals make these 2 x 10**15 apart on the cost grid: 2 x that is above 2**50
    big = 999_999_999.5
    assert shape_and_solver(matrix([[0.5, big], [-big, 0]])) == (
        "assignment", "linear_sum_assignment")


def test_mostly_null_matrix_is_assignment_on_the_sparse_engine():
    # 3 allowed cells of 9: under half, so the sparse engine.
    assert shape_and_solver(matrix([[1, None, None], [None, 2, None], [None, None, 3]])) == (
        "assignment", "min_weight_full_bipartite_matching")


def test_unit_arcs_are_assignment_on_the_sparse_engine():
    problem = arcs([("s0", "t0", 1), ("s0", "t1", 2), ("s1", "t1", 1)], 2, 2)
    assert shape_and_solver(problem) == ("assignment", "min_weight_full_bipartite_matching")


def test_rectangular_assignment_covers_the_smaller_side():
    net = net_of(matrix([[3, 1, 2], [1, 3, 2]]))
    solution = dispatch.solve(net)
    assert solution.solver == "linear_sum_assignment"
    assert int(solution.flow.amount.sum()) == 2
    assert solution.shortfall.amount == 1


@pytest.mark.parametrize("problem", [
    # A source with no allowed cell: no matching covers the two sources.
    matrix([[1, 2], [None, None]]),
    # Two sources that both reach only one sink: no matching covers either side.
    arcs([("s0", "t0", 1), ("s1", "t0", 2)], 2, 2),
], ids=["dense", "sparse"])
def test_assignment_without_a_covering_matching_falls_through_to_min_cost_flow(problem):
    assert shape_and_solver(problem) == ("assignment", "min_cost_flow")


@pytest.mark.parametrize(("problem", "shape"), [
    ({**matrix([[1, 2]]), "sources": [{"id": "s0", "supply": 2}]}, "transportation"),
    ({**matrix([[1, 2]]), "sinks": [{"id": "t0", "penalty": 3}, {"id": "t1"}]}, "transportation"),
    ({"sources": unit("s", 1), "sinks": unit("t", 1),
      "arcs": [{"from": "s0", "to": "t0", "cost": 1, "capacity": 2}]}, "transportation"),
    (arcs([("s0", "t0", 1), ("s0", "t0", 2)], 1, 1), "transportation"),        # parallel arcs
    ({"sources": unit("s", 1), "sinks": unit("t", 1),
      "arcs": [{"from": "s0", "to": "t0", "cost": 1, "capacity": 1}]}, "assignment"),
    ({"sources": unit("s", 1), "nodes": [{"id": "h"}], "sinks": unit("t", 1),
      "arcs": [{"from": "s0", "to": "h", "cost": 1}, {"from": "h", "to": "t0", "cost": 1}]},
     "transshipment"),
    (arcs([("s0", "t0", 1), ("t0", "s1", 1), ("s1", "t1", 1)], 2, 2), "transshipment"),
    (arcs([("s0", "s1", 1), ("s1", "t0", 1)], 2, 1), "transshipment"),
], ids=["supply-2", "soft-sink", "capacity-2", "parallel", "capacity-1", "node",
        "sink-to-source", "source-to-source"])
def test_shape_classification(problem, shape):
    assert shape_of(net_of(problem)) == shape


def test_transportation_uses_the_network_simplex():
    problem = {**matrix([[1, 2]]), "sources": [{"id": "s0", "supply": 2}]}
    assert shape_and_solver(problem) == ("transportation", "network_simplex")


def test_transportation_with_a_binding_capacity_uses_min_cost_flow():
    problem = {"sources": [{"id": "s0", "supply": 2}], "sinks": [{"id": "t0", "demand": 2}],
               "arcs": [{"from": "s0", "to": "t0", "cost": 1, "capacity": 1},
                        {"from": "s0", "to": "t0", "cost": 3}]}
    assert shape_and_solver(problem) == ("transportation", "min_cost_flow")


def test_transshipment_uses_min_cost_flow():
    problem = {"sources": unit("s", 1), "nodes": [{"id": "h"}], "sinks": unit("t", 1),
               "arcs": [{"from": "s0", "to": "h", "cost": 1}, {"from": "h", "to": "t0", "cost": 1}]}
    assert shape_and_solver(problem) == ("transshipment", "min_cost_flow")


# -- stage 1: unbounded cycles and the least hard shortfall ------------------------------------

LOOP = {
    "sources": [{"id": "s"}], "nodes": [{"id": "u"}, {"id": "v"}], "sinks": [{"id": "t"}],
    "arcs": [{"from": "s", "to": "u", "cost": 1}, {"from": "u", "to": "v", "cost": -3},
             {"from": "v", "to": "u", "cost": 1}, {"from": "v", "to": "t", "cost": 1}],
}


def test_an_unbounded_negative_cycle_is_named():
    with pytest.raises(Unbounded) as info:
        check_bounded(net_of(LOOP))
    assert sorted(info.value.extra["cycle"]) == ["u", "v"]
    assert "-2" in info.value.detail         # -3 + 1 per turn


def test_a_capacity_on_the_cycle_makes_it_bounded():
    capped = {**LOOP, "arcs": [{**a, "capacity": 4} if a["from"] == "v" and a["to"] == "u"
                               else a for a in LOOP["arcs"]]}
    check_bounded(net_of(capped))             # no exception


def test_a_negative_arc_on_no_cycle_is_bounded():
    check_bounded(net_of(arcs([("s0", "t0", -5)], 1, 1)))


def test_maximising_a_positive_cycle_is_unbounded():
    flipped = {**LOOP, "objective": "max",
               "arcs": [{**a, "cost": -a["cost"]} for a in LOOP["arcs"]]}
    with pytest.raises(Unbounded):
        check_bounded(net_of(flipped))


#: X and Y need 10; A (supply 5, unbounded arcs to X and Y) and B -> X (capacity 2) reach them.
SHORT = examples.SHORT


def test_least_shortfall_and_its_cut_on_a_hand_example():
    net = net_of(SHORT)
    shortfall = least_shortfall(net)
    assert shortfall.amount == 3
    assert [net.ids[i] for i in np.flatnonzero(shortfall.sink_side)] == ["A", "X", "Y"]
    assert witness(net, shortfall) == {
        "sinks": ["X", "Y"], "sources": ["A"],
        "arcs": [{"from": "B", "to": "X", "capacity": 2}],
        "demand": 10, "capacity": 7, "shortfall": 3,
    }


def test_soft_sinks_do_not_count_towards_the_hard_shortfall():
    soft_y = {**SHORT, "sinks": [{"id": "X", "demand": 6}, {"id": "Y", "demand": 4, "penalty": 1},
                                 {"id": "Z", "demand": 3}]}
    # Without Y, X's 6 are reachable: A's 5 and B's 2.
    assert least_shortfall(net_of(soft_y)).amount == 0


def test_no_shortfall_gives_an_empty_sink_side():
    enough = {**SHORT, "sources": [{"id": "A", "supply": 8}, {"id": "B", "supply": 10}]}
    shortfall = least_shortfall(net_of(enough))
    assert shortfall.amount == 0 and not shortfall.sink_side.any()


def test_shortfall_of_a_matching_with_more_sinks_than_sources():
    net = net_of(matrix([[1, 2, 3], [4, 5, 6]]))
    shortfall = shortfall_of_matching(net, 2)
    assert shortfall.amount == 1
    w = witness(net, shortfall)
    assert (w["demand"], w["capacity"], w["shortfall"]) == (3, 2, 1)


@pytest.mark.parametrize("seed", range(40))
def test_the_cheapest_arc_per_pair_is_the_first_of_each_pair_in_a_three_key_sort(seed):
    # Reference: numpy's lexsort by (pair, cost, position), the first of each pair; the
    # network simplex sees only these arcs, so the answer's bytes depend on this choice.
    from service.solve.engines.transportation import _cheapest_per_pair

    rng = np.random.default_rng(seed)
    m, pairs = int(rng.integers(0, 400)), int(rng.integers(1, 60))
    key = rng.integers(0, pairs, m)
    cost = rng.integers(-3, 4, m)            # few costs: many ties among parallel arcs
    order = np.lexsort((np.arange(m), cost, key))
    expected = order[np.diff(key[order], prepend=-1) != 0]
    assert np.array_equal(_cheapest_per_pair(key, cost, pairs), expected)
    # past 2**32 pairs the same answer comes from the lexsort itself
    assert np.array_equal(_cheapest_per_pair(key, cost, 2**33), expected)
