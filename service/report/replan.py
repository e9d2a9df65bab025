"""Pins, the previous plan and load costs on the report: facts, marks and the pins table.

A pinned arc sits at both of its bounds, so any reduced cost is consistent with it; an arc
the previous plan used is two parallel arcs, the keep part (at most the previous units, at
cost less the change penalty) and the rest (README, "Re-planning").
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from service.report.model import _Model
from service.report.style import _esc, _num, _plural


def _arc_of(m: _Model, row: Mapping[str, Any], index: Mapping[str, int]) -> int:
    """The arc a pin or previous row names, -1 for none."""
    t, h = index.get(str(row.get("from")), -1), index.get(str(row.get("to")), -1)
    arc = row.get("arc")
    if isinstance(arc, int) and 0 <= arc < len(m.tail) and m.tail[arc] == t and m.head[arc] == h:
        return arc
    hits = np.flatnonzero((m.tail == t) & (m.head == h))
    return int(hits[0]) if len(hits) == 1 else -1


def mark_replan(m: _Model, body: Mapping[str, Any]) -> None:
    """Set ``m.pinned`` and recompute ``m.violation`` with pins and keep arcs."""
    index = {pid: i for i, pid in enumerate(m.places)}
    pins = [r for r in body.get("fixed") or [] if isinstance(r, Mapping)]
    m.pinned = np.zeros(len(m.tail), bool)
    for row in pins:
        k = _arc_of(m, row, index)
        if k >= 0:
            m.pinned[k] = True
    previous = body.get("previous") or {}
    rows = previous.get("allocation") or [] if isinstance(previous, Mapping) else []
    penalty = previous.get("change_penalty", 0) if isinstance(previous, Mapping) else 0
    kept_cap = np.zeros(len(m.tail))
    for row in rows:
        if isinstance(row, Mapping):
            k = _arc_of(m, row, index)
            if k >= 0 and isinstance(row.get("flow"), int):
                kept_cap[k] += row["flow"]
    if not len(m.tail) or (not pins and not rows):
        return
    kept_cap = np.minimum(kept_cap, m.cap)
    keep = np.minimum(kept_cap, m.flow)
    plain = m.flow - keep
    eps = 1e-9 * (np.abs(m.rc) + 1) + 1e-9
    rc_keep = m.rc - float(penalty or 0)
    with np.errstate(invalid="ignore"):
        bad = (((plain > 0) & (m.rc > eps)) | ((m.rc < -eps) & (plain < m.cap - kept_cap))
               | ((keep > 0) & (rc_keep > eps)) | ((rc_keep < -eps) & (keep < kept_cap)))
    m.violation = bad & ~m.pinned


def problem_facts(body: Mapping[str, Any]) -> list[tuple[str, str]]:
    """Pins, previous plan and load costs of the request, in words."""
    facts = []
    pins = body.get("fixed") or []
    if pins:
        units = sum(p.get("flow", 0) for p in pins if isinstance(p, Mapping))
        facts.append(("pins", f"{_plural(len(pins), 'pair')}, {units} units fixed"))
    previous = body.get("previous")
    if isinstance(previous, Mapping):
        rows = previous.get("allocation") or []
        units = sum(r.get("flow", 0) for r in rows if isinstance(r, Mapping))
        facts.append(("previous plan", f"{units} units on {_plural(len(rows), 'pair')}; "
                      f"{_num(previous.get('change_penalty'))} per unit moved"))
    loaded = [s for s in body.get("sources") or [] if isinstance(s, Mapping)
              and s.get("load_costs")]
    if loaded:
        facts.append(("load costs", f"on {_plural(len(loaded), 'source')}"))
    return [(k, _esc(v)) for k, v in facts]


def answer_facts(answer: Mapping[str, Any], said: str) -> list[tuple[str, str]]:
    changes = answer.get("changes")
    if not isinstance(changes, Mapping):
        return []
    return [("changes" + said, _esc(f"{_num(changes.get('kept'))} units kept, "
                                   f"{_num(changes.get('moved'))} moved, penalty "
                                   f"{_num(changes.get('penalty'))}"))]


def pins_rows(m: _Model, body: Mapping[str, Any]) -> list[list[str]]:
    """One row per pin: the pair, the pinned units and what the allocation carries."""
    index = {pid: i for i, pid in enumerate(m.places)}
    rows = []
    for pin in body.get("fixed") or []:
        if not isinstance(pin, Mapping):
            continue
        k = _arc_of(m, pin, index)
        carried = "no such arc" if k < 0 else str(int(m.flow[k]))
        rows.append([_esc(pin.get("from")), _esc(pin.get("to")), _esc(_num(pin.get("flow"))),
                     _esc(carried)])
    return rows
