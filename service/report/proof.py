"""The verdict in words: what each group of checks shows, with this answer's numbers."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from service.report.model import _Model
from service.report.style import _esc, _num, _plural

#: What each statement of the proof rests on: it is stated as shown only when every one of
#: these checks passed (and no check this page does not know failed). Checks of the same
#: statement are named in the order the verifier makes them.
_CLAIMS = {
    "possible": ("allocation_arcs", "capacity", "conservation", "supply", "demand"),
    "reported": ("data", "allocation_costs", "unused", "unmet", "flow_value", "objective"),
    "reasons": ("unmet_reasons",),
    "shortfall": ("hard_shortfall", "unmet_demand_policy", "shortfall_cut"),
    "bound": ("sense", "potentials", "dual_feasibility", "dual_objective"),
    "slackness": ("complementary_slackness",),
    "prices": ("price_rows", "price_distances", "force_delta", "forbid_delta"),
}
_KNOWN = frozenset(name for names in _CLAIMS.values() for name in names)


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


def _unmet_by(m: _Model, names: Sequence[str]) -> list[str]:
    """The checks among ``names`` that failed, and any failed check the page does not know
    (it could undermine anything)."""
    return [str(c.get("name")) for c in _failed(m)
            if c.get("name") in names or c.get("name") not in _KNOWN]


def _item(m: _Model, claim: str, shown: str, title: str) -> tuple[bool, str]:
    """(holds, sentence): ``shown`` when the claim's checks passed, else a sentence that
    says it is not shown and which checks it would need."""
    failed = _unmet_by(m, _CLAIMS[claim])
    if not failed:
        return True, shown
    return False, (f"<b>Not shown: {title}.</b> That would need the check"
                   f"{'s' if len(failed) > 1 else ''} {_esc(', '.join(failed))} to pass, and "
                   f"{'they' if len(failed) > 1 else 'it'} failed.")


def _reasons_item(m: _Model) -> tuple[bool, str]:
    """Why the waiting sinks wait, as the answer says and the verifier checked."""
    counts: dict[str, int] = {}
    for why, _ in m.reasons.values():
        counts[why] = counts.get(why, 0) + 1
    if not counts:
        return _item(m, "reasons", "<b>Every unmet sink waits for the reason given</b> "
                     "(this answer gives none).", "that each sink waits for the reason given")
    said = ", ".join(f"{_plural(k, 'sink')} {_esc(_WHY[w])}" for w, k in sorted(counts.items()))
    return _item(m, "reasons",
                 f"<b>Every unmet sink waits for the reason given:</b> {said}. The verifier "
                 "searched the network again for each one: from the sources with supply (is "
                 "there any path?), then from those with spare supply through the allocation's "
                 "residual graph (could anyone free serve it?), and recomputed each reduced "
                 "cost from the potentials.",
                 "that each sink waits for the reason given")


#: A reason in words (README, "Why a sink waits").
_WHY = {"no-eligible-source": "with no eligible source",
        "capacity": "behind full capacity",
        "penalty": "waiting because their penalty is cheaper than serving them"}


def _proof_items(m: _Model) -> list[tuple[bool, str]]:
    """(holds, sentence) for each thing a valid certificate proves, with this answer's
    numbers where they are shown. A page whose answer is NOT VALID never states a claim
    whose checks failed, and never says what the answer costs."""
    cert = m.answer.get("certificate", {})
    short = int(cert.get("hard_shortfall", 0) or 0)
    cut = cert.get("cut", {}) or {}
    objective = _num(m.answer.get("objective"))
    dual = _num(cert.get("dual_objective"))
    hard_total = sum(d for d, p in zip(m.demand, m.penalty, strict=True) if p is None)
    items = [
        _item(m, "possible",
              "<b>The allocation is possible.</b> Every unit leaves a source within its "
              "supply, travels only on allowed arcs and within their capacities, passes "
              "through nodes without loss and arrives at a sink within its demand.",
              "that the allocation is possible"),
        _item(m, "reported",
              "<b>The figures reported are this allocation's.</b> The cost of each row, the "
              "unused supply, the unmet demand, the units routed and the objective are what "
              "the allocation gives.",
              "that the figures reported are this allocation's"),
    ]
    items.append(_reasons_item(m))
    if short == 0:
        items.append(_item(
            m, "shortfall",
            f"<b>All hard demand is met</b> ({_plural(hard_total, 'unit')} on sinks without "
            "a penalty), so no cut is needed to justify a shortfall.",
            "that all hard demand is met"))
    else:
        sinks = [str(s) for s in cut.get("sinks", [])]
        named = ", ".join(_esc(s) for s in sinks[:8]) + (
            f" and {len(sinks) - 8} more" if len(sinks) > 8 else "")
        items.append(_item(
            m, "shortfall",
            f"<b>No allocation can leave less hard demand unmet than "
            f"{_plural(short, 'unit')}.</b> The hard sinks behind the cut ({named}) need "
            f"{_num(cut.get('demand'))} units, but the sources and arcs that can reach them "
            f"carry at most {_num(cut.get('capacity'))}. That is the max-flow min-cut "
            "theorem: no routing gets more across the cut than its capacity.",
            f"that no allocation can leave less hard demand unmet than "
            f"{_plural(short, 'unit')}"))
    better, sense = (("scores more", "scores less penalties") if m.maximize
                     else ("costs less", "costs plus penalties"))
    items.append(_item(
        m, "bound",
        f"<b>No allocation that leaves {_plural(short, 'unit')} of hard demand unmet "
        f"{better} ({sense}) than the dual objective, {dual}.</b> Every source, node and "
        "sink carries a potential \u03c0 and every arc i\u2192j a <i>reduced cost</i>, "
        "cost \u2212 \u03c0(i) + \u03c0(j): what using the arc costs beyond what the "
        "potentials already account for" + (" (scores count as negative costs)"
                                            if m.maximize else "")
        + ". No unbounded arc has a negative reduced cost, so by linear programming duality "
        "the dual objective computed from the potentials is a bound on every such "
        "allocation.",
        f"that no allocation with the same shortfall {better} than the dual objective"))
    if m.valid:
        items.append((True,
                      "<b>This allocation reaches the bound.</b> <i>Complementary "
                      "slackness</i> holds: no arc with a positive reduced cost carries "
                      "anything and every arc with a negative reduced cost is full. So this "
                      f"one {'scores' if m.maximize else 'costs'} {objective}, the dual "
                      "objective: it is optimal."))
    else:
        items.append(_item(
            m, "slackness",
            "<b>Complementary slackness holds:</b> no arc with a positive reduced cost "
            "carries anything and every arc with a negative reduced cost is full. With the "
            "other checks it would make the allocation optimal; they did not all pass, so "
            "this answer is not shown to be optimal.",
            "that the allocation reaches the bound (complementary slackness)"))
    if m.answer.get("prices"):
        word = "score lost" if m.maximize else "extra cost"
        items.append(_item(
            m, "prices",
            f"<b>Every override price is exact.</b> The {word} of forcing each pair (or of "
            "forbidding a chosen one) is that of the best plan serving the same hard "
            "demand: the verifier checked each against shortest-path distances in the "
            "residual graph, exact both ways (no arc shortens them, and a real path meets "
            "them), and each forbidding against a plan that routes the pair's units around "
            "it." + (" The heat map writes them in the cells." if m.prices is not None
                     else ""),
            "that the override prices are exact"))
    return items
