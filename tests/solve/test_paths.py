"""Shortest paths against networkx, and exact sums of products."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from service.errors import OutOfRange
from service.solve.certificate import exact_dot
from service.solve.paths import DenseBlock, bellman_ford, cycle_through_pred

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
