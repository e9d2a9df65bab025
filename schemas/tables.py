"""Fields that check large lists in bulk.

A request may carry a 4000 x 4000 cost matrix or a million arcs; checking each cell with a
marshmallow field would cost seconds in Python. These fields check the *structure* with
C-level passes (``map``, ``sum``) and the *numbers* with numpy, and only walk the input
element by element to name the culprits once something is known to be wrong.

On large inputs the cost is the number of passes over the parsed objects (each pass touches
millions of scattered Python objects), so every check is folded into a pass that is needed
anyway: numpy's conversion of a numeric column is also its type check, the count of keys
per record stands in for a set of all keys, and ids that name other ids are checked by the
lookup that resolves them (``references``).

A list of records is described by an ordinary marshmallow row schema (the wire format, also
used by the OpenAPI document); :class:`RecordList` derives its columns from that schema.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field
from itertools import chain, repeat
from operator import is_not
from typing import Any

import numpy as np
from marshmallow import Schema, ValidationError, fields, missing

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


@dataclass
class Table:
    """Columns of a checked list of records: numpy arrays for numbers, lists for ids.

    ``present`` masks the non-null entries of optional columns without a default;
    ``resolved`` holds, for each reference column (RecordList), the positions of the ids
    it names, -1 where it names none.
    """

    length: int
    columns: dict[str, Any] = field(default_factory=dict)
    present: dict[str, np.ndarray] = field(default_factory=dict)
    resolved: dict[str, np.ndarray] = field(default_factory=dict)

    def __len__(self) -> int:
        return self.length


def _column_kind(f: fields.Field) -> str:
    if isinstance(f, fields.Integer):
        return "count"
    if isinstance(f, fields.Number):
        return "number"
    if isinstance(f, fields.String):
        return "id"
    raise TypeError(f"no bulk check for field {f!r}")


def _add(errors: dict, index: int, key: str, message: str) -> None:
    errors.setdefault(index, {}).setdefault(key, []).append(message)


def _cap(errors: dict) -> dict:
    if len(errors) <= MAX_ERRORS_PER_LIST:
        return errors
    kept = dict(sorted(errors.items())[:MAX_ERRORS_PER_LIST])
    kept["_schema"] = [f"{len(errors) - MAX_ERRORS_PER_LIST} more records have errors"]
    return kept


class RecordList(fields.Field):
    """A JSON list of records whose columns are given by ``row_schema``; loads a Table.

    Integer fields of the row schema become whole numbers >= 0, other numbers finite
    numbers, strings ids. ``load_default`` of a row field fills missing keys; a field
    without one and not required may be absent or null (``present`` says where).

    ``references`` names required id columns whose values name ids declared by the lists
    ``declared_in`` of the same document (their ``id`` keys, numbered across the lists in
    that order). They are resolved here into ``Table.resolved``: every declared id is a
    non-empty string, so an entry that resolves is one, and the lookup doubles as the check.
    Entries that are strings but no declared id stay -1, for the caller to report.
    """

    def __init__(self, row_schema: type[Schema], *, references: tuple[str, ...] = (),
                 declared_in: tuple[str, ...] = (), **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.row_schema = row_schema
        schema = row_schema()
        self.specs = [(f.data_key or name, _column_kind(f), f)
                      for name, f in schema.fields.items()]
        self.bounds = {f.data_key or name: (f.metadata.get("bound", MAX_ABS_VALUE),
                                            f.metadata.get("minimum"))
                       for name, f in schema.fields.items()}
        self.known = {key for key, _, _ in self.specs}
        # required columns first: once their keys account for every key of every record,
        # the optional columns are known to be absent without extracting them
        self.order = sorted(self.specs, key=lambda spec: not spec[2].required)
        for key in references:
            if not any(k == key and kind == "id" and f.required for k, kind, f in self.specs):
                raise TypeError(f"reference column {key!r} must be a required id")
        self.references = references
        self.declared_in = declared_in

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> Table:
        if not isinstance(value, list):
            raise ValidationError("must be a list of objects")
        index = self._declared(data) if self.references else None
        rows = value
        n = len(rows)
        errors: dict = {}
        try:
            # dict.get refuses anything but an object: the extraction checks the rows
            first = list(map(dict.get, rows, repeat(self.order[0][0])))
        except TypeError:
            raise ValidationError(_cap({i: ["must be an object"] for i, row in enumerate(rows)
                                        if type(row) is not dict})) from None
        keys = sum(map(len, rows))
        # keys of the columns seen so far whose values are not null; never more than the
        # true count, so "counted == keys" proves there are no other keys and no nulls
        counted = 0
        table = Table(n)
        for key, kind, f in self.order:
            optional = not f.required
            default = f.load_default
            if optional and counted == keys:
                self._absent(table, key, kind, default)
                continue
            col = first if key == self.order[0][0] else list(map(dict.get, rows, repeat(key)))
            if kind == "id":
                table.columns[key] = col
                if key in self.references and index is not None:
                    at = _positions(col, index)
                    if at is not None:
                        table.resolved[key] = at
                        if not n or at.min() >= 0:
                            counted += n
                            continue
                bad = check_ids(col)
                for i in bad:
                    _add(errors, i, key, "missing" if key not in rows[i]
                         else "must be a non-empty string")
                counted += n - len(bad)
                continue
            bound, minimum = self.bounds[key]
            vals, present, bad = check_numbers(col, kind, nullable=optional, bound=bound,
                                               minimum=minimum)
            for i in bad:
                _add(errors, i, key, "missing" if key not in rows[i]
                     else number_detail(kind, bound, minimum))
            counted += int(np.count_nonzero(present))
            if default is not missing and not present.all():
                vals = np.where(present, vals, float(default))
                present = np.ones(n, bool)
            table.columns[key] = vals.astype(np.int64, copy=False) if kind == "count" else vals
            if optional and default is missing:
                table.present[key] = present
        if counted != keys:
            # explicit nulls or unknown keys: look at the keys themselves
            errors = self._unknown_keys(rows, errors)
        if errors:
            raise ValidationError(_cap(errors))
        return table

    def _declared(self, data: Any) -> dict[str, int] | None:
        """Position of each id the document declares; None unless all are readable (then
        their own lists report what is wrong, and the references are checked as ids)."""
        if not isinstance(data, dict):
            return None
        lists = [data[name] for name in self.declared_in if data.get(name) is not None]
        try:
            ids: list[Any] = list(chain.from_iterable(
                map(dict.get, rows, repeat("id")) for rows in lists))
        except TypeError:               # a declaring list that is no list of objects
            return None
        if check_ids(ids):
            return None
        return dict(zip(ids, range(len(ids)), strict=True))

    def _unknown_keys(self, rows: list[dict[str, Any]], errors: dict) -> dict:
        """``errors`` after the unknown keys of every record (listed first, per record)."""
        if not rows or set().union(*rows) <= self.known:
            return errors
        unknown: dict = {}
        for i, row in enumerate(rows):
            for key in sorted(row.keys() - self.known):
                _add(unknown, i, key, "unknown field")
        for i, messages in errors.items():
            unknown.setdefault(i, {}).update(messages)
        return unknown

    @staticmethod
    def _absent(table: Table, key: str, kind: str, default: Any) -> None:
        """Fill a column no record has: its default, or zeros marked not present."""
        dtype = np.int64 if kind == "count" else np.float64
        if default is missing:
            table.columns[key] = np.zeros(table.length, dtype)
            table.present[key] = np.zeros(table.length, bool)
        else:
            table.columns[key] = np.full(table.length, default, dtype)


def _positions(names: list[Any], index: dict[str, int]) -> np.ndarray | None:
    """Position of each name in ``index`` (-1: not there); None if one cannot be a key."""
    try:
        return np.fromiter(map(index.get, names, repeat(-1)), np.int64, len(names))
    except TypeError:                   # a list or an object
        return None


class CostMatrix(fields.Field):
    """A dense matrix of numbers or nulls.

    Loads an int64 array when every cell is a whole JSON integer (the common case, and
    the cheapest: no copy, no NaN), a float64 array when some are fractional, and a float64
    array with NaN for null when some are null.
    """

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any
                     ) -> np.ndarray:
        if not isinstance(value, list):
            raise ValidationError("must be a list of rows")
        rows = value
        errors: dict = {}
        if rows and set(map(type, rows)) != {list}:
            for i, row in enumerate(rows):
                if type(row) is not list:
                    errors[i] = ["must be a list of numbers or nulls"]
            raise ValidationError(_cap(errors))
        widths = list(map(len, rows))
        if rows and min(widths) != max(widths):
            for i, w in enumerate(widths):
                if w != widths[0]:
                    errors[i] = [f"has {w} entries, row 0 has {widths[0]}"]
            raise ValidationError(_cap(errors))
        if not rows:
            return np.zeros((0, 0), np.int64)
        width = widths[0]
        plain = _plain_numbers(rows, (len(rows), width), "number")
        if plain is not None:
            return plain
        # nulls, or a bad cell: every cell by type
        cells = list(chain.from_iterable(rows))
        vals, present, bad = _check_each(cells, "number", nullable=True,
                                         bound=MAX_ABS_VALUE, minimum=None)
        if bad:
            for k in bad[: MAX_ERRORS_PER_LIST + 1]:
                errors.setdefault(k // width, {})[k % width] = [
                    number_detail("number") + " or null"]
            raise ValidationError(_cap(errors))
        out = vals.reshape(len(rows), width)
        out[~present.reshape(out.shape)] = np.nan
        return out


class Number(fields.Field):
    """One finite JSON number (no strings, no booleans) within the documented bound."""

    def __init__(self, *, kind: str = "number", bound: int = MAX_ABS_VALUE,
                 **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.kind = kind
        self.bound = bound

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> Any:
        if _bad_number(value, self.kind, self.bound):
            raise ValidationError(number_detail(self.kind, self.bound))
        return int(value) if self.kind == "count" else value


class IdList(fields.Field):
    """A list of ids (non-empty strings)."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> list[str]:
        if not isinstance(value, list):
            raise ValidationError("must be a list of ids")
        bad = check_ids(value)
        if bad:
            raise ValidationError(_cap({i: ["must be a non-empty string"] for i in bad}))
        return value


class NumberMap(fields.Field):
    """An object from ids to numbers, checked in bulk; loads (keys, float64 values)."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any
                     ) -> tuple[list[str], np.ndarray]:
        if not isinstance(value, dict):
            raise ValidationError("must be an object from ids to numbers")
        keys = list(value)
        vals, _, bad = check_numbers(list(value.values()), "number", bound=MAX_ANSWER_VALUE)
        if bad:
            detail = number_detail("number", MAX_ANSWER_VALUE)
            raise ValidationError(_cap({keys[i]: [detail] for i in bad}))
        return keys, vals


def _escape(token: str) -> str:
    return token.replace("~", "~0").replace("/", "~1")


def _lower(message: str) -> str:
    """marshmallow's own messages in our style: lower-case, no closing full stop."""
    message = message.rstrip(".")
    return message[0].lower() + message[1:] if message[:2].istitle() else message


def to_pointers(messages: Any, prefix: str = "") -> list[dict[str, str]]:
    """Flatten marshmallow's nested error messages into RFC 6901 pointers."""
    out: list[dict[str, str]] = []
    if isinstance(messages, dict):
        for key, sub in messages.items():
            here = prefix if key == "_schema" else f"{prefix}/{_escape(str(key))}"
            out.extend(to_pointers(sub, here))
    elif isinstance(messages, list | tuple):
        for sub in messages:
            out.extend(to_pointers(sub, prefix))
    else:
        out.append({"pointer": prefix, "detail": _lower(str(messages))})
    return out


def iter_wire_keys(schema: Schema) -> Iterable[str]:
    """The JSON keys a schema reads, for documentation checks."""
    return [f.data_key or name for name, f in schema.fields.items()]


class StrictBoolean(fields.Field):
    """A JSON true or false, nothing else (marshmallow's Boolean also takes "yes", 1...)."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> bool:
        if type(value) is not bool:
            raise ValidationError("must be true or false")
        return value
