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

from collections.abc import Callable
from dataclasses import dataclass, field
from functools import partial
from itertools import chain, repeat
from operator import is_not
from typing import Any

import numpy as np
import orjson
from marshmallow import Schema, ValidationError, fields, missing

from schemas.columns import by_column, split_columns
from schemas.numbers import (
    MAX_ABS_VALUE,
    MAX_ERRORS_PER_LIST,
    _add,
    _cap,
    _check_each,
    _plain_numbers,
    check_ids,
    check_numbers,
    number_detail,
)


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
    columnar: bool = False          # sent as an object of arrays (schemas.columns)

    def __len__(self) -> int:
        return self.length

    def pointer(self, name: str, index: int, key: str, *, whole: bool = False) -> str:
        """JSON Pointer to field ``key`` of record ``index`` of the table sent as
        ``/name``, in the form it was sent; ``whole`` points at the record itself, which
        in the columnar form is its entry of the array ``key``."""
        if self.columnar:
            return f"/{name}/{key}/{index}"
        return f"/{name}/{index}" if whole else f"/{name}/{index}/{key}"


def _column_kind(f: fields.Field) -> str:
    if isinstance(f, fields.Dict):
        return "object"
    if isinstance(f, fields.List):
        return "field"
    if isinstance(f, fields.Boolean):
        return "flag"
    if isinstance(f, fields.Integer):
        return "count"
    if isinstance(f, fields.Number):
        return "number"
    if isinstance(f, fields.String):
        return "id"
    raise TypeError(f"no bulk check for field {f!r}")


class RecordList(fields.Field):
    """A JSON list of records whose columns are given by ``row_schema``; loads a Table.

    Integer fields of the row schema become whole numbers >= 0, other numbers finite
    numbers, booleans JSON true or false, strings ids. ``load_default`` of a row field
    fills missing keys; a field without one and not required may be absent or null
    (``present`` says where).

    ``references`` names required id columns whose values name ids declared by the lists
    ``declared_in`` of the same document (their ``id`` keys, numbered across the lists in
    that order). They are resolved here into ``Table.resolved``: every declared id is a
    non-empty string, so an entry that resolves is one, and the lookup doubles as the check.
    Entries that are strings but no declared id stay -1, for the caller to report.

    ``columnar`` also takes the list as an object of equal-length arrays, one per field
    (:mod:`schemas.columns`); each array is checked as the column of the records would be,
    and errors point into the arrays (``/arcs/cost/7`` for ``/arcs/7/cost``).
    """

    def __init__(self, row_schema: type[Schema], *, references: tuple[str, ...] = (),
                 declared_in: tuple[str, ...] = (), columnar: bool = False,
                 **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.row_schema = row_schema
        self.columnar = columnar
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
        index = self._declared(data) if self.references else None
        if self.columnar and isinstance(value, dict):
            return self._from_columns(value, index)
        if not isinstance(value, list):
            raise ValidationError("must be a list of objects" + (
                " or an object of equal-length arrays" if self.columnar else ""))
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
            if not f.required and counted == keys:
                self._absent(table, key, kind, f.load_default)
                continue
            col = first if key == self.order[0][0] else list(map(dict.get, rows, repeat(key)))
            counted += self._column(table, key, kind, f, col, index, errors,
                                    partial(_unsent, rows, key))
        if counted != keys:
            # explicit nulls or unknown keys: look at the keys themselves
            errors = self._unknown_keys(rows, errors)
        if errors:
            raise ValidationError(_cap(errors))
        return table

    def _from_columns(self, value: dict[str, Any], index: dict[str, int] | None) -> Table:
        """The Table of the columnar form: the arrays taken apart, then the same checks."""
        n, cols = split_columns(value, ((key, f.required) for key, _, f in self.order))
        table = Table(n, columnar=True)
        errors: dict = {}
        for key, kind, f in self.order:
            if key in cols:
                self._column(table, key, kind, f, cols[key], index, errors, _never)
            else:
                self._absent(table, key, kind, f.load_default)
        if errors:
            raise ValidationError(by_column(_cap(errors)))
        return table

    def _column(self, table: Table, key: str, kind: str, f: fields.Field, col: list[Any],
                index: dict[str, int] | None, errors: dict,
                unsent: Callable[[int], bool]) -> int:
        """Check the column ``key`` (its entries in record order, None where absent) into
        ``table``; errors go to ``errors`` by record, ``unsent(i)`` tells an absent key
        from a null. Returns the count of entries that are not null."""
        n = table.length
        optional = not f.required
        default = f.load_default
        if kind == "id":
            table.columns[key] = col
            if key in self.references and index is not None:
                at = _positions(col, index)
                if at is not None:
                    table.resolved[key] = at
                    if not n or at.min() >= 0:
                        return n
            bad = check_ids(col)
            counted = n
            if optional:
                # absent or null is fine in an optional column: only bad strings count
                present = np.fromiter(map(is_not, col, repeat(None)), bool, n)
                table.present[key] = present
                counted = int(np.count_nonzero(present))
                bad = [i for i in bad if present[i]]
            for i in bad:
                _add(errors, i, key, "missing" if unsent(i) else "must be a non-empty string")
            return counted - len(bad)
        if kind == "object":
            present, faults = _objects(col, f.metadata["max_bytes"])
            for i, why in faults:
                _add(errors, i, key, why)
            table.columns[key] = col
            table.present[key] = present
            return int(np.count_nonzero(present))
        if kind == "field":
            table.columns[key], present = _each(col, f, key, errors)
            table.present[key] = present
            return int(np.count_nonzero(present))
        if kind == "flag":
            vals, present, bad = _flags(col, nullable=optional)
            for i in bad:
                _add(errors, i, key, "missing" if unsent(i) else "must be true or false")
            table.columns[key] = vals
            if optional and default is missing:
                table.present[key] = present
            return int(np.count_nonzero(present))
        bound, minimum = self.bounds[key]
        vals, present, bad = check_numbers(col, kind, nullable=optional, bound=bound,
                                           minimum=minimum)
        for i in bad:
            _add(errors, i, key, "missing" if unsent(i)
                 else number_detail(kind, bound, minimum))
        counted = int(np.count_nonzero(present))
        if default is not missing and not present.all():
            vals = np.where(present, vals, float(default))
            present = np.ones(n, bool)
        table.columns[key] = vals.astype(np.int64, copy=False) if kind == "count" else vals
        if optional and default is missing:
            table.present[key] = present
        return counted

    def _declared(self, data: Any) -> dict[str, int] | None:
        """Position of each id the document declares; None unless all are readable (then
        their own lists report what is wrong, and the references are checked as ids)."""
        if not isinstance(data, dict):
            return None
        lists = [data[name] for name in self.declared_in if data.get(name) is not None]
        try:
            ids: list[Any] = list(chain.from_iterable(
                _ids_of(rows) for rows in lists))
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
        if kind in ("object", "field"):
            table.columns[key] = [None] * table.length
            table.present[key] = np.zeros(table.length, bool)
            return
        dtype = {"count": np.int64, "flag": np.bool_}.get(kind, np.float64)
        if default is missing:
            table.columns[key] = np.zeros(table.length, dtype)
            table.present[key] = np.zeros(table.length, bool)
        else:
            table.columns[key] = np.full(table.length, default, dtype)


def _each(col: list[Any], f: fields.Field, key: str, errors: dict
          ) -> tuple[list[Any], np.ndarray]:
    """A column of lists, each loaded by its own field where present (null is absent):
    such columns are short or rare (a source's load costs)."""
    present = np.fromiter(map(is_not, col, repeat(None)), bool, len(col))
    out: list[Any] = [None] * len(col)
    for i in np.flatnonzero(present).tolist():
        try:
            out[i] = f.deserialize(col[i])
        except ValidationError as e:
            errors.setdefault(i, {})[key] = e.messages
    return out, present


def _ids_of(rows: Any) -> Any:
    """The ids a declaring list holds, in either form; TypeError when it cannot say."""
    if type(rows) is dict:
        ids = rows.get("id")
        if type(ids) is not list or any(
                type(col) is list and len(col) != len(ids) for col in rows.values()):
            raise TypeError("no array of ids of the table's length")
        return ids
    return map(dict.get, rows, repeat("id"))


def _unsent(rows: list[dict[str, Any]], key: str, index: int) -> bool:
    """Whether record ``index`` lacks ``key`` (rather than holding null)."""
    return key not in rows[index]


def _never(index: int) -> bool:
    """No entry of an array is absent: a record without a field has null there."""
    return False


def _flags(values: list[Any], *, nullable: bool) -> tuple[np.ndarray, np.ndarray, list[int]]:
    """(values, present, bad) of a column of JSON true/false, null where allowed."""
    n = len(values)
    if set(map(type, values)) <= {bool}:
        return np.array(values, bool).reshape(n), np.ones(n, bool), []
    present = np.fromiter(map(is_not, values, repeat(None)), bool, n)
    bad = [i for i, v in enumerate(values)
           if type(v) is not bool and not (nullable and v is None)]
    return np.array([v is True for v in values], bool).reshape(n), present, bad


def _objects(values: list[Any], max_bytes: int) -> tuple[np.ndarray, list[tuple[int, str]]]:
    """(present, bad) of a column of JSON objects or nulls, each at most ``max_bytes`` long
    written as compact JSON (UTF-8). Only the records that carry one are measured."""
    present = np.fromiter(map(is_not, values, repeat(None)), bool, len(values))
    bad: list[tuple[int, str]] = []
    for i in np.flatnonzero(present).tolist():
        value = values[i]
        if type(value) is not dict:
            bad.append((i, "must be a JSON object"))
            continue
        try:
            size = len(orjson.dumps(value))
        except (TypeError, orjson.JSONEncodeError):
            bad.append((i, "must be a JSON object whose integers fit in 64 bits"))
            continue
        if size > max_bytes:
            bad.append((i, f"must be at most {max_bytes} bytes written as compact JSON "
                           f"(UTF-8); this one is {size}"))
    return present, bad


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
