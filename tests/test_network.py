"""The network model, shape dispatch, stage 1, shortest paths and exact sums, without HTTP."""

from __future__ import annotations

from typing import Any

import examples
import networkx as nx
import numpy as np
import pytest

from schemas import ProblemSchema
from service import dispatch
from service.certificate import exact_dot
from service.dispatch import shape_of
from service.errors import InvalidProblem, OutOfRange, TooLarge, Unbounded
from service.feasibility import check_bounded, least_shortfall, shortfall_of_matching, witness
from service.network import COST_DECIMALS, build_network
from service.paths import DenseBlock, bellman_ford, cycle_through_pred
from service.settings import Settings


def net_of(problem: dict[str, Any], **limits: int):
    return build_network(ProblemSchema().load(problem), Settings(**limits))


def unit(prefix: str, k: int) -> list[dict[str, str]]:
    return [{"id": f"{prefix}{i}"} for i in range(k)]


def matrix(costs: list[list[Any]]) -> dict[str, Any]:
    return {"sources": unit("s", len(costs)), "sinks": unit("t", len(costs[0])), "costs": costs}


def arcs(pairs: list[tuple[str, str, float]], n: int, m: int, **extra: Any) -> dict[str, Any]:
    return {"sources": unit("s", n), "sinks": unit("t", m),
            "arcs": [{"from": a, "to": b, "cost": c} for a, b, c in pairs], **extra}


# -- normalisation ----------------------------------------------------------------------------


def test_nodes_are_indexed_sources_then_nodes_then_sinks():
    net = net_of({"sources": [{"id": "b"}, {"id": "a"}], "nodes": [{"id": "h"}],
                  "sinks": [{"id": "z"}, {"id": "y"}],
                  "arcs": [{"from": "b", "to": "h", "cost": 1},
                           {"from": "h", "to": "y", "cost": 1}]})
    assert net.ids == ["b", "a", "h", "z", "y"]
    assert (net.n_sources, net.n_nodes, net.n_sinks, net.sink_offset) == (2, 1, 2, 3)
    assert net.arcs.tail.tolist() == [0, 2] and net.arcs.head.tolist() == [2, 4]


def test_matrix_becomes_its_allowed_cells_row_major():
    net = net_of(matrix([[1, None, 3], [None, 5, 6]]))
    arcs = net.arcs
    assert list(zip(arcs.tail.tolist(), arcs.head.tolist(), strict=True)) == [
        (0, 2), (0, 4), (1, 3), (1, 4)]
    # arc ids of a matrix are cell indices row * columns + column
    assert arcs.id.tolist() == [0, 2, 4, 5]
    assert arcs.cost.tolist() == [1, 3, 5, 6]
    assert not arcs.bounded.any()
    assert net.arc_exists(np.arange(-1, 7)).tolist() == [
        False, True, False, True, False, True, True, False]


def test_max_costs_are_held_negated():
    net = net_of({**matrix([[1, 2]]), "objective": "max"})
    assert net.arcs.cost.tolist() == [-1, -2] and net.sign == -1


def test_defaults_give_unit_supply_and_demand():
    net = net_of(matrix([[1]]))
    assert net.supply.tolist() == [1] and net.demand.tolist() == [1]
    assert not net.soft.any() and not net.maximize and not net.reject_unmet


def test_integer_data_stays_integer():
    net = net_of({"sources": [{"id": "s", "supply": 3}],
                  "sinks": [{"id": "t", "demand": 2, "penalty": 7}],
                  "arcs": [{"from": "s", "to": "t", "cost": -4, "capacity": 2}]})
    assert net.cost_scale == 1
    arcs = net.arcs
    for array in (arcs.cost, net.penalty, net.supply, net.demand, arcs.capacity):
        assert array.dtype == np.int64
    assert (arcs.cost.tolist(), net.penalty.tolist(), arcs.capacity.tolist()) == (
        [-4], [7], [2])


def test_whole_valued_floats_are_whole():
    # 2.0 is the number 2 in JSON: no reason to move to the fractional grid.
    assert net_of(matrix([[2.0, 3]])).cost_scale == 1


def test_fractional_costs_are_scaled_to_six_decimals():
    net = net_of({"sources": [{"id": "s"}], "sinks": [{"id": "t", "penalty": 2.25}, {"id": "u"}],
                  "costs": [[1.5, 2]]})
    assert COST_DECIMALS == 6
    assert net.cost_scale == 10**6
    # Whole costs move to the same grid, so that sums stay comparable.
    assert net.arcs.cost.tolist() == [1_500_000, 2_000_000]
    assert net.penalty.tolist() == [2_250_000, 0]
    assert net.arcs.cost.dtype == np.int64


def test_digits_beyond_the_sixth_are_rounded():
    net = net_of(matrix([[0.1234567, 0.1234564, -0.0000009]]))
    assert net.arcs.cost.tolist() == [123457, 123456, -1]


def test_a_fractional_penalty_alone_moves_costs_to_the_grid():
    net = net_of({"sources": [{"id": "s"}], "sinks": [{"id": "t", "penalty": 0.5}],
                  "costs": [[3]]})
    assert net.cost_scale == 10**6
    assert net.arcs.cost.tolist() == [3_000_000]


def test_cross_field_errors_are_collected_with_pointers():
    with pytest.raises(InvalidProblem) as info:
        net_of({"sources": [{"id": "s"}], "sinks": [{"id": "s"}],
                "arcs": [{"from": "s", "to": "s", "cost": 1}]})
    assert [e["pointer"] for e in info.value.errors] == ["/sinks/0/id"]


def test_size_limits_raise_too_large():
    with pytest.raises(TooLarge, match="MAX_NODES"):
        net_of(matrix([[1, 2], [3, 4]]), max_nodes=3)
    with pytest.raises(TooLarge, match="MAX_CELLS"):
        net_of(matrix([[1, 2], [3, 4]]), max_cells=3)


# -- shapes and engines -----------------------------------------------------------------------


def shape_and_solver(problem: dict[str, Any]) -> tuple[str, str]:
    net = net_of(problem)
    solution = dispatch.solve(net)
    assert solution.shape == shape_of(net)
    return solution.shape, solution.solver


def test_dense_unit_matrix_is_assignment_on_the_dense_engine():
    assert shape_and_solver(matrix([[4, 1, 3], [2, 0, 5], [3, 2, 2]])) == (
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


def test_non_assignment_shapes_use_min_cost_flow():
    problem = {**matrix([[1, 2]]), "sources": [{"id": "s0", "supply": 2}]}
    assert shape_and_solver(problem) == ("transportation", "min_cost_flow")


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


# -- shortest paths ---------------------------------------------------------------------------


def test_bellman_ford_without_a_negative_cycle():
    # 0 -> 1 (2), 1 -> 2 (-1), 0 -> 2 (4), 2 -> 3 (1); the root reaches every node at 0.
    tail, head = np.array([0, 1, 0, 2]), np.array([1, 2, 2, 3])
    paths = bellman_ford(4, tail, head, np.array([2, -1, 4, 1]))
    assert paths.converged
    assert paths.dist.tolist() == [0, 0, -1, 0]


def test_bellman_ford_distances_give_nonnegative_reduced_costs():
    # The property the certificate relies on: c - pi(i) + pi(j) >= 0 with pi = -dist. Arcs
    # only go from lower to higher index, so there is no cycle even with negative costs.
    rng = np.random.default_rng(7)
    n, m = 12, 40
    a, b = rng.integers(0, n, m), rng.integers(0, n, m)
    keep = a != b
    tail, head = np.minimum(a, b)[keep], np.maximum(a, b)[keep]
    cost = rng.integers(-10, 11, len(tail))
    paths = bellman_ford(n, tail, head, cost)
    assert paths.converged
    pi = -paths.dist
    assert (cost - pi[tail] + pi[head] >= 0).all()
    assert (paths.dist <= 0).all() and paths.dist.min() < 0


def test_bellman_ford_finds_a_negative_cycle():
    # 0 -> 1 (1), 1 -> 2 (-2), 2 -> 0 (0): a cycle of cost -1; 2 -> 3 hangs off it.
    tail, head = np.array([0, 1, 2, 2]), np.array([1, 2, 0, 3])
    cost = np.array([1, -2, 0, 5])
    paths = bellman_ford(4, tail, head, cost, want_pred=True)
    assert not paths.converged
    cycle = cycle_through_pred(paths, tail)
    assert sorted(cycle) == [0, 1, 2]
    # Consecutive arcs join head to tail, and the last closes on the first.
    for a, b in zip(cycle, cycle[1:] + cycle[:1], strict=True):
        assert head[a] == tail[b]
    assert cost[cycle].sum() == -1


def test_bellman_ford_with_no_arcs():
    paths = bellman_ford(3, np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0, np.int64))
    assert paths.converged and paths.dist.tolist() == [0, 0, 0]


def _reference_distances(n: int, tail: np.ndarray, head: np.ndarray, cost: np.ndarray) -> list:
    # networkx.single_source_bellman_ford_path_length from an added root joined to every
    # node by 0-cost arcs: the reference the vectorised version must equal. Parallel arcs
    # collapse to the cheapest, as a shortest path would use it.
    g = nx.DiGraph()
    g.add_nodes_from(range(n + 1))
    g.add_weighted_edges_from((n, v, 0) for v in range(n))
    for t, h, c in zip(tail.tolist(), head.tolist(), cost.tolist(), strict=True):
        if not g.has_edge(t, h) or g[t][h]["weight"] > c:
            g.add_edge(t, h, weight=c)
    got = nx.single_source_bellman_ford_path_length(g, n)
    return [got[v] for v in range(n)]


def _no_negative_cycle(rng: np.random.Generator, n: int, m: int) -> tuple[np.ndarray, ...]:
    # Costs c = w + p(t) - p(h) with w >= 0: every cycle costs sum(w) >= 0, yet many arcs
    # are negative (common practice, no source: reduced costs of a feasible potential).
    tail, head = rng.integers(0, n, m), rng.integers(0, n, m)
    keep = tail != head
    tail, head = tail[keep], head[keep]
    p = rng.integers(-50, 51, n)
    return tail, head, rng.integers(0, 20, len(tail)) + p[tail] - p[head]


@pytest.mark.parametrize("seed", range(40))
def test_smallest_first_equals_networkx_bellman_ford(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(2, 300))
    tail, head, cost = _no_negative_cycle(rng, n, int(rng.integers(1, 6 * n)))
    fifo = bellman_ford(n, tail, head, cost)
    first = bellman_ford(n, tail, head, cost, smallest_first=True)
    assert fifo.converged and first.converged
    assert first.dist.tolist() == fifo.dist.tolist() == _reference_distances(n, tail, head, cost)


@pytest.mark.parametrize("seed", range(20))
def test_smallest_first_with_a_dense_block_equals_networkx(seed):
    # The residual graph of an optimal assignment: every cell a forward arc, a backward arc
    # of minus the cost from each chosen column to its row (scipy's linear_sum_assignment
    # gives the optimum, so no negative cycle exists).
    from scipy.optimize import linear_sum_assignment

    rng = np.random.default_rng(100 + seed)
    r, c = int(rng.integers(1, 150)), int(rng.integers(1, 150))
    costs = rng.integers(-100, 1000, (r, c))
    rows, cols = linear_sum_assignment(costs)
    n = r + c
    tail, head = cols + r, rows.astype(np.int64)
    back = -costs[rows, cols]
    block = DenseBlock(0, r, costs)
    got = bellman_ford(n, tail, head, back, dense=block, smallest_first=True)
    fifo = bellman_ford(n, tail, head, back, dense=block)
    cells_t, cells_h = np.divmod(np.arange(r * c), c)
    all_t = np.concatenate([tail, cells_t])
    all_h = np.concatenate([head, cells_h + r])
    all_c = np.concatenate([back, costs.ravel()])
    assert got.converged
    assert got.dist.tolist() == fifo.dist.tolist() == _reference_distances(n, all_t, all_h, all_c)


def test_smallest_first_still_finds_a_negative_cycle():
    # The cycle 0 -> 1 -> 2 -> 0 of cost -1 from test_bellman_ford_finds_a_negative_cycle,
    # inside a longer chain: the scan budget runs out and the FIFO rounds report it.
    tail = np.array([0, 1, 2, 2, 3, 4])
    head = np.array([1, 2, 0, 3, 4, 5])
    cost = np.array([1, -2, 0, 5, -1, 2])
    paths = bellman_ford(6, tail, head, cost, smallest_first=True, want_pred=True)
    assert not paths.converged
    assert sorted(cycle_through_pred(paths, tail)) == [0, 1, 2]


# -- exact sums of products -------------------------------------------------------------------


def test_exact_dot_is_exact_beyond_double_precision():
    # 2**53 + 1 is not a double: a float dot would round it (common practice, no source)
    a = np.array([2**53 + 1, 3], np.int64)
    b = np.array([1, -1], np.int64)
    assert exact_dot(a, b) == 2**53 - 2


def test_exact_dot_refuses_only_what_could_overflow():
    big = np.array([2**40, 2**40], np.int64)
    with pytest.raises(OutOfRange):
        exact_dot(big, np.array([2**22, 2**22], np.int64))     # sum |a b| = 2**63
    # max|a| x max|b| x n is over 2**62 here, the true sum of |a_i b_i| is tiny: accepted
    a = np.array([2**61, 1], np.int64)
    b = np.array([0, 2**3], np.int64)
    assert exact_dot(a, b) == 8
