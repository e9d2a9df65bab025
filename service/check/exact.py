"""Exact arithmetic of the checker: reported numbers, sums and products an adversary cannot bend.

Reported numbers (README, "Numbers"). A JSON integer is that integer; a JSON decimal stands
for the shortest decimal that reads back as its double (what ``repr`` writes, and what any
conforming JSON writer emits). A cost-like number (objective, dual objective, row cost,
potential) stands for a value on the problem's cost grid:

* whole-number data (scale 1): the number itself, which must be a whole number;
* fractional data (scale 10**6): the decimal times 10**6, rounded half to even.

It is then compared with the exact recomputation, with no tolerance. Arrays are read in
bulk with numpy; the few entries where a float computation could round differently from
the exact rule (near a half-unit tie, or beyond 2**33 in magnitude) are settled with
``fractions.Fraction``.

Sums and products are exact: bounded in float64 first, computed in int64 when the bound
proves that nothing can wrap, and in Python integers (object arrays) otherwise. Either way
the work is linear in the input.
"""

from __future__ import annotations

from fractions import Fraction
from itertools import repeat
from typing import Any

import numpy as np

#: Sums whose float64 bound stays below this are exact in int64.
_INT64_SAFE = 2.0**62

#: Grid values (potentials, row costs) are kept in int64 within this magnitude: a reduced
#: cost ``c - pi(i) + pi(j)`` with a forbidden matrix cell (2**62) still fits.
_GRID_INT64 = 2**60

#: From this magnitude on doubles are spaced 2**-19 or more apart, over half a grid unit
#: of 10**-6 (IEEE 754 binary64): the float path no longer decides the rounding.
_FLOAT_PATH_LIMIT = 2.0**33


def _fit(values: np.ndarray) -> np.ndarray:
    """An object array of Python ints as int64 when every entry is within 2**60, else as is."""
    if values.dtype != object or not len(values):
        return values.astype(np.int64) if values.dtype == object else values
    if max(values.max(), -values.min()) < _GRID_INT64:
        return values.astype(np.int64)
    return values


def _grid_value(value: Any, scale: int) -> int | None:
    """The grid value one reported number stands for; None when it stands for none (a
    number that is not whole with whole-number data)."""
    if type(value) is int:
        return value * scale
    value = float(value)
    if scale == 1:
        return int(value) if value.is_integer() else None
    return round(Fraction(repr(value)) * scale)      # Fraction rounds half to even


def _grid_values(values: np.ndarray, scale: int) -> tuple[np.ndarray, np.ndarray]:
    """(grid values, mask of entries that stand for none) of reported numbers.

    The rule of :func:`_grid_value`, in bulk. The grid values are int64 when all of them
    are within 2**60, else an object array of Python ints.

    Notes
    -----
    Fractional data: with ``w`` the integer part of a double ``v`` and ``f = v - w``
    (both exact), ``rint(f * 10**6)`` is off by at most 1.2e-10 from ``f * 10**6``; the
    decimal that ``v`` stands for differs from ``v`` by at most half the spacing of
    doubles at ``v``, that is ``spacing(v) * 10**6 / 2`` grid units. Wherever ``f * 10**6``
    is farther than that margin from a half-unit tie, the rounding of the decimal is
    ``w * 10**6 + rint(f * 10**6)``; the other entries are read with Fraction.
    """
    bad = np.zeros(len(values), bool)
    if values.dtype.kind == "i":
        if scale == 1:
            return values, bad
        if not len(values) or int(np.abs(values).max()) < _GRID_INT64 // scale:
            return values * scale, bad
        return _fit(values.astype(object) * scale), bad
    v = np.asarray(values, np.float64)
    whole = np.trunc(v)
    if scale == 1:
        # within the answer bound of 2**53, every whole double is exact in int64
        return whole.astype(np.int64), v != whole
    magnitude = np.abs(v)
    near = magnitude < _FLOAT_PATH_LIMIT
    units = (v - whole) * scale
    rounded = np.rint(units)
    margin = np.spacing(magnitude) * (scale / 2) + 1e-6
    slow = ~near | (np.abs(units - rounded) >= 0.5 - margin)
    grid = np.where(near, whole, 0).astype(np.int64) * scale + rounded.astype(np.int64)
    if not slow.any():
        return grid, bad
    at = np.flatnonzero(slow)
    exact = [round(Fraction(repr(x)) * scale) for x in v[at].tolist()]
    if max(map(abs, exact)) >= _GRID_INT64:
        grid = grid.astype(object)
    grid[at] = exact
    return grid, bad


def _products(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Exact elementwise products of two integer arrays: int64 when none can wrap, else
    Python ints (object)."""
    if not len(a):
        return np.zeros(0, np.int64)
    coarse = float(np.abs(a).max()) * float(np.abs(b).max())
    if coarse < _INT64_SAFE or float(
            (np.abs(a).astype(np.float64) * np.abs(b).astype(np.float64)).max()) < _INT64_SAFE:
        return np.asarray(a, np.int64) * np.asarray(b, np.int64)
    return np.asarray(a, object) * np.asarray(b, object)


def _dot(a: np.ndarray, b: np.ndarray) -> int:
    """Exact sum of products of two integer arrays (int64 or object), whatever their size."""
    if a.dtype == object or b.dtype == object:
        return int(np.asarray(a, object) @ np.asarray(b, object))
    bound = float(np.abs(a).astype(np.float64) @ np.abs(b).astype(np.float64)) if len(a) else 0
    if bound < _INT64_SAFE:
        return int(np.asarray(a, np.int64) @ np.asarray(b, np.int64))
    return int(np.asarray(a, object) @ np.asarray(b, object))


def _total(values: np.ndarray) -> int:
    """Exact sum of an integer array (int64 or object)."""
    if not len(values):
        return 0
    if values.dtype != object and float(np.abs(values).astype(np.float64).sum()) < _INT64_SAFE:
        return int(np.asarray(values, np.int64).sum())
    return int(np.asarray(values, object).sum())


def _balances(n: int, tail: np.ndarray, head: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Exact net outflow of each of ``n`` nodes under flows ``x >= 0`` on (tail, head).

    int64 when the total flow proves that no node sum can wrap (every honest answer),
    Python ints (object) otherwise: thousands of rows near 2**53 wrap an int64 sum.
    """
    if float(x.sum(dtype=np.float64)) < _INT64_SAFE:
        out = np.zeros(n, np.int64)
        np.add.at(out, tail, x)
        np.subtract.at(out, head, x)
        return out
    big = np.zeros(n, object)
    big[:] = 0
    flows = x.astype(object)
    np.add.at(big, tail, flows)
    np.subtract.at(big, head, flows)
    return big


def _show(grid: int, scale: int) -> str:
    """A grid value as an exact decimal, for a message."""
    if scale == 1:
        return str(grid)
    whole, part = divmod(abs(grid), scale)
    digits = str(part).rjust(len(str(scale)) - 1, "0").rstrip("0")
    return ("-" if grid < 0 else "") + str(whole) + ("." + digits if digits else "")


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
