"""Reading problems (JSON or a CSV cost table), writing results whole, progress lines."""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import sys
import time
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from service.cli.talk import CliError, Post, Reply, _read_input
from service.cli.text import _size

# --- progress, input and output ---------------------------------------------------------

#: Bodies from this size on get progress lines without --progress: they take seconds.
PROGRESS_BYTES = 1_000_000


class _Progress:
    """Lines on stderr about slow steps; stdout stays the result alone.

    ``auto`` speaks for big bodies or when stderr is a terminal, so a cron job's log holds
    the timings of long solves but a quick solve in a script stays silent.
    """

    def __init__(self, mode: str) -> None:
        self.mode = mode
        self.on = mode == "on"

    def size(self, n_bytes: int) -> None:
        if self.mode == "auto":
            self.on = n_bytes >= PROGRESS_BYTES or sys.stderr.isatty()

    def say(self, message: str) -> None:
        if self.on:
            print(f"certimatch: {message}", file=sys.stderr, flush=True)


def _progress(args: argparse.Namespace) -> _Progress:
    return _Progress("off" if args.quiet else "on" if args.progress else "auto")


def _timed_post(post: Post, where: str | None, path: str, body: bytes,
                progress: _Progress, headers: Mapping[str, str] | None = None) -> Reply:
    progress.say(f"posting {_size(len(body))} to {where}{path}" if where else
                 f"sending {_size(len(body))} to {path} in this process")
    started = time.monotonic()
    reply = post(path, body, headers)
    progress.say(f"answered {reply.status} in {time.monotonic() - started:.1f} s")
    return reply


def _input_kind(args: argparse.Namespace, name: str) -> str:
    if args.input:
        return str(args.input)
    return "csv" if name.lower().endswith(".csv") else "json"


def _delimiter(text: str) -> str:
    text = {"tab": "\t", "\\t": "\t"}.get(text, text)
    if len(text) != 1:
        raise argparse.ArgumentTypeError(f"must be one character (or 'tab'), got {text!r}")
    return text


def _overrides(args: argparse.Namespace) -> dict[str, Any]:
    from service.cli.replan import replan_overrides

    found: dict[str, Any] = {"objective": args.objective, "unmet_demand": args.unmet_demand,
                             "alternatives": getattr(args, "alternatives", None)}
    if getattr(args, "prices", False):
        found["prices"] = True
    return {**{k: v for k, v in found.items() if v is not None}, **replan_overrides(args)}


def _in_form(args: argparse.Namespace, problem: dict[str, Any]) -> dict[str, Any]:
    """``problem`` with its tables in the columnar form when --columnar asks for it."""
    if not getattr(args, "columnar", False):
        return problem
    # imported here: the schemas bring numpy, which a remote solve does not otherwise need
    from schemas.columns import as_columns
    from schemas.problem import TABLES

    return {k: as_columns(v) if k in TABLES else v for k, v in problem.items()}


def _reject_constant(name: str) -> Any:
    raise ValueError(f"{name} is not a JSON number")


def _unique_keys(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    obj = dict(pairs)
    if len(obj) != len(pairs):
        seen: set[str] = set()
        for key, _ in pairs:
            if key in seen:
                raise ValueError(f"the key {key!r} is repeated within one object")
            seen.add(key)
    return obj


def _parse_json(raw: bytes) -> Any:
    """Strict JSON like the service's: no NaN or Infinity, no key repeated in an object.

    A repeated key would otherwise be collapsed here (the last one winning) and the body
    re-written from the collapsed copy: the service refuses it instead (400 naming it), and
    so a file that fails to parse here is sent as it is, for the service to say so.
    """
    try:
        return json.loads(raw, parse_constant=_reject_constant, object_pairs_hook=_unique_keys)
    except RecursionError:
        raise ValueError("nested too deeply") from None


@dataclass
class _Problem:
    """What ``solve`` sends: the body, and the problem as a dict when it could be read."""

    body: bytes
    problem: dict[str, Any] | None
    note: str = ""
    digest: str = ""      # SHA-256 of the input as read, before any option changed it


def _load_problem(args: argparse.Namespace, need_dict: bool, name: str | None = None
                  ) -> _Problem:
    """Read the problem ``name`` (default: FILE), JSON or a CSV cost table."""
    name = args.file if name is None else name
    raw = _read_input(name)
    loaded = _read_problem(args, need_dict, name, raw)
    loaded.digest = hashlib.sha256(raw).hexdigest()
    return loaded


def _problem_of(loaded: _Problem) -> dict[str, Any] | None:
    """The problem as a dict, parsed from the body now if it was not read as one."""
    if loaded.problem is None:
        try:
            parsed = _parse_json(loaded.body)
        except ValueError:
            return None
        loaded.problem = parsed if isinstance(parsed, dict) else None
    return loaded.problem


def _read_problem(args: argparse.Namespace, need_dict: bool, name: str, raw: bytes
                  ) -> _Problem:
    overrides = _overrides(args)
    if _input_kind(args, name) == "csv":
        from service.cli.tables import TableError, TableLayout, read_cost_table

        try:
            text = raw.decode("utf-8-sig")   # spreadsheets' "CSV UTF-8" starts with a BOM
        except UnicodeDecodeError as e:
            raise CliError(f"{name} is not UTF-8 text ({e.reason} at byte {e.start}); "
                           "save the sheet as CSV in UTF-8") from None
        layout = TableLayout(args.supply_column, args.demand_row, args.penalty_row,
                             args.delimiter)
        try:
            table = read_cost_table(text, layout)
        except TableError as e:
            raise CliError(f"{name}: {e}") from None
        problem = _in_form(args, {**table.problem, **overrides})
        rows, cols = table.shape
        note = (f"read {name}: {rows} sources x {cols} sinks, {table.allowed} of "
                f"{rows * cols} pairs allowed")
        return _Problem(json.dumps(problem, separators=(",", ":")).encode(), problem, note)
    columnar = bool(getattr(args, "columnar", False))
    if not overrides and not need_dict and not columnar:
        return _Problem(raw, None)
    try:
        parsed = _parse_json(raw)
    except ValueError:
        parsed = None
    if not isinstance(parsed, dict):
        # Sent as it is: the service's 400 or 422 says what is wrong, as it would over HTTP.
        return _Problem(raw, None)
    if not overrides and not columnar:
        return _Problem(raw, parsed)
    parsed = _in_form(args, {**parsed, **overrides})
    return _Problem(json.dumps(parsed, separators=(",", ":")).encode(), parsed)


def _read_json_object(name: str, what: str) -> dict[str, Any]:
    try:
        doc = _parse_json(_read_input(name))
    except ValueError as e:
        raise CliError(f"{name} is not valid JSON: {e}") from None
    if not isinstance(doc, dict):
        raise CliError(f"{name} must hold a JSON object ({what}), not {type(doc).__name__}")
    return doc


def _problem_with_answer(args: argparse.Namespace) -> dict[str, Any]:
    """FILE (JSON or CSV) with its answer: FILE's own, or the one of --answer."""
    if _input_kind(args, args.file) == "csv":
        loaded = _load_problem(args, need_dict=True)
        assert loaded.problem is not None     # a CSV table always becomes a dict
        body = loaded.problem
    else:
        body = _in_form(args, {**_read_json_object(args.file, "a problem"),
                               **_overrides(args)})
    if args.answer is not None:
        if "answer" in body:
            raise CliError(f"{args.file} already holds an \"answer\"; leave out --answer")
        body["answer"] = _read_json_object(args.answer, "an answer from solve")
    elif "answer" not in body:
        raise CliError(f"{args.file} holds no \"answer\": give the answer file with "
                       "--answer ANSWER.json")
    return body


def _write_output(text: str, output: str | None) -> None:
    """Write to stdout, or to ``output`` whole or not at all.

    A cron job may pick the file up at any moment, so it is written beside its final name
    and renamed into place: a reader sees the old file or the new one, never half of one.
    """
    if not text.endswith("\n"):
        text += "\n"
    if output is None or output == "-":
        sys.stdout.write(text)
        sys.stdout.flush()
        return
    target = Path(output)
    temporary = target.with_name(f".{target.name}.{os.getpid()}.tmp")
    try:
        temporary.write_text(text, encoding="utf-8")
        os.replace(temporary, target)
    except OSError as e:
        temporary.unlink(missing_ok=True)
        raise CliError(f"cannot write {output}: {e.strerror or e}") from e
