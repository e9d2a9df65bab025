"""The columnar form of a list of records: an object of equal-length arrays, one per field.

``[{"from": "a", "to": "b", "cost": 3}, {"from": "b", "to": "c", "cost": 4}]`` may also be
sent as ``{"from": ["a", "b"], "to": ["b", "c"], "cost": [3, 4]}``. A large body then holds
a few long arrays instead of millions of small objects: less to parse, and each array goes
to numpy as it is. Entry ``i`` of every array is field ``key`` of record ``i``; a ``null``
entry is what an absent or null field of a record is (its default, or "not given").

This module holds what is particular to the form: taking the arrays apart (structure,
lengths) and writing errors keyed by record as errors keyed by column
(``/arcs/cost/1234`` rather than ``/arcs/1234/cost``). The entries themselves are checked
by the one bulk check of :class:`schemas.tables.RecordList`, whichever form they came in.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from marshmallow import ValidationError


def split_columns(value: dict[str, Any], keys: Iterable[tuple[str, bool]]
                  ) -> tuple[int, dict[str, list[Any]]]:
    """(length, the arrays by key) of an object of arrays; ValidationError, keyed by
    column, for unknown keys, missing required arrays, non-arrays and unequal lengths.

    ``keys`` are the (key, required) of the row schema's fields, required ones first. An
    optional key whose value is null counts as absent.
    """
    wanted = dict(keys)
    errors: dict[str, list[str]] = {key: ["unknown field"] for key in value
                                     if key not in wanted}
    cols: dict[str, list[Any]] = {}
    for key, required in wanted.items():
        col = value.get(key)
        if col is None and not required:
            continue
        if key not in value:
            errors[key] = ["missing"]
        elif type(col) is not list:
            errors[key] = ["must be an array (one entry per record)"]
        else:
            cols[key] = col
    if cols:
        first, n = next((k, len(c)) for k, c in cols.items())
        for key, col in cols.items():
            if len(col) != n:
                side = "fewer" if len(col) < n else "more"
                errors[key] = [f"has {len(col)} entries, {side} than {first!r} ({n}): "
                               "the arrays of one table must be of equal length"]
    if errors:
        raise ValidationError(errors)
    return (len(next(iter(cols.values()))) if cols else 0), cols


def by_column(errors: dict[Any, Any]) -> dict[Any, Any]:
    """Errors keyed ``{record: {key: messages}}`` rekeyed ``{key: {record: messages}}``;
    entries about the whole list (``_schema``) stay where they are."""
    out: dict[Any, Any] = {}
    for index, messages in errors.items():
        if not isinstance(messages, dict):
            out[index] = messages
            continue
        for key, sub in messages.items():
            out.setdefault(key, {})[index] = sub
    return out


def as_columns(value: Any) -> Any:
    """A list of records in the columnar form: an array per key any record has, null where
    a record lacks it; anything else (an object already, a bad value) as it is."""
    if not isinstance(value, list) or not all(isinstance(r, dict) for r in value):
        return value
    keys = dict.fromkeys(k for r in value for k in r)
    return {k: [r.get(k) for r in value] for k in keys}


def as_records(value: Any) -> Any:
    """A table in the record form, whichever form it was sent in (for readers of small
    problems, such as the report: a large table is never turned into records)."""
    if not isinstance(value, dict):
        return value
    keys = [k for k, col in value.items() if isinstance(col, list)]
    n = min((len(value[k]) for k in keys), default=0)
    return [{k: value[k][i] for k in keys if value[k][i] is not None} for i in range(n)]
