"""What one solve came to: its exit code, the rows of its sheets and its summary record.

The exit code of a plan is judged from the answer alone: hard demand left unmet is the sum
of the unmet amounts of hard sinks, where an ``unmet`` row says ``"hard"`` itself or,
when it does not, a sink without a penalty is hard. ``certificate.hard_shortfall`` is the
same number; should the two ever disagree, the larger counts (a shortfall is never
hidden). The summary record (``--summary-json``) is built here too; its fields are listed
in the README, "Command line".
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from service.cli.talk import (
    EXIT_ERROR,
    EXIT_NEGATIVE,
    EXIT_OK,
    EXIT_SHORT,
    EXIT_UNAVAILABLE,
    SEVERITY,
    Reply,
    failure_code,
)
from service.cli.text import _count_of, _num

#: The exit codes: the word in the summary record, and what the code means.
OUTCOMES: dict[int, tuple[str, str]] = {
    EXIT_OK: ("all-hard-demand-met", "a plan in which all hard demand is met"),
    EXIT_NEGATIVE: ("infeasible", "refused as infeasible: hard demand cannot be met and "
                    "the problem asks to reject that (unmet_demand reject)"),
    EXIT_SHORT: ("hard-demand-unmet", "a plan was written, but some hard demand is left "
                 "unmet"),
    EXIT_UNAVAILABLE: ("unavailable", "a transient failure outlasted the retries: the "
                       "server was unreachable or overloaded; try again later"),
    EXIT_ERROR: ("error", "anything permanent: invalid input, authentication, an "
                 "unreadable file or the like; retrying will not help"),
}

#: Version of the summary record's layout; a field is only ever added within a version.
SUMMARY_VERSION = 1


def worst(codes: list[int]) -> int:
    """The exit code of several outcomes: the first of :data:`SEVERITY` among them."""
    return next((c for c in SEVERITY if c in codes), EXIT_OK)


def records(table: Any) -> Any:
    """A table of the problem as records, also when it was given in the columnar form."""
    if not isinstance(table, dict):
        return table
    # imported here: the schemas bring numpy, which a remote solve does not otherwise need
    from schemas.columns import as_records

    return as_records(table)


def _hard(entry: Mapping[str, Any], sink: Mapping[str, Any] | None) -> bool | None:
    if isinstance(entry.get("hard"), bool):
        return bool(entry["hard"])
    if sink is None:
        return None
    return sink.get("penalty") is None


def unmet_rows(problem: Mapping[str, Any] | None, answer: Mapping[str, Any]
               ) -> list[dict[str, Any]]:
    """``{id, amount, demand, hard, reason, reduced_cost}`` per unmet sink; None where the
    problem (or the answer) does not say."""
    sinks = {str(s.get("id")): s for s in records((problem or {}).get("sinks", []))
             if isinstance(s, dict)}
    rows = []
    for entry in answer.get("unmet", []):
        sink = sinks.get(str(entry.get("id")))
        rows.append({"id": entry.get("id"), "amount": entry.get("amount", 0),
                     "demand": None if sink is None else sink.get("demand", 1),
                     "hard": _hard(entry, sink), "reason": entry.get("reason"),
                     "reduced_cost": entry.get("reduced_cost")})
    return rows


def unused_rows(problem: Mapping[str, Any] | None, answer: Mapping[str, Any]
                ) -> list[dict[str, Any]]:
    """``{id, amount, supply}`` per source with supply left; None where unknown."""
    sources = {str(s.get("id")): s for s in records((problem or {}).get("sources", []))
               if isinstance(s, dict)}
    rows = []
    for entry in answer.get("unused", []):
        source = sources.get(str(entry.get("id")))
        rows.append({"id": entry.get("id"), "amount": entry.get("amount", 0),
                     "supply": None if source is None else source.get("supply", 1)})
    return rows


def hard_unmet(rows: list[dict[str, Any]], answer: Mapping[str, Any]) -> int | float:
    """Units of hard demand left unmet (see the module docstring)."""
    stated = (answer.get("certificate") or {}).get("hard_shortfall")
    known = all(r["hard"] is not None for r in rows)
    counted = sum(r["amount"] for r in rows if r["hard"]) if known else None
    values = [v for v in (counted, stated) if isinstance(v, int | float)]
    return max(values) if values else 0


@dataclass
class Outcome:
    """One input's result: a plan (``answer``) or a failure (``reply`` or ``message``)."""

    name: str
    code: int
    digest: str | None = None
    answer: dict[str, Any] | None = None
    unmet: list[dict[str, Any]] = field(default_factory=list)
    unused: list[dict[str, Any]] = field(default_factory=list)
    hard_unmet: int | float = 0
    reply: Reply | None = None
    message: str = ""
    files: dict[str, str] = field(default_factory=dict)

    @property
    def kind(self) -> str:
        return OUTCOMES[self.code][0]


def plan_outcome(name: str, digest: str | None, problem: Mapping[str, Any] | None,
                 answer: dict[str, Any]) -> Outcome:
    """The outcome of a 200 answer: exit 0, or 3 when hard demand is left unmet."""
    unmet = unmet_rows(problem, answer)
    short = hard_unmet(unmet, answer)
    return Outcome(name, EXIT_SHORT if short > 0 else EXIT_OK, digest, answer, unmet,
                   unused_rows(problem, answer), short)


def reply_outcome(name: str, digest: str | None, reply: Reply) -> Outcome:
    """The outcome of a reply that is not an answer: 2, 4 or 1."""
    return Outcome(name, failure_code(reply), digest, reply=reply)


def _problem_words(reply: Reply) -> str:
    doc = reply.document() or {}
    kind = str(doc.get("type", "")).rsplit(":", 1)[-1]
    detail = str(doc.get("detail", "")).strip()
    words = f"answered {reply.status}" + (f" {kind}" if kind else "")
    return words + (f": {detail}" if detail else "")


def _units(amount: int | float) -> str:
    return f"{_num(amount)} unit{'' if amount == 1 else 's'}"


def summary_line(outcome: Outcome) -> str:
    """One line for stderr: the input, what came of it, the exit code."""
    a = outcome.answer
    if a is None:
        what = outcome.message or (_problem_words(outcome.reply) if outcome.reply else "")
        what = what.splitlines()[0] if what else OUTCOMES[outcome.code][1]
    else:
        short = sum(r["amount"] for r in outcome.unmet)
        spare = sum(r["amount"] for r in outcome.unused)
        head = ("all hard demand met" if outcome.hard_unmet == 0 else
                f"HARD DEMAND UNMET: {_units(outcome.hard_unmet)}")
        if outcome.message:                    # a plan, but its check failed
            head = outcome.message
        what = (f"{head}; objective {_num(a.get('objective'))}, "
                f"{_units(a.get('flow_value', 0))} routed, "
                f"{_units(short)} unmet on {_count_of(len(outcome.unmet), 'sink')}, "
                f"{_units(spare)} of supply unused")
    return f"{outcome.name}: {what} -> exit {outcome.code}"


def summary_record(outcome: Outcome) -> dict[str, Any]:
    """The record of one input in the summary JSON."""
    kind, meaning = OUTCOMES[outcome.code]
    record: dict[str, Any] = {"input": outcome.name, "input_sha256": outcome.digest,
                              "exit_code": outcome.code, "outcome": kind,
                              "meaning": meaning, "files": dict(outcome.files)}
    a = outcome.answer
    if a is not None:
        record.update({
            "objective": a.get("objective"), "flow_value": a.get("flow_value"),
            "hard_unmet": outcome.hard_unmet,
            "soft_unmet": sum(r["amount"] for r in outcome.unmet if r["hard"] is False),
            "unmet_sinks": len(outcome.unmet),
            "unmet_units": sum(r["amount"] for r in outcome.unmet),
            "unused_sources": len(outcome.unused),
            "unused_units": sum(r["amount"] for r in outcome.unused),
            "allocation_rows": len(a.get("allocation", [])),
            "shape": a.get("shape"), "solver": a.get("solver"),
        })
        if "decision" in a:
            record["decision"] = a["decision"]
        return record
    if outcome.reply is not None:
        record["http_status"] = outcome.reply.status
        doc = outcome.reply.document()
        if doc is not None:
            record["problem"] = doc
        else:
            record["message"] = outcome.reply.text[:500]
    else:
        record["http_status"] = None
        record["message"] = outcome.message
    return record


def summary_document(outcomes: list[Outcome]) -> dict[str, Any]:
    """The summary JSON of a run: the exit code and one record per input."""
    code = worst([o.code for o in outcomes])
    kind, meaning = OUTCOMES[code]
    return {"summary_version": SUMMARY_VERSION, "exit_code": code, "outcome": kind,
            "meaning": meaning, "inputs": [summary_record(o) for o in outcomes]}

