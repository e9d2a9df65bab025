"""Problems with large numbers: where a float comparison or a double in JSON stops being exact.

* :func:`big_whole`: whole-number data whose objective lies from 10**15 to just below 2**53,
  where doubles are spaced 0.125 to 1 apart and "a few units in the last place" is 1 to 8.
* :func:`big_fractional`: fractional data whose objective lies near 10**8 to 10**9, where a
  relative tolerance of 1e-9 is 10**5 to 10**6 grid units.
* :func:`beyond_grid`: fractional data whose objective or potentials exceed 2**33 in value
  (2**33 * 10**6, about 8.6e15, grid units): from there on doubles are spaced more than one
  grid unit apart, so a JSON number can no longer pin the value. Solve must answer 200 with
  exactly recoverable numbers, or 422 ``out-of-range``; never 500.
* :func:`safe_fractional`: fractional data whose every answer number stays below 2**32 in
  value, which can always be written exactly: solve must answer 200.

A double spaced more than 10**-6 apart: from 2**33 on, the spacing of doubles is
2**(33 - 52) = 2**-19, about 1.9e-6 (IEEE 754 binary64; common practice, no source).
"""

from __future__ import annotations

import random
from typing import Any

#: Value (caller units) from which doubles are spaced more than one 10**-6 grid unit.
DOUBLE_GRID_LIMIT = 2**33


def _frac(rng: random.Random, low: int, high: int) -> float:
    """A cost with 6 decimals, the last one not zero, in [low, high]."""
    units = rng.randint(low * 10**6, high * 10**6 - 1)
    return (units - units % 10 + rng.randint(1, 9)) / 10**6


def big_whole(rng: random.Random) -> dict[str, Any]:
    """Two depots, two stores: quantities near 10**9, costs so that the objective is
    from 10**15 to below 2**53 (whole numbers)."""
    q = rng.randint(2 * 10**8, 10**9 // 2)
    top = (2**53 - 1) // (2 * q)
    c = [rng.randint(10**15 // (2 * q) + 1, top) for _ in range(4)]
    return {"sources": [{"id": "north", "supply": q}, {"id": "south", "supply": q}],
            "sinks": [{"id": "fridge", "demand": q}, {"id": "oven", "demand": q}],
            "costs": [[c[0], c[1]], [c[2], c[3]]]}


def big_fractional(rng: random.Random) -> dict[str, Any]:
    """Fractional costs, objective from about 10**8 to 10**9 (below 2**33)."""
    q = rng.randint(10**6, 5 * 10**6)
    return {"sources": [{"id": "north", "supply": q}, {"id": "south", "supply": q}],
            "sinks": [{"id": "fridge", "demand": q},
                      {"id": "oven", "demand": q, "penalty": _frac(rng, 80, 100)}],
            "costs": [[_frac(rng, 20, 90), _frac(rng, 20, 90)],
                      [_frac(rng, 20, 90), None]]}


def beyond_grid(rng: random.Random) -> dict[str, Any]:
    """Fractional data with an objective or potentials beyond 2**33 in value."""
    kind = rng.choice(["objective", "objective_2_53", "chain"])
    if kind == "chain":
        # potentials grow along a chain of dear arcs; one unit flows along it
        k = rng.randint(9, 14)
        hubs = [f"hub{i}" for i in range(k)]
        ends = ["depot", *hubs, "store"]
        arcs = [{"from": a, "to": b, "cost": _frac(rng, 10**9 - 10, 10**9)}
                for a, b in zip(ends, ends[1:], strict=False)]
        return {"sources": [{"id": "depot"}], "nodes": [{"id": h} for h in hubs],
                "sinks": [{"id": "store"}], "arcs": arcs}
    # the objective alone, one flow of q units at a fractional cost c: from 2**33 to 2**53
    # grid units in value ("objective"), or beyond 2**53 grid units ("objective_2_53")
    q = rng.randint(950_000_000, 10**9 - 1)
    if kind == "objective":
        units = rng.randint(8_600_000_000_000_000 // q + 1, 9_000_000_000_000_000 // q)
        c = (units + (units % 10**6 == 0)) / 10**6      # never a whole cost
    else:
        c = _frac(rng, 10, 900)
    return {"sources": [{"id": "north", "supply": q}],
            "sinks": [{"id": "fridge", "demand": q}], "costs": [[c]]}


def safe_fractional(rng: random.Random) -> dict[str, Any]:
    """Fractional data whose answer numbers all stay below 2**32 in value."""
    q = rng.randint(10**6, 10**7)
    return {"sources": [{"id": "north", "supply": q}, {"id": "south", "supply": q}],
            "nodes": [{"id": "hub"}],
            "sinks": [{"id": "fridge", "demand": q}, {"id": "oven", "demand": q}],
            "arcs": [{"from": "north", "to": "hub", "cost": _frac(rng, 1, 200)},
                     {"from": "south", "to": "hub", "cost": _frac(rng, 1, 200)},
                     {"from": "hub", "to": "fridge", "cost": _frac(rng, 1, 200)},
                     {"from": "hub", "to": "oven", "cost": _frac(rng, 1, 200)},
                     {"from": "north", "to": "oven", "cost": _frac(rng, 1, 200)}]}
