"""``certimatch report``: verify an answer here and write the audit report."""

from __future__ import annotations

import argparse
import json
import sys
import time

from service.cli.files import _problem_with_answer, _progress, _write_output
from service.cli.talk import EXIT_ERROR, EXIT_NEGATIVE, EXIT_OK, CliError

# --- report -----------------------------------------------------------------------------

def _report_format(args: argparse.Namespace) -> str:
    if args.format:
        return str(args.format)
    return "svg" if (args.output or "").lower().endswith(".svg") else "html"


def _cmd_report(args: argparse.Namespace) -> int:
    progress = _progress(args)
    body = _problem_with_answer(args)
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
