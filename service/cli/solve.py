"""``certimatch solve``: send a problem, write the answer as JSON, a table or CSV."""

from __future__ import annotations

import argparse
import json
from typing import Any

from service.cli.files import _load_problem, _Progress, _progress, _timed_post, _write_output
from service.cli.talk import EXIT_ERROR, EXIT_OK, Post, _failure_exit, _print_problem, _target
from service.cli.text import _count_of, _num, _table, _verdict_line

# --- solve ------------------------------------------------------------------------------

def _answer_table(problem: dict[str, Any] | None, answer: dict[str, Any],
                  verdict_line: str) -> str:
    """The answer as aligned text: allocation, unmet, unused, objective, verdict."""
    sinks = {str(s.get("id")): s for s in (problem or {}).get("sinks", [])}
    maximize = (problem or {}).get("objective") == "max"
    lines = [f"optimal allocation ({answer.get('shape', '?')}, solver "
             f"{answer.get('solver', '?')})", ""]
    rows = [("from", "to", "flow", "score" if maximize else "cost")]
    rows += [(str(r["from"]), str(r["to"]), _num(r["flow"]), _num(r.get("cost", "")))
             for r in answer["allocation"]]
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

    unmet = [("sink", "unmet", "kind")] + [(str(u["id"]), _num(u["amount"]), kind(str(u["id"])))
                                            for u in answer["unmet"]]
    lines.append("unmet demand:" + ("" if answer["unmet"] else " none"))
    if answer["unmet"]:
        lines += _table(unmet, frozenset({1}))
    unused = [("source", "unused")] + [(str(u["id"]), _num(u["amount"]))
                                       for u in answer["unused"]]
    lines.append("unused supply:" + ("" if answer["unused"] else " none"))
    if answer["unused"]:
        lines += _table(unused, frozenset({1}))
    lines.append("")
    what = ("greatest total score less penalties" if maximize
            else "least total cost plus penalties")
    lines.append(f"objective: {_num(answer['objective'])} ({what})")
    lines.append(f"units routed: {_num(answer.get('flow_value', flow))}")
    lines.append(verdict_line)
    return "\n".join(lines) + "\n"


def _check_answer(post: Post, where: str | None, problem: dict[str, Any] | None,
                  answer: dict[str, Any], progress: _Progress) -> tuple[str, bool]:
    """(verdict line, valid) from /v1/verify, for the table's last line."""
    if problem is None:
        return "certificate check: not run (the problem could not be read as JSON here)", False
    body = json.dumps({**problem, "answer": answer}, separators=(",", ":")).encode()
    reply = _timed_post(post, where, "/v1/verify", body, progress)
    verdict = reply.document()
    if reply.status != 200 or verdict is None or not isinstance(verdict.get("valid"), bool):
        _print_problem(reply)
        return f"certificate check: not run (/v1/verify answered {reply.status})", False
    return _verdict_line(verdict), verdict["valid"] is True


def _cmd_solve(args: argparse.Namespace) -> int:
    progress = _progress(args)
    loaded = _load_problem(args, need_dict=args.format == "table")
    progress.size(len(loaded.body))
    if loaded.note:
        progress.say(loaded.note)
    post, where = _target(args)
    reply = _timed_post(post, where, "/v1/solve", loaded.body, progress)
    answer = reply.document()
    if reply.status != 200 or answer is None or answer.get("status") != "optimal":
        return _failure_exit(reply)
    progress.say(f"optimal: objective {_num(answer.get('objective'))}, "
                 f"{_num(answer.get('flow_value'))} units routed, "
                 f"{_count_of(len(answer.get('unmet', [])), 'sink')} short")
    code = EXIT_OK
    if args.format == "csv":
        from service.cli.tables import allocation_csv

        text = allocation_csv(answer)
    elif args.format == "table":
        line, valid = _check_answer(post, where, loaded.problem, answer, progress)
        text = _answer_table(loaded.problem, answer, line)
        # An answer the service itself cannot verify is a fault, not a result to act on.
        code = EXIT_OK if valid else EXIT_ERROR
    else:
        text = reply.text
    _write_output(text, args.output)
    if args.output not in (None, "-"):
        progress.say(f"wrote {args.format} to {args.output}")
    return code
