"""Cost of the Merkle tree at 10**5 and 10**6 leaves (a benchmark, not a test).

    .venv/bin/python tests/records/bench/merkle_cost.py
"""

from __future__ import annotations

import gc
import statistics
import time

from service.records.merkle import Frontier, MemoryTree, leaf_hash, range_hash


def _ms(fn, repeat: int = 1) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times) * 1000


def _one(n: int) -> None:
    leaves = [i.to_bytes(8, "big") * 40 for i in range(n)]       # ~320-byte leaves
    hashed: list[bytes] = []
    t_leaf = _ms(lambda: hashed.extend(map(leaf_hash, leaves)))
    trees: list[MemoryTree] = []
    t_tree = _ms(lambda: trees.append(MemoryTree(hashed)))
    tree = trees[0]
    frontier = Frontier()
    t_front = _ms(lambda: [frontier.append(h) for h in hashed])
    t_root = _ms(lambda: range_hash(0, n, tree), repeat=50)
    t_incl = _ms(lambda: tree.inclusion_proof(n // 3), repeat=200)
    t_cons = _ms(lambda: tree.consistency_proof(n // 3 + 1), repeat=200)
    print(f"n={n:>9,}: hash leaves {t_leaf:8.1f} ms | all perfect nodes {t_tree:8.1f} ms"
          f" | appends via frontier {t_front:8.1f} ms | root from stored nodes"
          f" {t_root:.3f} ms | inclusion proof {t_incl:.3f} ms | consistency proof"
          f" {t_cons:.3f} ms")


def main() -> None:
    gc.disable()
    for n in (10**5, 10**6):
        _one(n)


if __name__ == "__main__":
    main()
