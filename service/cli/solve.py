"""``certimatch solve``: send a problem, write the answer as JSON, a table or CSV.

One input writes its answer to stdout or ``-o``; several (or a folder, or ``--out-dir``)
are solved by service/cli/batch.py, one answer file each. Either way the whole answer can
be kept in files: ``--unmet-csv``, ``--unused-csv`` and ``--summary-json`` beside the
allocation (service/cli/sheets.py, service/cli/outcome.py).
"""

from __future__ import annotations

import argparse
import hashlib
import json
import sys
import uuid
from typing import Any

from service.cli.files import (
    _load_problem,
    _problem_of,
    _Progress,
    _progress,
    _timed_post,
    _write_output,
)
from service.cli.outcome import (
    Outcome,
    plan_outcome,
    records,
    reply_outcome,
    summary_document,
    summary_line,
)
from service.cli.ranked import alternatives_lines
from service.cli.sheets import allocation_csv, unmet_csv, unused_csv
from service.cli.talk import (
    EXIT_ERROR,
    EXIT_OK,
    EXIT_UNAVAILABLE,
    CliError,
    Post,
    _print_problem,
    transient_reply,
)
from service.cli.text import _num, _table, _verdict_line
from service.cli.transport import _target

IDEMPOTENCY_HEADER = "Idempotency-Key"

# --- solve ------------------------------------------------------------------------------

def _answer_table(problem: dict[str, Any] | None, answer: dict[str, Any],
                  verdict_line: str) -> str:
    """The answer as aligned text: allocation, unmet, unused, objective, verdict."""
    sinks = {str(s.get("id")): s for s in records((problem or {}).get("sinks", []))
             if isinstance(s, dict)}
    maximize = (problem or {}).get("objective") == "max"
    lines = [f"optimal allocation ({answer.get('shape', '?')}, solver "
             f"{answer.get('solver', '?')})", ""]
    rows = [("from", "to", "flow", "score" if maximize else "cost")]
    rows += [(str(r["from"]), str(r["to"]),
              _num(r["flow"]) + (" pinned" if r.get("fixed") else ""),
              _num(r.get("cost", ""))) for r in answer["allocation"]]
    flow = sum(r["flow"] for r in answer["allocation"])
    total = sum(r.get("cost", 0) for r in answer["allocation"])
    rows.append(("total", "", _num(flow), _num(round(total, 6))))
    lines += _table(rows, frozenset({2, 3}))
    lines.append("")

    def kind(sid: str) -> str:
        sink = sinks.get(sid)
        if sink is None:
            return ""
        if sink.get("penalty") is None:
            return "hard demand"
        return f"soft, penalty {_num(sink['penalty'])} per unit"

    unmet = [("sink", "unmet", "kind", "why it waits")] + [
        (str(u["id"]), _num(u["amount"]), kind(str(u["id"])), _why(u)) for u in answer["unmet"]]
    lines.append("unmet demand:" + ("" if answer["unmet"] else " none"))
    if answer["unmet"]:
        lines += _table(unmet, frozenset({1}))
    unused = [("source", "unused")] + [(str(u["id"]), _num(u["amount"]))
                                       for u in answer["unused"]]
    lines.append("unused supply:" + ("" if answer["unused"] else " none"))
    if answer["unused"]:
        lines += _table(unused, frozenset({1}))
    if answer.get("prices"):
        lines += _cheapest_overrides(answer["prices"], maximize)
    lines.append("")
    what = ("greatest total score less penalties" if maximize
            else "least total cost plus penalties")
    changes = answer.get("changes")
    if isinstance(changes, dict):
        lines.append(f"against the previous plan: {_num(changes.get('kept'))} units kept, "
                     f"{_num(changes.get('moved'))} moved, penalty "
                     f"{_num(changes.get('penalty'))} (in the objective)")
    lines.append(f"objective: {_num(answer['objective'])} ({what})")
    bottleneck = answer.get("certificate", {}).get("bottleneck")
    if bottleneck is not None:
        theta = bottleneck.get("threshold")
        lines.append("longest trip (bottleneck threshold): " + (
            "none, no pair is needed" if theta is None else
            f"{_num(theta)}, the least possible; a cut proves no cheaper one serves as much"))
    lines.append(f"units routed: {_num(answer.get('flow_value', flow))}")
    lines.append("")
    lines += alternatives_lines(problem, answer)
    lines.append(verdict_line)
    return "\n".join(lines) + "\n"


#: Overrides the table lists, cheapest first.
CHEAPEST_OVERRIDES = 5


def _cheapest_overrides(prices: list[dict[str, Any]], maximize: bool) -> list[str]:
    """The five cheapest overrides: forcing an unused pair or forbidding a used one."""
    found = [("force", r, r["force_delta"]) for r in prices
             if r["flow"] == 0 and r.get("force_delta") is not None]
    found += [("forbid", r, r["forbid_delta"]) for r in prices
              if r["flow"] > 0 and r.get("forbid_delta") is not None]
    found.sort(key=lambda f: f[2])
    rows = [("override", "from", "to", "score lost" if maximize else "extra cost")]
    rows += [(what, str(r["from"]), str(r["to"]), _num(delta))
             for what, r, delta in found[:CHEAPEST_OVERRIDES]]
    head = (f"cheapest overrides ({min(len(found), CHEAPEST_OVERRIDES)} of {len(found)}; "
            "force = put a unit on an unused pair, forbid = take a used pair away):")
    if not found:
        return ["", "cheapest overrides: none possible with the same hard demand served"]
    return ["", head, *_table(rows, frozenset({3}))]
def _why(row: dict[str, Any]) -> str:
    """Why an unmet sink waits, in words (README, "Why a sink waits")."""
    reason = row.get("reason")
    if reason == "penalty":
        return f"penalty (serving costs at least {_num(row.get('reduced_cost', 0))} more)"
    return {"capacity": "capacity (whoever could serve it is full)",
            "no-eligible-source": "no eligible source"}.get(str(reason), "")


def _check_answer(post: Post, where: str | None, problem: dict[str, Any] | None,
                  answer: dict[str, Any], progress: _Progress) -> tuple[str, int]:
    """(verdict line, exit code) from /v1/verify, for the table's last line.

    The code is 0 for a valid answer, 4 when /v1/verify could not be reached for a
    transient reason, else 1: an answer the service cannot verify is a fault.
    """
    if problem is None:
        return ("certificate check: not run (the problem could not be read as JSON here)",
                EXIT_ERROR)
    body = json.dumps({**problem, "answer": answer}, separators=(",", ":")).encode()
    try:
        reply = _timed_post(post, where, "/v1/verify", body, progress)
    except CliError as e:
        print(f"certimatch: {e}", file=sys.stderr)
        return f"certificate check: not run ({e})", e.code
    verdict = reply.document()
    if reply.status != 200 or verdict is None or not isinstance(verdict.get("valid"), bool):
        _print_problem(reply)
        return (f"certificate check: not run (/v1/verify answered {reply.status})",
                EXIT_UNAVAILABLE if transient_reply(reply) else EXIT_ERROR)
    return _verdict_line(verdict), EXIT_OK if verdict["valid"] is True else EXIT_ERROR


def idempotency_key(given: str | None, body: bytes, several: bool) -> str:
    """The key of one solve: a fresh UUID, the one given, or (several inputs) one per body.

    Reused across the retries of that solve, so the service records it once. With several
    inputs a given KEY becomes ``KEY-`` and 16 hex digits of the body's SHA-256: distinct
    per input, and the same again when the same batch is run again.
    """
    if given is None:
        return str(uuid.uuid4())
    return f"{given}-{hashlib.sha256(body).hexdigest()[:16]}" if several else given


def _render(args: argparse.Namespace, post: Post, where: str | None,
            problem: dict[str, Any] | None, text: str, outcome: Outcome,
            progress: _Progress) -> str:
    """The answer in --format; a table whose check fails turns the outcome into 1 (or 4)."""
    answer = outcome.answer
    assert answer is not None
    if args.format == "csv":
        return allocation_csv(answer, args.spreadsheet_safe)
    if args.format == "table":
        line, code = _check_answer(post, where, problem, answer, progress)
        if code != EXIT_OK:
            outcome.code, outcome.message = code, line
        return _answer_table(problem, answer, line)
    return text


def _needs_problem(args: argparse.Namespace, answer: dict[str, Any]) -> bool:
    """Whether the problem must be read as a dict for this plan (a big body costs time).

    The exit code does not need it (hard unmet is the certificate's hard_shortfall when
    the rows do not say), but the table, the sheets' demand, supply and hard columns and
    the summary's soft count do.
    """
    if args.format == "table":
        return True
    leftovers = answer.get("unmet") or answer.get("unused")
    files = (args.unmet_csv, args.unused_csv, args.summary_json)
    return bool(leftovers) and any(f is not None for f in files)


def solve_input(args: argparse.Namespace, name: str, post: Post, where: str | None,
                progress: _Progress, several: bool = False) -> tuple[Outcome, str | None]:
    """Read, send and judge one input; its outcome and, for a plan, the text to write."""
    try:
        # Parsed here only for a table; otherwise only once a plan needs its sinks.
        loaded = _load_problem(args, need_dict=args.format == "table", name=name)
    except CliError as e:
        return Outcome(name, e.code, message=str(e)), None
    progress.size(len(loaded.body))
    if loaded.note:
        progress.say(loaded.note)
    key = idempotency_key(args.idempotency_key, loaded.body, several)
    try:
        reply = _timed_post(post, where, "/v1/solve", loaded.body, progress,
                            {IDEMPOTENCY_HEADER: key})
    except CliError as e:
        return Outcome(name, e.code, loaded.digest, message=str(e)), None
    answer = reply.document()
    if reply.status != 200 or answer is None or answer.get("status") != "optimal":
        return reply_outcome(name, loaded.digest, reply), None
    problem = _problem_of(loaded) if _needs_problem(args, answer) else None
    outcome = plan_outcome(name, loaded.digest, problem, answer)
    return outcome, _render(args, post, where, problem, reply.text, outcome, progress)


def _write_summary(path: str | None, outcomes: list[Outcome]) -> None:
    if path is not None:
        doc = summary_document(outcomes)
        _write_output(json.dumps(doc, indent=2, ensure_ascii=False), path)


def _write_plan_files(args: argparse.Namespace, outcome: Outcome, text: str) -> None:
    """The answer (stdout or -o), then the unmet and unused sheets, each whole."""
    _write_output(text, args.output)
    if args.output not in (None, "-"):
        outcome.files["answer"] = args.output
    if args.unmet_csv is not None:
        _write_output(unmet_csv(((None, r) for r in outcome.unmet), args.spreadsheet_safe),
                      args.unmet_csv)
        outcome.files["unmet_csv"] = args.unmet_csv
    if args.unused_csv is not None:
        _write_output(unused_csv(((None, r) for r in outcome.unused), args.spreadsheet_safe),
                      args.unused_csv)
        outcome.files["unused_csv"] = args.unused_csv


def _solve_one(args: argparse.Namespace, name: str) -> int:
    """One input: the answer to stdout or -o, the problem document to stderr on failure."""
    progress = _progress(args)
    try:
        post, where = _target(args)
    except CliError as e:
        outcome, text = Outcome(name, e.code, message=str(e)), None
    else:
        outcome, text = solve_input(args, name, post, where, progress)
    if text is None:
        if outcome.reply is not None:
            _print_problem(outcome.reply)   # stderr holds the service's document alone
        else:
            print(f"certimatch: {outcome.message}", file=sys.stderr)
        _write_summary(args.summary_json, [outcome])
        return outcome.code
    try:
        _write_plan_files(args, outcome, text)
    except CliError as e:
        outcome.code, outcome.message = e.code, str(e)
        print(f"certimatch: {e}", file=sys.stderr)
    _write_summary(args.summary_json, [outcome])
    if not args.quiet:
        print(f"certimatch: {summary_line(outcome)}", file=sys.stderr, flush=True)
    return outcome.code


def _cmd_solve(args: argparse.Namespace) -> int:
    from service.cli.batch import _expand_inputs, _solve_batch

    inputs, folders = _expand_inputs(args.file)
    if args.out_dir is None and len(inputs) == 1 and not folders:
        return _solve_one(args, inputs[0])
    return _solve_batch(args, inputs, folders)
