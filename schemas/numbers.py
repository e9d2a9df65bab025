"""Numbers and ids checked in bulk with numpy: bounds, kinds, booleans in disguise."""

from __future__ import annotations

from itertools import chain, repeat
from operator import is_not
from typing import Any

import numpy as np

#: Largest magnitude of any number in a request, so that sums of products stay exact in
#: 64-bit integers and below 2**53 (the exact range of a JSON number in most clients).
MAX_ABS_VALUE = 10**9


#: At most this many errors are reported per list; the count of the rest is given.
MAX_ERRORS_PER_LIST = 50


_NUMBER_TYPES = {int, float}


#: Largest magnitude of a number in an answer (objective, potentials): exact in JSON.
MAX_ANSWER_VALUE = 2**53


def number_detail(kind: str, bound: int = MAX_ABS_VALUE, minimum: int | None = None) -> str:
    """The one message for a number out of its domain, naming the allowed range."""
    if kind == "count":
        return f"must be a whole number from 0 to {bound}"
    low = -bound if minimum is None else minimum
    return f"must be a finite number from {low} to {bound}"


def _bad_number(v: Any, kind: str, bound: int = MAX_ABS_VALUE) -> bool:
    """True when one value breaks its domain (error path only)."""
    if type(v) not in _NUMBER_TYPES:
        return True
    if type(v) is int:
        return abs(v) > bound or (kind == "count" and v < 0)   # exact, beyond 2**53 too
    if not np.isfinite(v) or abs(v) > bound:
        return True
    return kind == "count" and (v < 0 or v != int(v))


def _lowest(kind: str, bound: int, minimum: int | None) -> int:
    """The least value a number of this domain may take."""
    low = -bound if minimum is None else max(-bound, minimum)
    return max(low, 0) if kind == "count" else low


def _plain_numbers(values: list[Any], shape: tuple[int, ...], kind: str, *,
                   bound: int = MAX_ABS_VALUE, minimum: int | None = None
                   ) -> np.ndarray | None:
    """``values`` (a list, or a list of equal-length lists) as one array of ``shape`` when
    every entry is a number of the domain, else None: then look entry by entry.

    One conversion is the type check too: numpy's type inference leaves the numeric kinds
    (or the shape) for any string, null, object or list, and turns integers too large for
    int64 into objects or floats beyond the bound. Only a boolean passes, as 1 or 0, so
    only the entries that came out 0 or 1 are looked at by type. The array is int64 when
    every entry is a JSON integer, else float64.
    """
    try:
        arr = np.array(values)
    except (ValueError, OverflowError, TypeError):
        return None                     # inhomogeneous nesting, oversized numbers
    if arr.shape != shape or arr.dtype.kind not in "if":
        return None
    if not arr.size:
        return arr.astype(np.int64)
    lo, hi = arr.min(), arr.max()
    # min/max need no temporary array; NaN fails both comparisons
    if not (_lowest(kind, bound, minimum) <= lo and hi <= bound):
        return None
    if arr.dtype.kind == "f":
        if hi == bound or lo == -bound:
            return None                 # maybe a larger integer rounded onto the bound
        if kind == "count" and not np.array_equal(arr, np.floor(arr)):
            return None
    if lo <= 1 and hi >= 0 and _hides_boolean(arr, values):
        return None
    return arr


def _hides_boolean(arr: np.ndarray, values: list[Any]) -> bool:
    """Whether a JSON true or false became one of the 1s or 0s of ``arr``."""
    flat = arr.reshape(-1)
    if flat.dtype.kind == "i":
        maybe = np.flatnonzero(flat.view(np.uint64) <= 1)   # as unsigned, only 0 and 1 are <= 1
    else:
        maybe = np.flatnonzero((flat == 0) | (flat == 1))
    if not len(maybe):
        return False
    if 4 * len(maybe) > len(flat):
        # mostly 0s and 1s: one pass over every entry is cheaper than picking them out
        entries = chain.from_iterable(values) if arr.ndim == 2 else values
        return bool in set(map(type, entries))
    if arr.ndim == 2:
        rows, cols = np.divmod(maybe, arr.shape[1])
        picked = map(list.__getitem__, map(values.__getitem__, rows.tolist()), cols.tolist())
    else:
        picked = map(values.__getitem__, maybe.tolist())
    return bool in set(map(type, picked))


def check_numbers(values: list[Any], kind: str, *, nullable: bool = False,
                  bound: int = MAX_ABS_VALUE, minimum: int | None = None
                  ) -> tuple[np.ndarray, np.ndarray, list[int]]:
    """Check a list of JSON numbers in bulk.

    Returns ``(array, present, bad)``: the values (0 where null), a mask of the non-null
    entries and the indices of the bad entries (empty when all are good). The values are
    float64, or int64 when the list may not hold nulls and every entry is a JSON integer.
    """
    n = len(values)
    if not nullable:
        # a list that may hold nulls goes by type at once: a null would make numpy's
        # inference fall back to objects, a pass for nothing
        plain = _plain_numbers(values, (n,), kind, bound=bound, minimum=minimum)
        if plain is not None:
            return plain, np.ones(n, bool), []
    return _check_each(values, kind, nullable=nullable, bound=bound, minimum=minimum)


def _check_each(values: list[Any], kind: str, *, nullable: bool, bound: int,
                minimum: int | None) -> tuple[np.ndarray, np.ndarray, list[int]]:
    """check_numbers for lists with nulls or bad entries: types first, then the domain."""
    n = len(values)
    types = set(map(type, values))
    allowed = _NUMBER_TYPES | ({type(None)} if nullable else set())
    arr: np.ndarray | None = None
    if types <= allowed:
        try:
            arr = np.array(values, dtype=np.float64).reshape(n)
        except (OverflowError, ValueError):
            arr = None
    if arr is None:
        bad = [i for i, v in enumerate(values)
               if not (nullable and v is None) and (
                   _bad_number(v, kind, bound) or (minimum is not None and v < minimum))]
        present = np.fromiter(map(is_not, values, repeat(None)), bool, n)
        return np.zeros(n), present, bad
    present = ~np.isnan(arr) if nullable else np.ones(n, bool)
    vals = np.where(present, arr, 0.0)
    ok = np.isfinite(vals) & (np.abs(vals) <= bound)
    # a whole number just past a bound of 2**53 rounds onto it as a double: decide exactly
    for i in np.flatnonzero(np.abs(vals) == bound).tolist():
        ok[i] = not _bad_number(values[i], kind, bound)
    if kind == "count":
        ok &= (vals >= 0) & (vals == np.floor(vals))
    if minimum is not None:
        ok &= vals >= minimum
    if ok.all():
        return vals, present, []
    # zero the culprits so that callers may cast the array before raising the errors
    return np.where(ok, vals, 0.0), present, np.flatnonzero(~ok).tolist()


def check_ids(values: list[Any]) -> list[int]:
    """Indices of entries that are not non-empty strings."""
    if set(map(type, values)) <= {str} and all(values):   # a string is true when not empty
        return []
    return [i for i, v in enumerate(values) if type(v) is not str or not v]


def _add(errors: dict, index: int, key: str, message: str) -> None:
    errors.setdefault(index, {}).setdefault(key, []).append(message)


def _cap(errors: dict) -> dict:
    if len(errors) <= MAX_ERRORS_PER_LIST:
        return errors
    kept = dict(sorted(errors.items())[:MAX_ERRORS_PER_LIST])
    kept["_schema"] = [f"{len(errors) - MAX_ERRORS_PER_LIST} more records have errors"]
    return kept
