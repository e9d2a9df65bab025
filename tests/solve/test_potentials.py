"""Exact potentials from candidate duals, and the free-arc forest, held to networkx."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from service.solve.potentials import exact_potentials, forest_candidate, rounded

ROOT = "root"


def _random_graph(rng: np.random.Generator, n: int, m: int, spread: int = 1000):
    """Arcs whose costs come from planted potentials plus non-negative slack: no negative
    cycle, and many negative costs (common practice, no source: Johnson's reweighting)."""
    planted = rng.integers(-50 * spread, 50 * spread, size=n)
    tail = rng.integers(0, n, size=m)
    head = rng.integers(0, n, size=m)
    keep = tail != head
    tail, head = tail[keep], head[keep]
    slack = rng.integers(0, spread, size=len(tail)) * (rng.random(len(tail)) < 0.7)
    cost = slack + planted[tail] - planted[head]
    return planted, tail.astype(np.int64), head.astype(np.int64), cost.astype(np.int64)


def _networkx_distances(n: int, tail, head, cost) -> np.ndarray:
    """Shortest distances from a root joined to every node by 0-cost arcs."""
    g = nx.DiGraph()
    g.add_nodes_from(range(n))
    for t, h, c in zip(tail.tolist(), head.tolist(), cost.tolist(), strict=True):
        if not g.has_edge(t, h) or g[t][h]["weight"] > c:   # parallel arcs: the shortest
            g.add_edge(t, h, weight=c)
    g.add_edges_from((ROOT, v, {"weight": 0}) for v in range(n))
    # reference library: networkx.single_source_bellman_ford_path_length
    dist = nx.single_source_bellman_ford_path_length(g, ROOT)
    return np.array([dist[v] for v in range(n)], np.int64)


def _valid(tail, head, cost, pi) -> bool:
    return bool(np.all(cost - pi[tail] + pi[head] >= 0))


@pytest.mark.parametrize("seed", range(12))
def test_from_nothing_the_potentials_are_minus_the_networkx_distances(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(2, 60))
    _, tail, head, cost = _random_graph(rng, n, int(rng.integers(1, 4 * n)))
    found = exact_potentials(n, tail, head, cost, None, max_rounds=n + 1)
    assert found.ok
    assert np.array_equal(found.pi, -_networkx_distances(n, tail, head, cost))


@pytest.mark.parametrize("seed", range(12))
def test_planted_potentials_need_no_round_and_noisy_ones_are_repaired(seed):
    rng = np.random.default_rng(100 + seed)
    n = 300
    planted, tail, head, cost = _random_graph(rng, n, 2000)
    exact = exact_potentials(n, tail, head, cost, planted.astype(np.float64), max_rounds=1)
    assert exact.ok and exact.rounds == 0 and np.array_equal(exact.pi, planted)
    # float noise far below 0.5 rounds away; larger noise and dropped entries are repaired
    small = planted + rng.uniform(-0.3, 0.3, n)
    assert exact_potentials(n, tail, head, cost, small, max_rounds=1).rounds == 0
    noisy = planted + rng.normal(0, 200, n)
    noisy[rng.random(n) < 0.1] = np.nan
    repaired = exact_potentials(n, tail, head, cost, noisy, max_rounds=n + 1)
    assert repaired.ok and repaired.negative > 0 and repaired.rounds >= 1
    assert _valid(tail, head, cost, repaired.pi)


def test_parallel_arcs_use_the_shortest_not_their_sum():
    # 0 -> 1 twice (lengths 5 and -3), 1 -> 2 once: distances 0, -3, -4 from the root.
    tail, head = np.array([0, 0, 1]), np.array([1, 1, 2])
    cost = np.array([5, -3, -1])
    found = exact_potentials(3, tail, head, cost, None, max_rounds=4)
    assert found.ok and found.pi.tolist() == [0, 3, 4]
    assert np.array_equal(found.pi, -_networkx_distances(3, tail, head, cost))


def test_a_negative_cycle_is_never_given_potentials():
    # 0 -> 1 -> 2 -> 0 with total -1 (common practice, no source: no potentials exist)
    tail, head, cost = np.array([0, 1, 2]), np.array([1, 2, 0]), np.array([2, -4, 1])
    for candidate in (None, np.array([0.0, 5.0, -3.0])):
        found = exact_potentials(3, tail, head, cost, candidate, max_rounds=100)
        assert not found.ok


def test_a_negative_path_broken_by_zero_arcs_is_settled_at_once():
    # a chain whose 0-cost links break the run of negative arcs: bridged by them
    n = 3001
    tail, head = np.arange(1, n), np.arange(n - 1)
    cost = -np.random.default_rng(10).integers(0, 3, size=n - 1)
    found = exact_potentials(n, tail, head, cost, None, max_rounds=2)
    assert found.ok and found.rounds == 1
    assert np.array_equal(found.pi, -_networkx_distances(n, tail, head, cost))


def test_a_long_negative_path_is_settled_at_once():
    # 5,000 negative arcs in a row, listed in reverse: the first labels follow them back
    n = 5001
    tail, head = np.arange(n - 1)[::-1].copy(), np.arange(1, n)[::-1].copy()
    cost = -np.random.default_rng(9).integers(1, 1000, size=n - 1)
    found = exact_potentials(n, tail, head, cost, None, max_rounds=2)
    assert found.ok and found.rounds == 1
    assert np.array_equal(found.pi, -_networkx_distances(n, tail, head, cost))


def test_a_round_cap_that_is_too_small_reports_it():
    # a path alternating arcs of -5 and +1: the shortest path from its start takes them
    # all, and each +1 arc costs one more round
    n = 51
    tail, head = np.arange(n - 1), np.arange(1, n)
    cost = np.where(np.arange(n - 1) % 2 == 0, -5, 1).astype(np.int64)
    assert not exact_potentials(n, tail, head, cost, None, max_rounds=5).ok
    found = exact_potentials(n, tail, head, cost, None, max_rounds=n + 1)
    assert found.ok and np.array_equal(found.pi, -_networkx_distances(n, tail, head, cost))


def test_candidates_beyond_float64_range_are_dropped_not_trusted():
    q = rounded(3, np.array([np.inf, 2.0**60, -7.4]))
    assert q.tolist() == [0, 0, -7]


@pytest.mark.parametrize("seed", range(6))
def test_the_free_arc_forest_makes_every_free_arc_tight(seed):
    rng = np.random.default_rng(200 + seed)
    n = 400
    planted, tail, head, cost = _random_graph(rng, n, 1500)
    # mark as free a set of arcs that are tight under the planted potentials
    tight = cost - planted[tail] + planted[head] == 0
    free = tight & (rng.random(len(tail)) < 0.8)
    pi = forest_candidate(n, tail, head, cost, free)
    assert np.all(cost[free] - pi[tail[free]] + pi[head[free]] == 0)
    # and it is a good start: repaired into valid potentials
    found = exact_potentials(n, tail, head, cost, pi, max_rounds=n + 1)
    assert found.ok and _valid(tail, head, cost, found.pi)


def test_a_long_free_path_needs_no_round_at_all():
    # a path of 20,000 free arcs listed backwards, costs of both signs: pointer jumping
    # sums it exactly; the potentials differ from networkx's distances by a constant only
    rng = np.random.default_rng(5)
    n = 20_000
    order = rng.permutation(n)
    tail, head = order[:-1][::-1].copy(), order[1:][::-1].copy()
    cost = rng.integers(-1000, 1000, size=n - 1)
    pi = forest_candidate(n, tail, head, cost, np.ones(n - 1, bool))
    residual_tail = np.concatenate([tail, head])
    residual_head = np.concatenate([head, tail])
    residual_cost = np.concatenate([cost, -cost])
    found = exact_potentials(n, residual_tail, residual_head, residual_cost, pi, max_rounds=1)
    assert found.ok and found.rounds == 0
    # common practice, no source: on a path both directions are tight, so the potential
    # differences along it are exactly the costs
    assert np.array_equal(pi[tail] - pi[head], cost)


def test_distances_beyond_exact_float64_are_refused_not_wrapped():
    # 3,000 arcs of -2**50 in a row: the distances reach -3000 * 2**50, far past 2**53,
    # where float64 Dijkstra is no longer exact: no potentials are claimed
    n = 3001
    tail, head = np.arange(n - 1), np.arange(1, n)
    cost = np.full(n - 1, -(2**50), np.int64)
    found = exact_potentials(n, tail, head, cost, None, max_rounds=n + 1)
    assert not found.ok
