"""The next-best plans of an answer, in words: what each costs and how it differs."""

from __future__ import annotations

from typing import Any

from service.cli.text import _num, _table
from service.report.ranked import Pair, changed_pairs, plan_flows

#: Changed pairs named per plan before the rest is counted.
_NAMED = 4


def _difference(base: dict[Pair, Any], other: dict[Pair, Any]) -> str:
    """The pairs whose flow differs: ``+a→x`` taken up, ``-a→y`` dropped, ``a→z 2→3``."""
    words = []
    for key, before, after in changed_pairs(base, other):
        pair = f"{key[0]}→{key[1]}" + ("" if key[2] is None else f"#{key[2]}")
        if before == 0:
            words.append(f"+{pair}" + ("" if after == 1 else f" ×{after}"))
        elif after == 0:
            words.append(f"-{pair}" + ("" if before == 1 else f" ×{before}"))
        else:
            words.append(f"{pair} {before}→{after}")
    if len(words) > _NAMED:
        words = words[:_NAMED] + [f"… {len(words) - _NAMED} more"]
    return ", ".join(words)


def alternatives_lines(problem: dict[str, Any] | None, answer: dict[str, Any]) -> list[str]:
    """A table of the optimum and its alternatives, or nothing when there are none."""
    alts = answer.get("alternatives")
    if alts is None:
        return []
    maximize = (problem or {}).get("objective") == "max"
    asked = (answer.get("partition") or {}).get("requested", len(alts))
    base = plan_flows(answer)
    best = answer["objective"]
    rows = [("plan", "objective", "lost" if maximize else "extra", "differs from the optimum")]
    rows.append(("optimum", _num(best), "", ""))
    for j, alt in enumerate(alts, start=1):
        extra = best - alt["objective"] if maximize else alt["objective"] - best
        rows.append((f"#{j}", _num(alt["objective"]), f"+{_num(round(extra, 6))}",
                     _difference(base, plan_flows(alt))))
    lines = [f"next-best plans: {len(alts)} of {asked} asked, each proved the best of its "
             "cell (certified k-best)"]
    lines += _table(rows, frozenset({1, 2}))
    if len(alts) < asked:
        lines.append(f"no other plan serves as much hard demand: {len(alts)} is all there is")
    return [*lines, ""]
