"""Exact arithmetic of the checker: sums, grids and comparisons that an adversary cannot bend."""

from __future__ import annotations

from itertools import repeat
from typing import Any

import numpy as np

#: Relative tolerance for reported fractional values (objective, dual objective, row cost)
#: against their exact recomputation.
FLOAT_TOLERANCE = 1e-9


_INT64_SAFE = 2.0**62


def _close(reported: Any, exact_scaled: Any, scale: int) -> np.ndarray:
    """Reported values against their exact recomputations (in grid units), elementwise.

    Whole-number data: equal, up to the representation of the number as a float.
    Fractional data: within FLOAT_TOLERANCE relative. Scalars give a 0-d mask.
    """
    scaled = np.asarray(reported, np.float64) * scale
    exact = np.asarray(exact_scaled, np.float64)
    gap = np.abs(scaled - exact) - 8 * np.spacing(np.abs(scaled))
    if scale == 1:
        return gap <= 0
    return gap <= FLOAT_TOLERANCE * np.abs(exact) + 1e-3


def _dot(a: np.ndarray, b: np.ndarray) -> int:
    """Exact sum of products of two integer arrays, whatever their size."""
    bound = float(np.abs(a).astype(np.float64) @ np.abs(b).astype(np.float64)) if len(a) else 0
    if bound < _INT64_SAFE:
        return int(np.asarray(a, np.int64) @ np.asarray(b, np.int64))
    return int(np.asarray(a, object) @ np.asarray(b, object))


def _to_grid(values: np.ndarray, scale: int) -> np.ndarray | None:
    """Reported potentials as integers of the cost grid; None when off the grid or too big.

    Off the grid: farther than 1e-3 of a grid unit from it, beyond float representation
    error (8 units in the last place).
    """
    scaled = np.asarray(values, np.float64) * scale
    grid = np.rint(scaled)
    if len(grid) and (np.abs(grid).max() >= _INT64_SAFE / 4 or (
            np.abs(scaled - grid) - 8 * np.spacing(np.abs(scaled))).max() > 1e-3):
        return None
    return grid.astype(np.int64)


def _ids_to_index(names: list[str], index: dict[str, int]) -> np.ndarray:
    return np.fromiter(map(index.get, names, repeat(-1)), np.int64, count=len(names))


def _first(mask: np.ndarray) -> int | None:
    """Index of the first True, or None."""
    if len(mask) == 0:
        return None
    i = int(mask.argmax())
    return i if mask[i] else None


def _has_repeats(values: np.ndarray) -> bool:
    """Whether some value occurs twice.

    By sorting: np.unique (numpy 2.4, hash-based) took 0.66 s on a million ids where the
    sort takes 5 ms, and is no faster on ten.
    """
    ordered = np.sort(values)
    return bool((ordered[1:] == ordered[:-1]).any())
