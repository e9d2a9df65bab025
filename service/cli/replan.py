"""Re-planning from the command line: ``--fixed PINS`` and ``--previous ANSWER --change-penalty N``.

The files become the problem's ``fixed`` and ``previous`` fields, replacing the file's own:

* ``--fixed PINS.csv`` (header ``from,to,flow`` and optionally ``arc``) or ``PINS.json`` (a
  list of pins, or an object with ``"fixed"``);
* ``--previous ANSWER.json``: an earlier answer (its ``allocation`` is the previous plan),
  or a list of ``{"from", "to", "flow"}`` rows; ``--change-penalty N`` (a number >= 0) is
  the cost of each of its units not kept on its pair, and must come with it.

The service checks the rows; the CLI only reads the files.
"""

from __future__ import annotations

import argparse
import csv
import io
import math
from typing import Any

from service.cli.talk import CliError, _read_input

__all__ = ["add_replan_options", "replan_overrides"]


def _penalty(text: str) -> float | int:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a number, got {text!r}") from None
    if not math.isfinite(value) or value < 0:
        raise argparse.ArgumentTypeError(f"must be a finite number >= 0, got {text}")
    return int(value) if value.is_integer() else value


def add_replan_options(cmd: argparse.ArgumentParser) -> None:
    group = cmd.add_argument_group("re-planning")
    group.add_argument("--fixed", metavar="PINS",
                       help="pins: a CSV file (header from,to,flow[,arc]) or a JSON list; "
                       "each pair carries exactly that flow (replaces the file's fixed)")
    group.add_argument("--previous", metavar="ANSWER",
                       help="the previous plan: an earlier answer (JSON) or a list of "
                       "{from, to, flow} rows; needs --change-penalty")
    group.add_argument("--change-penalty", type=_penalty, metavar="N",
                       help="cost of each unit of the previous plan not kept on its pair")


def _json(name: str) -> Any:
    from service.cli.files import _parse_json

    try:
        return _parse_json(_read_input(name))
    except ValueError as e:
        raise CliError(f"{name} is not valid JSON: {e}") from None


def _csv_rows(name: str) -> list[dict[str, Any]]:
    try:
        text = _read_input(name).decode("utf-8-sig")
    except UnicodeDecodeError as e:
        raise CliError(f"{name} is not UTF-8 text ({e.reason} at byte {e.start})") from None
    reader = csv.DictReader(io.StringIO(text))
    need = {"from", "to", "flow"}
    header = set(reader.fieldnames or [])
    if not need <= header or not header <= need | {"arc"}:
        raise CliError(f"{name}: the header must be from,to,flow and optionally arc, got "
                       f"{','.join(reader.fieldnames or [])}")
    rows = []
    for line, row in enumerate(reader, start=2):
        pin: dict[str, Any] = {"from": row["from"], "to": row["to"]}
        for key in ("flow", "arc"):
            cell = (row.get(key) or "").strip()
            if key == "arc" and not cell:
                continue
            if not cell.isdigit():
                raise CliError(f"{name} line {line}: {key} must be a whole number >= 0, "
                               f"got {cell!r}")
            pin[key] = int(cell)
        rows.append(pin)
    return rows


def replan_overrides(args: argparse.Namespace) -> dict[str, Any]:
    """``fixed`` and ``previous`` from the files the options name (none when not given)."""
    found: dict[str, Any] = {}
    fixed = getattr(args, "fixed", None)
    if fixed is not None:
        if fixed.lower().endswith(".csv"):
            found["fixed"] = _csv_rows(fixed)
        else:
            doc = _json(fixed)
            found["fixed"] = doc.get("fixed") if isinstance(doc, dict) else doc
            if not isinstance(found["fixed"], list):
                raise CliError(f"{fixed} must hold a list of pins, or an object with "
                               "\"fixed\"")
    previous, penalty = getattr(args, "previous", None), getattr(args, "change_penalty", None)
    if (previous is None) != (penalty is None):
        raise CliError("--previous and --change-penalty go together")
    if previous is not None:
        doc = _json(previous)
        rows = doc.get("allocation") if isinstance(doc, dict) else doc
        if not isinstance(rows, list):
            raise CliError(f"{previous} must hold an answer (with \"allocation\") or a list "
                           "of {from, to, flow} rows")
        keep = ("from", "to", "flow", "arc")
        found["previous"] = {"allocation": [{k: r[k] for k in keep if k in r}
                                            if isinstance(r, dict) else r for r in rows],
                             "change_penalty": penalty}
    return found
