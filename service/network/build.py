"""Build the :class:`~service.network.model.Network` of a loaded problem.

Cross-field checks the schema cannot make (unknown and duplicate ids, matrix shape,
self-loops, size limits) happen here, and every number becomes an exact integer on one
cost grid (see :mod:`service.network.model`).
"""

from __future__ import annotations

import re
import unicodedata
from fractions import Fraction
from typing import Any

import numpy as np

from schemas.problem import ARC_ENDS, ID_TABLES, declared_ids
from service.errors import InvalidProblem, TooLarge
from service.network.model import COST_DECIMALS, FORBIDDEN, Arcs, Network
from service.network.replan import replan_numbers, with_replan
from service.settings import Settings


def _limit(count: int, limit: int, what: str, setting: str) -> None:
    if count > limit:
        raise TooLarge(f"{what} has {count} entries, more than the limit of {limit} "
                       f"(setting {setting})", limit=limit)


def build_network(data: dict[str, Any], settings: Settings) -> Network:
    """Turn a loaded problem (``ProblemSchema().load``) into a :class:`Network`.

    Raises InvalidProblem listing every cross-field error (unknown or duplicate ids,
    matrix shape, self-loops) and TooLarge when a size limit of ``settings`` is exceeded.
    """
    sources, sinks = data["sources"], data["sinks"]
    nodes = data.get("nodes")
    n_src, n_snk, n_mid = len(sources), len(sinks), len(nodes) if nodes else 0
    _limit(n_src + n_snk + n_mid, settings.max_nodes, "sources + sinks + nodes", "MAX_NODES")
    errors: list[dict[str, str]] = []
    groups = [(name, data.get(name)) for name in ID_TABLES]
    ids = declared_ids(data)
    errors.extend(_check_ids(ids, groups, settings.max_id_length))
    if errors:
        raise InvalidProblem(errors)

    penalty_present = sinks.present["penalty"]
    penalty = sinks.columns["penalty"]
    # load costs and the change penalty share the grid of the costs and penalties
    extra = replan_numbers(data)
    if len(extra):
        penalty_present = np.concatenate([penalty_present, np.ones(len(extra), bool)])
        penalty = np.concatenate([penalty, extra])
    sign = -1 if data["objective"] == "max" else 1
    dense = arc_list = None
    if "costs" in data:
        matrix = data["costs"]
        _check_matrix(matrix, n_src, n_snk, settings, errors)
        if errors:
            raise InvalidProblem(errors)
        whole_penalties = _whole(penalty[penalty_present])
        if matrix.dtype == np.int64 and whole_penalties:
            scale = 1                       # whole costs, every cell allowed: no copy
            dense = _min_form(matrix, scale, sign)
        else:
            allowed = ~np.isnan(matrix)
            values = np.where(allowed, matrix, 0.0)
            scale = _scale_for(values, penalty[penalty_present])
            dense = _scaled(values, scale) * sign
            dense[~allowed] = FORBIDDEN
    else:
        table = data["arcs"]
        tail, head = _arc_ends(table, settings, errors)
        if errors:
            raise InvalidProblem(errors)
        scale = _scale_for(table.columns["cost"], penalty[penalty_present])
        bounded = table.present["capacity"].copy()
        arc_list = Arcs(id=np.arange(len(tail), dtype=np.int64), tail=tail, head=head,
                        cost=_min_form(table.columns["cost"], scale, sign),
                        capacity=np.where(bounded, table.columns["capacity"], 0).astype(np.int64),
                        bounded=bounded)
    penalty, penalty_present = penalty[:n_snk], penalty_present[:n_snk]
    net = Network(
        ids=ids, n_sources=n_src, n_nodes=n_mid, n_sinks=n_snk,
        supply=sources.columns["supply"], demand=sinks.columns["demand"],
        penalty=np.where(penalty_present, _scaled(penalty, scale), 0),
        soft=penalty_present.copy(), dense=dense, arc_list=arc_list,
        maximize=sign < 0, reject_unmet=data["unmet_demand"] == "reject", cost_scale=scale,
        data=_carried(groups), bottleneck=data["objective"] == "bottleneck",
    )
    return with_replan(net, data, lambda values: _scaled(values, scale))


def _carried(groups: list) -> dict[str, Any]:
    """The ``data`` objects of sources, nodes and sinks by id, in numbering order."""
    found: dict[str, Any] = {}
    for _, table in groups:
        if table is None or not table.present["data"].any():
            continue
        ids, values = table.columns["id"], table.columns["data"]
        for i in np.flatnonzero(table.present["data"]).tolist():
            found[ids[i]] = values[i]
    return found


def _scale_for(costs: np.ndarray, penalties: np.ndarray) -> int:
    return 1 if _whole(costs) and _whole(penalties) else 10**COST_DECIMALS


def _whole(values: np.ndarray) -> bool:
    return values.dtype.kind == "i" or bool(np.all(values == np.floor(values)))


def _scaled(values: np.ndarray, scale: int) -> np.ndarray:
    """Values on the integer grid of ``scale``; integers are exact as they are.

    A JSON decimal stands for the shortest decimal that reads back as its double; it is
    rounded half to even onto the grid. Within the request bound (10**9 < 2**30) that
    decimal and the double differ by at most 0.06 grid units and the product by at most
    0.07, so ``rint`` decides every entry but those near a half-unit tie (digits beyond
    the sixth), which are read exactly with Fraction.
    """
    if values.dtype.kind == "i":
        return values * scale if scale != 1 else values
    units = values * scale
    grid = np.rint(units)
    units -= grid
    np.abs(units, out=units)
    out = grid.astype(np.int64)
    if units.size and units.max() > 0.25:
        near = np.flatnonzero(units > 0.25)
        out.flat[near] = [round(Fraction(repr(v)) * scale)
                          for v in values.reshape(-1)[near].tolist()]
    return out


def _min_form(values: np.ndarray, scale: int, sign: int) -> np.ndarray:
    """Costs as the engines take them; whole costs of a min problem are used as loaded."""
    scaled = _scaled(values, scale)
    return scaled if sign > 0 else -scaled


#: Characters an id may not contain: the C0 and C1 control characters, and the
#: bidirectional formatting characters (Unicode's Bidi_Control property), which make an id
#: display as another one. The first class is all of Unicode's general category Cc.
_CONTROL = "\x00-\x1f\x7f-\x9f"
_BIDI = "\u061c\u200e\u200f\u202a-\u202e\u2066-\u2069"
_FORBIDDEN_CHAR = re.compile(f"[{_CONTROL}{_BIDI}]")
#: Look-up tables by code point (every one of these characters is below U+3001).
_IS_BIDI = np.zeros(0x3001, bool)
_IS_BIDI[[0x061C, 0x200E, 0x200F, *range(0x202A, 0x202F), *range(0x2066, 0x206A)]] = True
#: What str.isspace and str.strip take for whitespace: Unicode's White_Space characters
#: and the four information separators U+001C to U+001F (bidirectional class B or S).
_IS_SPACE = np.zeros(0x3001, bool)
_IS_SPACE[[*range(0x09, 0x0E), *range(0x1C, 0x21), 0x85, 0xA0, 0x1680, *range(0x2000, 0x200B),
           0x2028, 0x2029, 0x202F, 0x205F, 0x3000]] = True


def _check_ids(ids: list[str], groups: list, max_len: int) -> list[dict[str, str]]:
    """Errors of the declared ids: length, control and bidirectional formatting characters,
    leading or trailing whitespace (an id of only whitespace has both), exact repeats, and
    ids that differ but are equal after Unicode NFC normalisation (both pointers).

    The ids stay as sent; normalisation only finds ids that a person could not tell apart.
    Every id is checked at once with C-level passes (a join, a count, numpy on its bytes,
    one NFC normalisation of the join), and only a problem found sends the check id by id.
    """
    too_long = max(map(len, ids), default=0) > max_len
    unique = len(set(ids)) == len(ids)
    # NUL, never part of a good id, separates them: normalisation cannot reach across it
    # (a starter that composes with nothing), and _written_well counts n - 1 of them unless
    # an id holds one
    joined = "\x00".join(ids)
    nfc = joined if joined.isascii() else unicodedata.normalize("NFC", joined)
    if unique and not too_long and nfc == joined and _written_well(len(ids), joined):
        return []
    errors: list[dict[str, str]] = []
    first: dict[str, str] = {}
    seen: dict[str, tuple[str, str]] = {}   # NFC form -> (pointer, id) of its first id
    told: set[str] = set()                  # pointers already named in an NFC error
    for name, table in groups:
        if table is None:
            continue
        for i, id_ in enumerate(table.columns["id"]):
            pointer = table.pointer(name, i, "id")
            errors.extend({"pointer": pointer, "detail": d} for d in _id_faults(id_, max_len))
            if id_ in first:
                errors.append({"pointer": pointer,
                               "detail": f"duplicate id {id_!r} (first at {first[id_]})"})
                continue
            first[id_] = pointer
            form = unicodedata.normalize("NFC", id_)
            if form not in seen:
                seen[form] = (pointer, id_)
                continue
            other, other_id = seen[form]
            if other not in told:
                told.add(other)
                errors.append({"pointer": other, "detail": _nfc_detail(other_id, pointer)})
            errors.append({"pointer": pointer, "detail": _nfc_detail(id_, other)})
    return errors


def _written_well(n: int, joined: str) -> bool:
    """No id of the ``n`` joined by NUL has a forbidden character or whitespace at either
    end: numpy on the code points of the join, whatever their number."""
    try:
        points = np.frombuffer(joined.encode("latin-1"), np.uint8)
    except UnicodeEncodeError:
        # UTF-16 code units: a character beyond U+FFFF becomes two surrogates, neither of
        # which is a control, a bidirectional or a space character, so nothing is missed
        points = np.frombuffer(joined.encode("utf-16-le", "surrogatepass"), np.uint16)
    nul = np.flatnonzero(points == 0)
    if len(nul) != n - 1 or np.count_nonzero(points < 0x20) != n - 1:
        return False                    # a NUL or another C0 control inside an id
    if np.count_nonzero((points >= 0x7F) & (points <= 0x9F)):
        return False
    if points.dtype == np.uint16 and _IS_BIDI[points[(points >= 0x061C)
                                                     & (points <= 0x2069)]].any():
        return False
    edges = points[np.concatenate(([0], nul + 1, nul - 1, [len(points) - 1]))]
    return not _IS_SPACE[edges[edges < len(_IS_SPACE)]].any()


def _id_faults(id_: str, max_len: int) -> list[str]:
    """What is wrong with one id, in words (the slow path of _check_ids)."""
    faults = []
    if len(id_) > max_len:
        faults.append(f"must be at most {max_len} characters long")
    if not id_.strip():
        faults.append("must hold more than whitespace")
    elif id_ != id_.strip():
        faults.append("must not begin or end with whitespace")
    found = _FORBIDDEN_CHAR.search(id_)
    if found:
        char = found.group()
        what = ("control characters (U+0000 to U+001F, U+007F to U+009F)"
                if unicodedata.category(char) == "Cc" else
                "bidirectional formatting characters (U+061C, U+200E, U+200F, U+202A to "
                "U+202E, U+2066 to U+2069)")
        faults.append(f"must not contain {what}; U+{ord(char):04X} is at position "
                      f"{found.start()}")
    return faults


def _nfc_detail(id_: str, other: str) -> str:
    # ascii() shows the code points, which are all that tells the two ids apart
    return (f"id {ascii(id_)} equals the id at {other} after Unicode NFC normalisation; ids "
            "that read the same must be written the same")


def _check_matrix(matrix: np.ndarray, n_src: int, n_snk: int, settings: Settings,
                  errors: list[dict[str, str]]) -> None:
    rows, cols = matrix.shape
    _limit(rows * cols, settings.max_cells, "costs", "MAX_CELLS")
    if rows != n_src:
        errors.append({"pointer": "/costs",
                       "detail": f"has {rows} rows, expected {n_src} (one per source)"})
    elif cols != n_snk and rows > 0:
        errors.append({"pointer": "/costs/0",
                       "detail": f"has {cols} entries, expected {n_snk} (one per sink)"})


def _arc_ends(arcs: Any, settings: Settings,
              errors: list[dict[str, str]]) -> tuple[np.ndarray, np.ndarray]:
    """(tail, head) node indices as the schema resolved them (RecordList ``references``);
    -1 marks a name that is no declared id."""
    n = len(arcs)
    _limit(n, settings.max_arcs, "arcs", "MAX_ARCS")
    for key in ARC_ENDS:
        names, idx = arcs.columns[key], arcs.resolved[key]
        for i in np.flatnonzero(idx < 0)[:50].tolist():
            errors.append({"pointer": arcs.pointer("arcs", i, key),
                           "detail": f"unknown id {names[i]!r}"})
    tail, head = (arcs.resolved[key] for key in ARC_ENDS)
    loops = np.flatnonzero((tail == head) & (tail >= 0))
    for i in loops[:50].tolist():
        errors.append({"pointer": arcs.pointer("arcs", i, "to", whole=True),
                       "detail": f"arc from {arcs.columns['from'][i]!r} to itself"})
    return tail, head
