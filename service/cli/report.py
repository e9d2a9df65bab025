"""``certimatch report``: verify an answer here and write the audit report."""

from __future__ import annotations

import argparse
import json
import sys
import time
from typing import Any

from service.cli.files import (
    _input_kind,
    _load_problem,
    _overrides,
    _parse_json,
    _progress,
    _write_output,
)
from service.cli.talk import EXIT_ERROR, EXIT_NEGATIVE, EXIT_OK, CliError, _read_input

# --- report -----------------------------------------------------------------------------

def _read_json_object(name: str, what: str) -> dict[str, Any]:
    try:
        doc = _parse_json(_read_input(name))
    except ValueError as e:
        raise CliError(f"{name} is not valid JSON: {e}") from None
    if not isinstance(doc, dict):
        raise CliError(f"{name} must hold a JSON object ({what}), not {type(doc).__name__}")
    return doc


def _report_body(args: argparse.Namespace) -> dict[str, Any]:
    if _input_kind(args) == "csv":
        loaded = _load_problem(args, need_dict=True)
        assert loaded.problem is not None     # a CSV table always becomes a dict
        body = loaded.problem
    else:
        body = {**_read_json_object(args.file, "a problem"), **_overrides(args)}
    if args.answer is not None:
        if "answer" in body:
            raise CliError(f"{args.file} already holds an \"answer\"; leave out --answer")
        body["answer"] = _read_json_object(args.answer, "an answer from solve")
    elif "answer" not in body:
        raise CliError(f"{args.file} holds no \"answer\": give the answer file with "
                       "--answer ANSWER.json")
    return body


def _report_format(args: argparse.Namespace) -> str:
    if args.format:
        return str(args.format)
    return "svg" if (args.output or "").lower().endswith(".svg") else "html"


def _cmd_report(args: argparse.Namespace) -> int:
    progress = _progress(args)
    body = _report_body(args)
    # Imported here: numpy and the verifier are not needed by serve or remote solve.
    from service.errors import ServiceError
    from service.report import build_report
    from service.settings import load_settings

    try:
        settings = load_settings()
    except ValueError as e:
        raise CliError(str(e)) from e
    fmt = _report_format(args)
    source = args.file if args.answer is None else f"{args.file} + {args.answer}"
    started = time.monotonic()
    try:
        text, valid = build_report(body, settings, fmt, source)
    except ServiceError as e:
        print(json.dumps(e.problem()), file=sys.stderr)
        return EXIT_ERROR
    progress.say(f"checked and rendered in {time.monotonic() - started:.1f} s: "
                 f"{'VALID' if valid else 'NOT VALID'}")
    _write_output(text, args.output)
    if args.output not in (None, "-"):
        progress.say(f"wrote {fmt} report to {args.output}")
    return EXIT_OK if valid else EXIT_NEGATIVE
