"""The verdict in words: what each group of checks shows, with this answer's numbers."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from service.report.model import _Model
from service.report.style import _esc, _num, _plural

_CHECK_GROUPS = (
    ("feasible", ("allocation_arcs", "allocation_costs", "capacity", "conservation", "supply",
                  "demand", "unused", "unmet", "flow_value")),
    ("shortfall", ("hard_shortfall", "unmet_demand_policy", "shortfall_cut")),
    ("cost", ("sense", "objective", "potentials", "dual_feasibility",
              "complementary_slackness", "dual_objective")),
)


# --- the verdict in words ---------------------------------------------------------------

def _checks(m: _Model) -> list[dict[str, Any]]:
    return list(m.verdict.get("checks", []))


def _failed(m: _Model) -> list[dict[str, Any]]:
    return [c for c in _checks(m) if not c.get("passed")]


def _verdict_sentence(m: _Model) -> str:
    checks, failed = _checks(m), _failed(m)
    if m.valid:
        return (f"The independent verifier recomputed the answer from the problem alone and "
                f"all {len(checks)} checks passed: the allocation is proven optimal.")
    names = ", ".join(str(c.get("name")) for c in failed)
    return (f"{len(failed)} of {len(checks)} checks failed ({names}): this answer is not "
            "proven optimal. Do not act on it without solving again.")


def _group_passed(m: _Model, names: Sequence[str]) -> bool:
    return all(c.get("passed") for c in _checks(m) if c.get("name") in names)


def _proof_items(m: _Model) -> list[tuple[bool, str]]:
    """(holds, sentence) for each thing a valid certificate proves, with this answer's numbers."""
    cert = m.answer.get("certificate", {})
    short = int(cert.get("hard_shortfall", 0) or 0)
    cut = cert.get("cut", {}) or {}
    objective = _num(m.answer.get("objective"))
    dual = _num(cert.get("dual_objective"))
    hard_total = sum(d for d, p in zip(m.demand, m.penalty, strict=True) if p is None)
    groups = dict((name, _group_passed(m, names)) for name, names in _CHECK_GROUPS)
    items = [(groups["feasible"],
              "<b>The allocation is possible.</b> Every unit leaves a source within its supply, "
              "travels only on allowed arcs and within their capacities, passes through nodes "
              "without loss and arrives at a sink within its demand; the unmet demand, unused "
              "supply and objective are as reported.")]
    if short == 0:
        items.append((groups["shortfall"],
                      f"<b>All hard demand is met</b> ({_plural(hard_total, 'unit')} on sinks "
                      "without a penalty), so no cut is needed to justify a shortfall."))
    else:
        sinks = [str(s) for s in cut.get("sinks", [])]
        named = ", ".join(_esc(s) for s in sinks[:8]) + (
            f" and {len(sinks) - 8} more" if len(sinks) > 8 else "")
        items.append((groups["shortfall"],
                      f"<b>No allocation can leave less hard demand unmet than "
                      f"{_plural(short, 'unit')}.</b> The hard sinks behind the cut "
                      f"({named}) need {_num(cut.get('demand'))} units, but the sources and "
                      f"arcs that can reach them carry at most {_num(cut.get('capacity'))}. "
                      "That is the max-flow min-cut theorem: no routing gets more across "
                      "the cut than its capacity."))
    if m.maximize:
        claim = "scores more"
        bound = (f"no such allocation can score more (scores less penalties) than the dual "
                 f"objective, {dual}; this one scores {objective}.")
    else:
        claim = "costs less"
        bound = (f"no such allocation can cost less (costs plus penalties) than the dual "
                 f"objective, {dual}; this one costs {objective}.")
    items.append((groups["cost"],
                  f"<b>No allocation that leaves {_plural(short, 'unit')} of hard demand "
                  f"unmet {claim}.</b> Every source, node and sink "
                  "carries a potential \u03c0 and every arc i\u2192j a <i>reduced cost</i>, "
                  "cost \u2212 \u03c0(i) + \u03c0(j): what using the arc costs beyond what "
                  "the potentials already account for"
                  + (" (scores count as negative costs)" if m.maximize else "") + ". "
                  "<i>Complementary slackness</i> holds: no arc with a positive reduced cost "
                  "carries anything, every arc with a negative reduced cost is full, and no "
                  "unbounded arc has a negative reduced cost. From the potentials alone "
                  "follows, by linear programming duality, that " + bound))
    return items
