"""The frontier of a partition read in bulk: tens of thousands of small records.

A marshmallow Nested load costs tens of microseconds a record; the frontier of 20
alternatives of a 150k-arc problem has ~90,000 of them. :class:`FrontierList` reads each
record with a few type checks and, at the first record it cannot read that way, hands the
whole list to the row schema, which names every fault as marshmallow would (the same
pattern as :class:`schemas.tables.RecordList`).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from marshmallow import Schema, fields

from schemas.numbers import MAX_ANSWER_VALUE, _bad_number

_KEYS = frozenset({"parent", "branch", "side", "bound", "shift", "distances",
                   "virtual_distances", "empty"})
_SIDES = ("below", "above")
_VIRTUAL = ("super_source", "super_sink", "hard_pool")


def _count(v: Any) -> bool:
    return type(v) is int and 0 <= v <= MAX_ANSWER_VALUE


def _number(v: Any) -> bool:
    return type(v) in (int, float) and not _bad_number(v, "number", MAX_ANSWER_VALUE)


def _ids(v: Any) -> bool:
    return type(v) is list and all(type(i) is str and i for i in v)


def _record(e: Any) -> dict[str, Any] | None:
    """One record as the row schema would load it, or None when it is not plainly valid."""
    if type(e) is not dict or not e.keys() <= _KEYS:
        return None
    if not (_count(e.get("parent")) and _count(e.get("branch")) and e.get("side") in _SIDES):
        return None
    out: dict[str, Any] = {"parent": e["parent"], "branch": e["branch"], "side": e["side"]}
    for key in ("bound", "shift"):
        if key in e:
            if not _number(e[key]):
                return None
            out[key] = e[key]
    if "distances" in e:
        d = e["distances"]
        if type(d) is not dict or not all(_number(v) for v in d.values()):
            return None
        out["distances"] = (list(d), np.asarray(list(d.values()), np.float64))
    if "virtual_distances" in e:
        d = e["virtual_distances"]
        if type(d) is not dict or not all(k in _VIRTUAL and _number(v) for k, v in d.items()):
            return None
        out["virtual_distances"] = dict(d)
    if "empty" in e:
        d = e["empty"]
        if type(d) is not dict or not d.keys() <= {"nodes", "virtual_nodes"} or \
                not _ids(d.get("nodes")):
            return None
        virtual = d.get("virtual_nodes", [])
        if type(virtual) is not list or not all(v in _VIRTUAL for v in virtual):
            return None
        out["empty"] = {"nodes": d["nodes"], "virtual_nodes": list(virtual)}
    return out


class FrontierList(fields.Field):
    """A list of frontier records of ``row_schema``, read in bulk (module docstring)."""

    def __init__(self, row_schema: type[Schema], **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.row_schema = row_schema

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> Any:
        if type(value) is list:
            out = []
            for e in value:
                r = _record(e)
                if r is None:
                    break
                out.append(r)
            else:
                return out
        return fields.List(fields.Nested(self.row_schema)).deserialize(value)
