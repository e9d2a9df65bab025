"""Transportation problems: POT's network simplex on the pairs that exist, with its duals."""

from __future__ import annotations

import numpy as np
from ot.lp.emd_wrap import emd_c_sparse

from service.network.model import Flow, Network
from service.solve import isolation
from service.solve.engines import Run, log2_ceil
from service.solve.paths import order_by

__all__ = ["NAME", "solve", "suits"]

NAME = "network_simplex"

#: POT's simplex declares optimality when the best reduced cost is at least
#: -2.2e-15 x max(|potential|, |cost|), and its potentials reach (2N + 1)(C + 1) for N
#: nodes and costs up to C: a reduced cost of -1 is seen while that stays below this.
_FLOAT_SAFE = 2**47
_OPTIMAL, _INFEASIBLE = 1, 0


def suits(net: Network) -> bool:
    """Source-to-sink arcs only, none whose capacity could bind (POT has no capacities)."""
    if net.arc_list is None:
        return True
    arcs = net.arc_list
    if not (bool(np.all(arcs.tail < net.n_sources))
            and bool(np.all(arcs.head >= net.sink_offset))):
        return False
    b = arcs.bounded
    room = np.minimum(net.supply[arcs.tail[b]], net.demand[arcs.head[b] - net.sink_offset])
    return bool(np.all(arcs.capacity[b] >= room))


def solve(net: Network, hard_shortfall: int) -> Run | None | bool:
    """A least-cost flow of the extended network with its duals; None when there is none.

    Parameters
    ----------
    net : a network that :func:`suits`.
    hard_shortfall : the hard pool's capacity, as for :mod:`.min_cost_flow`.

    Returns
    -------
    The flow on the user arcs and candidate potentials on the extended network; None
    when no flow meets the hard demand within ``hard_shortfall``; False when float64 would
    not be exact for these costs, or the engine did not finish (the caller then uses the
    min-cost-flow engine).

    Notes
    -----
    The extended network in transportation form: rows are the sources, one row for the
    soft shortfall (supply = soft demand, an arc to each soft sink at its penalty), one for
    the hard pool (supply ``hard_shortfall``, arcs to the hard sinks at 0) and a row of
    supply 1; columns are the sinks and one slack column that takes what the rows do not
    ship (every row has a 0-cost arc to it, so the problem is balanced). Of parallel arcs
    only the cheapest, the first in request order among equals, can carry flow.
    POT (R. Flamary et al., "POT: Python Optimal Transport", JMLR 22(78), 2021) solves it
    with the network simplex of LEMON (P. Kovács, "Minimum-cost flow algorithms: an
    experimental evaluation", Optim. Methods Softw. 30(1), 2015) in float64; costs are
    divided by their greatest common divisor first. Its row duals ``u`` and column duals
    ``v`` (``c - u - v >= 0``) become the potentials: a source ``u``, a sink ``-v``, the
    super-source ``-v(slack)``, the pool its row's ``u``.
    """
    arcs = net.arcs
    ns, nt, off = net.n_sources, net.n_sinks, net.sink_offset
    col = arcs.head - off
    key = arcs.tail * nt + col
    first = _cheapest_per_pair(key, arcs.cost, ns * nt)
    soft, hard = np.flatnonzero(net.soft), np.flatnonzero(~net.soft)
    rows, cols, cost, supply = [arcs.tail[first]], [col[first]], [arcs.cost[first]], [net.supply]
    r = ns
    pool_row = -1
    if len(soft):
        rows.append(np.full(len(soft), r))
        r += 1
        cols.append(soft)
        cost.append(net.penalty[soft])
        supply.append(np.array([net.demand[soft].sum()]))
    if hard_shortfall > 0:
        pool_row, r = r, r + 1
        rows.append(np.full(len(hard), pool_row))
        cols.append(hard)
        cost.append(np.zeros(len(hard), np.int64))
        supply.append(np.array([hard_shortfall]))
    supply.append(np.array([1]))
    r += 1
    a = np.concatenate(supply).astype(np.int64)
    slack = int(a.sum()) - net.total_demand
    if slack < 1:
        return None                         # the rows cannot even cover the demand
    rows.append(np.arange(r))
    cols.append(np.full(r, nt))
    cost.append(np.zeros(r, np.int64))
    tails, heads, costs = (np.concatenate(v).astype(np.int64) for v in (rows, cols, cost))
    # POT's simplex wants costs >= 0 (with negative ones it reports feasible problems as
    # infeasible): each row ships exactly its supply, so lowering all its arcs by the same
    # amount lowers every plan by the same total and keeps the optimum
    lowest = np.zeros(r, np.int64)
    np.minimum.at(lowest, tails, costs)
    costs = costs - lowest[tails]
    unit = max(1, int(np.gcd.reduce(costs)))
    costs //= unit
    n_nodes = r + nt + 1
    spread = int(np.abs(costs).max(initial=0)) + 1
    if (2 * n_nodes + 1) * spread >= _FLOAT_SAFE:
        return False
    b = np.concatenate([net.demand, [slack]]).astype(np.int64)
    out = _solve_positive(a, b, tails, heads, costs,
                          work=n_nodes**2 * len(tails) * log2_ceil(n_nodes * spread))
    code = int(out["code"])
    if code == _INFEASIBLE:
        return None
    values = out["values"]
    if code != _OPTIMAL or not np.array_equal(values, np.rint(values)):
        return False
    fr, fc = out["rows"], out["cols"]
    user = (fr < ns) & (fc < nt) & (values > 0)
    pair_keys = key[first]                  # ascending: ``first`` follows the sorted keys
    at = np.searchsorted(pair_keys, fr[user] * nt + fc[user])
    flow_arc = arcs.id[first[at]]
    by_arc = np.argsort(flow_arc)
    u, v = out["u"] * unit + lowest, out["v"] * unit
    duals = np.zeros(net.n_user + 3)
    duals[:ns] = u[:ns]
    duals[off:off + nt] = -v[:nt]
    S, T, P = net.n_user, net.n_user + 1, net.n_user + 2
    duals[S] = -v[nt]
    duals[T] = duals[off:off + nt].min(initial=0.0)
    duals[P] = u[pool_row] if pool_row >= 0 else duals[T]
    _fill_empty(net, duals, a[:ns] == 0, b[:nt] == 0, first)
    return Run(Flow(arc=flow_arc[by_arc], amount=np.rint(values[user][by_arc]).astype(np.int64)),
               duals)


def _cheapest_per_pair(key: np.ndarray, cost: np.ndarray, n_keys: int) -> np.ndarray:
    """For each distinct ``key`` in ascending order, the position of its cheapest arc, the
    first in request order among equally cheap ones.

    The same positions as the first of each key in ``np.lexsort((index, cost, key))``, in
    linear time: one stable radix order by key (:func:`order_by`), then the least cost of
    each run of equal keys and the first arc of the run that has it (1M arcs: 0.25 s
    against 1.2 s for the three-key lexsort on this machine, under load).
    """
    if len(key) == 0 or n_keys > 1 << 32:
        order = np.lexsort((np.arange(len(key)), cost, key))
        return order[np.diff(key[order], prepend=-1) != 0]
    order = order_by(key, n_keys)
    sorted_key, sorted_cost = key[order], cost[order]
    starts = np.flatnonzero(np.diff(sorted_key, prepend=-1) != 0)
    run = np.cumsum(np.diff(sorted_key, prepend=-1) != 0) - 1
    cheapest = np.minimum.reduceat(sorted_cost, starts)
    hits = np.flatnonzero(sorted_cost == cheapest[run])
    # the hits of a run are in request order (the radix order is stable): keep the first
    return order[hits[np.diff(run[hits], prepend=-1) != 0]]


def _solve_positive(a: np.ndarray, b: np.ndarray, tails: np.ndarray, heads: np.ndarray,
                    costs: np.ndarray, work: int) -> isolation.Arrays:
    """The simplex on the rows and columns with positive supply or demand only (POT finds
    a problem with empty ones infeasible); flows and duals mapped back to all of them."""
    row_kept, col_kept = np.flatnonzero(a > 0), np.flatnonzero(b > 0)
    row_at = np.full(len(a), -1)
    row_at[row_kept] = np.arange(len(row_kept))
    col_at = np.full(len(b), -1)
    col_at[col_kept] = np.arange(len(col_kept))
    live = (row_at[tails] >= 0) & (col_at[heads] >= 0)
    out = isolation.run(_call, a[row_kept], b[col_kept], row_at[tails[live]],
                        col_at[heads[live]], costs[live], work=work)
    if "rows" in out:
        out["rows"] = row_kept[out["rows"].astype(np.int64)]
        out["cols"] = col_kept[out["cols"].astype(np.int64)]
        u, v = np.zeros(len(a)), np.zeros(len(b))
        u[row_kept], v[col_kept] = out["u"], out["v"]
        out["u"], out["v"] = u, v
    return out


def _fill_empty(net: Network, duals: np.ndarray, empty_sources: np.ndarray,
                empty_sinks: np.ndarray, first: np.ndarray) -> None:
    """Potentials for sources with no supply and sinks with no demand, which the simplex
    did not see: each has only unused arcs (forward residual arcs), so the tightest bound
    those arcs allow is valid -- a source at most, a sink at least, what its arcs permit."""
    if not (empty_sources.any() or empty_sinks.any()):
        return
    arcs = net.arcs
    t, h, c = arcs.tail[first], arcs.head[first], arcs.cost[first].astype(np.float64)
    bound = np.full(len(duals), np.inf)
    np.minimum.at(bound, t, c + duals[h])
    src = np.flatnonzero(empty_sources)
    duals[src] = np.where(np.isfinite(bound[src]), bound[src], 0.0)
    bound[:] = -np.inf
    np.maximum.at(bound, h, duals[t] - c)
    snk = np.flatnonzero(empty_sinks) + net.sink_offset
    duals[snk] = np.where(np.isfinite(bound[snk]), bound[snk], duals[net.n_user])


def _call(a: np.ndarray, b: np.ndarray, tails: np.ndarray, heads: np.ndarray,
          costs: np.ndarray) -> isolation.Arrays:
    """The bare call: POT's sparse network simplex without an iteration cap (the time
    limit bounds it), called directly so no per-arc Python work runs around it."""
    rows, cols, values, _, u, v, code = emd_c_sparse(
        a.astype(np.float64), b.astype(np.float64), tails.astype(np.uint64),
        heads.astype(np.uint64), costs.astype(np.float64), 0)
    if code != _OPTIMAL:
        return {"code": np.array(code)}
    return {"code": np.array(code), "rows": rows, "cols": cols, "values": values,
            "u": u, "v": v}
