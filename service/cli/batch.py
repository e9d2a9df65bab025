"""``certimatch solve`` of several inputs: one answer file each, a summary table, the worst code.

Inputs are files and folders; a folder stands for its ``*.json`` and ``*.csv`` files
(not its subfolders, not hidden files), in name order. Each input ``NAME.json`` or
``NAME.csv`` gets ``OUT/NAME.answer.json`` (``--format json``), ``OUT/NAME.allocation.csv``
(``csv``) or ``OUT/NAME.answer.txt`` (``table``), written only when a plan came back.
``--unmet-csv`` and ``--unused-csv`` are one sheet for the whole run with the input's name
in a first column ``input``; ``--summary-json`` holds one record per input. stdout gets the
summary table, stderr one line per input; the exit code is the worst of the inputs' codes
in the order 1 > 4 > 2 > 3 > 0 (:data:`service.cli.talk.SEVERITY`).

When the server cannot be reached at all (no HTTP answer after the retries), the inputs
after that one are not sent: each is reported with exit 4 and "not sent".
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from service.cli.files import _progress, _write_output
from service.cli.outcome import OUTCOMES, Outcome, summary_line, worst
from service.cli.sheets import unmet_csv, unused_csv
from service.cli.solve import _write_summary, solve_input
from service.cli.talk import EXIT_UNAVAILABLE, CliError
from service.cli.text import _num, _table
from service.cli.transport import _target

#: The answer file's name after the input's stem, per --format.
ANSWER_SUFFIX = {"json": ".answer.json", "csv": ".allocation.csv", "table": ".answer.txt"}
INPUT_SUFFIXES = (".json", ".csv")


def _expand_inputs(names: list[str]) -> tuple[list[str], list[Path]]:
    """The input files, folders expanded; and the folders given."""
    inputs: list[str] = []
    folders: list[Path] = []
    for name in names:
        path = Path(name)
        if name != "-" and path.is_dir():
            found = sorted(p for p in path.iterdir() if p.is_file()
                           and not p.name.startswith(".")
                           and p.suffix.lower() in INPUT_SUFFIXES)
            if not found:
                raise CliError(f"{name} holds no .json or .csv file")
            folders.append(path)
            inputs += [str(p) for p in found]
        else:
            inputs.append(name)
    return inputs, folders


def _stem(name: str) -> str:
    path = Path(name)
    return path.stem if path.suffix.lower() in INPUT_SUFFIXES else path.name


def _check_batch(args: argparse.Namespace, inputs: list[str], folders: list[Path]) -> Path:
    """The output folder, after refusing what a batch cannot do."""
    if args.out_dir is None:
        raise CliError("several inputs need --out-dir DIR for their answer files")
    if args.output is not None:
        raise CliError("-o/--output takes the answer of one input; with several, use "
                       "--out-dir DIR")
    if "-" in inputs:
        raise CliError("- (standard input) has no name for an answer file in --out-dir; "
                       "give it as a file")
    out = Path(args.out_dir)
    if any(out.resolve() == f.resolve() for f in folders):
        raise CliError(f"--out-dir {args.out_dir} is an input folder: the next run would "
                       "read the answers as problems; choose another folder")
    seen: dict[str, str] = {}
    for name in inputs:
        stem = _stem(name)
        if stem in seen:
            raise CliError(f"{seen[stem]} and {name} would both write "
                           f"{stem}{ANSWER_SUFFIX[args.format]}; rename one")
        seen[stem] = name
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise CliError(f"cannot create --out-dir {args.out_dir}: {e.strerror or e}") from e
    return out


def _summary_table(outcomes: list[Outcome]) -> str:
    rows = [("input", "exit", "outcome", "objective", "routed", "hard unmet", "answer")]
    for o in outcomes:
        a = o.answer or {}
        plan = o.answer is not None
        rows.append((o.name, str(o.code), o.kind,
                     _num(a.get("objective")) if plan else "-",
                     _num(a.get("flow_value")) if plan else "-",
                     _num(o.hard_unmet) if plan else "-",
                     o.files.get("answer", "-")))
    code = worst([o.code for o in outcomes])
    lines = _table(rows, frozenset({1, 3, 4, 5}))
    lines.append(f"exit {code}: {OUTCOMES[code][1]}")
    return "\n".join(lines) + "\n"


def _solve_batch(args: argparse.Namespace, inputs: list[str], folders: list[Path]) -> int:
    out = _check_batch(args, inputs, folders)
    progress = _progress(args)
    outcomes: list[Outcome] = []
    unreachable: str | None = None
    try:
        post, where = _target(args)
    except CliError as e:      # e.g. an unreadable --token-file: no input can be sent
        failed: CliError | None = e
    else:
        failed = None
    for name in inputs:
        if failed is not None:
            outcome, text = Outcome(name, failed.code, message=str(failed)), None
        elif unreachable is not None:
            outcome, text = Outcome(name, EXIT_UNAVAILABLE, message=f"not sent: "
                                    f"{unreachable}"), None
        else:
            outcome, text = solve_input(args, name, post, where, progress, several=True)
            if outcome.code == EXIT_UNAVAILABLE and outcome.reply is None:
                unreachable = outcome.message
        if text is not None:
            target = out / (_stem(name) + ANSWER_SUFFIX[args.format])
            try:
                _write_output(text, str(target))
                outcome.files["answer"] = str(target)
            except CliError as e:
                outcome.code, outcome.message = e.code, str(e)
        outcomes.append(outcome)
        if not args.quiet:
            print(f"certimatch: {summary_line(outcome)}", file=sys.stderr, flush=True)
    _write_sheets(args, outcomes)
    _write_summary(args.summary_json, outcomes)
    _write_output(_summary_table(outcomes), None)
    return worst([o.code for o in outcomes])


def _write_sheets(args: argparse.Namespace, outcomes: list[Outcome]) -> None:
    safe = args.spreadsheet_safe
    if args.unmet_csv is not None:
        rows = [(o.name, r) for o in outcomes for r in o.unmet]
        _write_output(unmet_csv(rows, safe, batch=True), args.unmet_csv)
    if args.unused_csv is not None:
        rows = [(o.name, r) for o in outcomes for r in o.unused]
        _write_output(unused_csv(rows, safe, batch=True), args.unused_csv)
