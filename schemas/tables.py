"""Fields that check large lists in bulk.

A request may carry a 4000 x 4000 cost matrix or a million arcs; checking each cell with a
marshmallow field would cost seconds in Python. These fields check the *structure* with
C-level passes (``map``, ``set``) and the *numbers* with numpy, and only walk the input
element by element to name the culprits once something is known to be wrong.

A list of records is described by an ordinary marshmallow row schema (the wire format, also
used by the OpenAPI document); :class:`RecordList` derives its columns from that schema.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass, field
from itertools import chain, repeat
from typing import Any

import numpy as np
from marshmallow import Schema, ValidationError, fields, missing

#: Largest magnitude of any number in a request, so that sums of products stay exact in
#: 64-bit integers and below 2**53 (the exact range of a JSON number in most clients).
MAX_ABS_VALUE = 10**9

#: At most this many errors are reported per list; the count of the rest is given.
MAX_ERRORS_PER_LIST = 50

_NUMBER_TYPES = {int, float}

#: Whether the body being loaded may hold JSON booleans (unknown: assume so). When it
#: cannot, numpy's own type inference is a complete type check of a cost matrix: any
#: string, null or nested list makes it leave the numeric kinds, and only a boolean could
#: pass as a number unseen.
_booleans_possible: ContextVar[bool] = ContextVar("booleans_possible", default=True)


@contextmanager
def body_source(raw: bytes | None) -> Iterator[None]:
    """Within this block, loads come from ``raw`` (None: unknown)."""
    if raw is None:
        yield
        return
    token = _booleans_possible.set(b"true" in raw or b"false" in raw)
    try:
        yield
    finally:
        _booleans_possible.reset(token)


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


def check_numbers(values: list[Any], kind: str, *, nullable: bool = False,
                  bound: int = MAX_ABS_VALUE, minimum: int | None = None
                  ) -> tuple[np.ndarray, np.ndarray, list[int]]:
    """Check a list of JSON numbers in bulk.

    Returns ``(array, present, bad)``: float64 values (0 where null), a mask of non-null
    entries and the indices of the bad entries (empty when all are good).
    """
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
        return np.zeros(n), np.ones(n, bool), bad
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
    if set(map(type, values)) <= {str} and all(map(len, values)):
        return []
    return [i for i, v in enumerate(values) if type(v) is not str or not v]


@dataclass
class Table:
    """Columns of a checked list of records: numpy arrays for numbers, lists for ids."""

    length: int
    columns: dict[str, Any] = field(default_factory=dict)
    present: dict[str, np.ndarray] = field(default_factory=dict)

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
    """

    def __init__(self, row_schema: type[Schema], **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.row_schema = row_schema
        schema = row_schema()
        self.specs = [(f.data_key or name, _column_kind(f), f)
                      for name, f in schema.fields.items()]
        self.bounds = {f.data_key or name: (f.metadata.get("bound", MAX_ABS_VALUE),
                                            f.metadata.get("minimum"))
                       for name, f in schema.fields.items()}

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> Table:
        if not isinstance(value, list):
            raise ValidationError("must be a list of objects")
        rows = value
        n = len(rows)
        errors: dict = {}
        if n and set(map(type, rows)) != {dict}:
            for i, row in enumerate(rows):
                if type(row) is not dict:
                    errors[i] = ["must be an object"]
            raise ValidationError(_cap(errors))
        known = {key for key, _, _ in self.specs}
        unknown = set().union(*rows) - known if n else set()
        if unknown:
            for i, row in enumerate(rows):
                for key in row.keys() - known:
                    _add(errors, i, key, "unknown field")
        table = Table(n)
        for key, kind, f in self.specs:
            col = list(map(dict.get, rows, repeat(key)))
            default = f.load_default
            has_default = default is not missing
            optional = not f.required
            if kind == "id":
                bad = check_ids(col)
                for i in bad:
                    msg = ("missing" if key not in rows[i] else "must be a non-empty string")
                    _add(errors, i, key, msg)
                table.columns[key] = col
                continue
            nullable = optional
            bound, minimum = self.bounds[key]
            vals, present, bad = check_numbers(col, kind, nullable=nullable, bound=bound,
                                               minimum=minimum)
            for i in bad:
                _add(errors, i, key, "missing" if key not in rows[i]
                     else number_detail(kind, bound, minimum))
            if optional and has_default and not present.all():
                vals = np.where(present, vals, float(default))
                present = np.ones(n, bool)
            if f.required and not present.all():
                for i in np.flatnonzero(~present).tolist():
                    _add(errors, i, key, "missing" if key not in rows[i] else "must not be null")
            table.columns[key] = vals.astype(np.int64) if kind == "count" else vals
            if optional and not has_default:
                table.present[key] = present
        if errors:
            raise ValidationError(_cap(errors))
        return table


class CostMatrix(fields.Field):
    """A dense matrix of numbers or nulls.

    Loads an int64 array when every cell is a whole JSON integer (the common case, and
    the cheapest: no copy, no NaN), else a float64 array with NaN for null.
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
        width = widths[0] if rows else 0
        if rows and not _booleans_possible.get():
            fast = self._numeric(rows, width)
            if fast is not None:
                return fast
        types = set(map(type, chain.from_iterable(rows)))
        if types <= {int}:
            try:
                whole = np.array(rows, dtype=np.int64).reshape(len(rows), width)
            except OverflowError:
                whole = None
            if whole is not None and (not whole.size or
                                      int(np.abs(whole).max()) <= MAX_ABS_VALUE):
                return whole
        cells = list(chain.from_iterable(rows))
        vals, present, bad = check_numbers(cells, "number", nullable=True)
        if bad:
            for k in bad[: MAX_ERRORS_PER_LIST + 1]:
                errors.setdefault(k // width, {})[k % width] = [
                    number_detail("number") + " or null"]
            raise ValidationError(_cap(errors))
        out = vals.reshape(len(rows), width)
        out[~present.reshape(out.shape)] = np.nan
        return out


    @staticmethod
    def _numeric(rows: list, width: int) -> np.ndarray | None:
        """The matrix by numpy's inference alone, when every cell is an in-range number."""
        try:
            arr = np.array(rows)
        except (ValueError, OverflowError):
            return None
        if arr.shape != (len(rows), width) or arr.dtype.kind not in "if" or not arr.size:
            return None                     # nulls, strings, huge integers: the full check
        if arr.dtype.kind == "f" and not np.isfinite(arr).all():
            return None
        if float(np.abs(arr).max()) > MAX_ABS_VALUE:
            return None
        return arr.astype(np.int64, copy=False) if arr.dtype.kind == "i" else arr


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
