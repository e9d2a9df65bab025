"""The report's section on the next-best plans: what each costs more and how it differs.

Shown only when the answer carries ``alternatives``; called certified only when every
check of the partition passed (a page whose check failed states no claim it makes).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from service.report.style import _esc, _num

_PARTITION_CHECKS = ("alternatives_requested", "alternatives_plans", "alternatives_cells",
                     "alternatives_optimal_in_cells", "alternatives_order",
                     "partition_cover", "partition_bounds")
#: Changed pairs named per plan before the rest is counted.
_NAMED = 6


#: A pair of a plan: (from, to, arc index or None).
Pair = tuple[str, str, Any]


def plan_flows(plan: Mapping[str, Any]) -> dict[Pair, Any]:
    """The pairs a plan uses, with their flows."""
    return {(str(r.get("from")), str(r.get("to")), r.get("arc")): r.get("flow", 0)
            for r in plan.get("allocation", []) if r.get("flow")}


def changed_pairs(base: Mapping[Pair, Any], other: Mapping[Pair, Any]
                  ) -> list[tuple[Pair, Any, Any]]:
    """(pair, flow before, flow after) of every pair whose flow differs between two plans'
    :func:`plan_flows`: pairs taken up first, then by ids. The report and the command line
    write these in their own words."""
    keys = sorted(set(base) | set(other), key=lambda k: (base.get(k, 0) > 0, k[:2]))
    return [(key, base.get(key, 0), other.get(key, 0)) for key in keys
            if base.get(key, 0) != other.get(key, 0)]


def _difference(base: Mapping[Pair, Any], other: Mapping[Pair, Any]) -> str:
    words = []
    for key, before, after in changed_pairs(base, other):
        pair = f"{key[0]} \u2192 {key[1]}" + ("" if key[2] is None else f" (arc {key[2]})")
        if not before:
            words.append(f"+ {pair}" + ("" if after == 1 else f" \u00d7{_num(after)}"))
        elif not after:
            words.append(f"\u2212 {pair}" + ("" if before == 1 else f" \u00d7{_num(before)}"))
        else:
            words.append(f"{pair} {_num(before)} \u2192 {_num(after)}")
    if len(words) > _NAMED:
        words = words[:_NAMED] + [f"\u2026 {len(words) - _NAMED} more"]
    return "; ".join(words)


def alternatives_section(answer: Mapping[str, Any], checks: Sequence[Mapping[str, Any]],
                         maximize: bool, table: Any) -> str:
    """HTML of the section, or "" when the answer has no alternatives; ``table`` is the
    page's table writer."""
    alts = answer.get("alternatives")
    if not isinstance(alts, list):
        return ""
    proven = all(c.get("passed") for c in checks if c.get("name") in _PARTITION_CHECKS) \
        and any(c.get("name") == "partition_bounds" for c in checks)
    asked = (answer.get("partition") or {}).get("requested", len(alts))
    best = answer.get("objective", 0)
    base = plan_flows(answer)
    rows = [["optimum", _esc(_num(best)), "", ""]]
    for j, alt in enumerate(alts, start=1):
        value = alt.get("objective", 0)
        extra = best - value if maximize else value - best
        cell = alt.get("cell", {})
        rows.append([f"#{j}", _esc(_num(value)), _esc(f"+{_num(round(extra, 6))}"),
                     _esc(_difference(base, plan_flows(alt)))
                     + f'<br><span class="note">cell: child {_esc(cell.get("branch"))} '
                     f'({_esc(cell.get("side"))}) of plan {_esc(cell.get("parent"))}, '
                     f'{len(cell.get("bounds", []))} pairs bounded</span>'])
    if proven:
        lead = (f"The {len(alts)} best plans after the optimum ({asked} asked"
                + ("; no other plan serves as much hard demand" if len(alts) < asked
                   else "") + "), each proved the best of its cell; the cells are disjoint "
                "and, with the frontier of unexpanded cells, cover every plan, and no "
                "frontier cell holds a better plan than the last one listed (certified "
                "k-best, README \u201cThe certificate\u201d).")
    else:
        lead = ("The answer lists these plans as the next best, but the checks of their "
                "partition do not all pass: nothing about their rank is shown.")
    return ("<h2>Next-best plans</h2>" + f'<p class="note">{_esc(lead)}</p>'
            + table(["plan", "score" if maximize else "cost",
                     "lost" if maximize else "extra", "differs from the optimum"],
                    rows, {1, 2}))
