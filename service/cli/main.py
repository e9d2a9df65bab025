"""The ``certimatch`` command: run the server, send it problems, report on answers, demo.

``solve``, ``verify`` and ``report`` are made for scripts (cron jobs, CI steps), so their
exit codes carry the verdict (the table is in service/cli/helps.py and the README) and
stdout carries only the result (or -o FILE does). Every other answer (an RFC 9457 problem
document) goes to stderr as received. ``solve`` also reads a CSV cost table
(service/cli/tables.py) and writes a table or CSV sheets (service/cli/sheets.py);
``report`` runs the verifier in this process and renders the audit page (service/report/).
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from typing import Any, NoReturn

from service import __version__
from service.cli.audit import add_audit
from service.cli.credentials import TOKEN_ENV, redact_secrets, token_argument
from service.cli.db import add_db
from service.cli.demo import _cmd_demo
from service.cli.files import _delimiter
from service.cli.helps import MAIN_EPILOG, REPORT_EPILOG, SOLVE_EPILOG, VERIFY_EPILOG
from service.cli.replan import add_replan_options
from service.cli.report import _cmd_report
from service.cli.retries import DEFAULT_RETRIES
from service.cli.serve import _cmd_serve
from service.cli.solve import _cmd_solve
from service.cli.talk import (
    DEFAULT_HOST,
    DEFAULT_PORT,
    DEFAULT_URL,
    EXIT_ERROR,
    EXIT_OK,
    URL_ENV,
    CliError,
)
from service.cli.verify import _cmd_verify

#: Longest --timeout: one day, as for the server's own time limits.
MAX_SECONDS = 86_400.0
#: Longest --idempotency-key.
MAX_KEY_LENGTH = 200

# --- command line -----------------------------------------------------------------------

def _port(text: str) -> int:
    value = int(text)
    if not 1 <= value <= 65535:
        raise argparse.ArgumentTypeError(f"must be from 1 to 65535, got {value}")
    return value


def _positive(text: str) -> int:
    value = int(text)
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value


def _count(text: str) -> int:
    value = int(text)
    if value < 0:
        raise argparse.ArgumentTypeError(f"must be 0 or more, got {value}")
    return value


def _seconds(text: str) -> float:
    value = float(text)
    if not 0 < value <= MAX_SECONDS:
        raise argparse.ArgumentTypeError(f"must be more than 0 and at most {MAX_SECONDS}, "
                                         f"got {text}")
    return value


def _key(text: str) -> str:
    # Visible ASCII: the key travels in a header, and the service compares it byte for byte.
    if not 1 <= len(text) <= MAX_KEY_LENGTH or not all("!" <= c <= "~" for c in text):
        raise argparse.ArgumentTypeError(f"must be 1 to {MAX_KEY_LENGTH} visible ASCII "
                                         "characters (no spaces)")
    return text


def _add_problem_options(cmd: argparse.ArgumentParser) -> None:
    given = cmd.add_argument_group("problem")
    given.add_argument("--input", choices=("json", "csv"),
                       help="how to read FILE (default: csv for a name ending in .csv, "
                       "else json)")
    given.add_argument("--objective", choices=("min", "max", "bottleneck"),
                       help="min: least total cost; max: greatest total score; bottleneck: "
                       "the shortest longest trip (least largest cost of a used pair), then "
                       "least cost (default: the JSON file's, else min); replaces the "
                       "file's field")
    given.add_argument("--columnar", action="store_true",
                       help="send sources, sinks, nodes and arcs as objects of arrays, one "
                       "per field (far quicker to read for large problems; same answer)")
    given.add_argument("--unmet-demand", choices=("minimize", "reject"),
                       help="minimize: meet as much hard demand as possible; reject: exit 2 "
                       "if any hard demand cannot be met (default: the file's, else minimize)")
    given.add_argument("--alternatives", type=int, metavar="K",
                       help="also ask for the K next-best plans (1 to 50), each certified; "
                       "the table lists them with what each costs more and how it differs; "
                       "replaces the file's field")
    add_replan_options(cmd)
    table = cmd.add_argument_group("CSV cost tables")
    table.add_argument("--supply-column", default="supply", metavar="NAME",
                       help="header of the supply column ('' for none; default %(default)s)")
    table.add_argument("--demand-row", default="demand", metavar="NAME",
                       help="label of the demand row ('' for none; default %(default)s)")
    table.add_argument("--penalty-row", default="penalty", metavar="NAME",
                       help="label of the penalty row ('' for none; default %(default)s)")
    table.add_argument("--delimiter", type=_delimiter, default=",", metavar="CHAR",
                       help="cell separator, one character or 'tab' (default ,)")


def _add_talk_options(cmd: argparse.ArgumentParser) -> argparse._ArgumentGroup:
    talk = cmd.add_argument_group("server, token and retries")
    where = talk.add_mutually_exclusive_group()
    where.add_argument("--url", help=f"service URL (default: ${URL_ENV} or {DEFAULT_URL})")
    where.add_argument("--local", action="store_true",
                       help="answer in this process, without a server")
    talk.add_argument("--timeout", type=_seconds, default=300.0, metavar="S",
                      help="seconds to wait for each attempt's answer (%(default)g)")
    talk.add_argument("--gzip", action=argparse.BooleanOptionalAction, default=None,
                      help="send the body gzip-compressed (default: bodies of 1 MB or more "
                      "to a server on another machine)")
    talk.add_argument("--retries", type=_count, default=DEFAULT_RETRIES, metavar="N",
                      help="retries of a transient failure, 0 for none (%(default)s)")
    _add_token_options(talk)
    return talk


def _add_token_options(group: argparse._ArgumentGroup) -> None:
    token = group.add_mutually_exclusive_group()
    # No default shown, and the type keeps the value out of repr() and error messages.
    token.add_argument("--token", type=token_argument, metavar="TOKEN",
                       help="bearer token; visible to other users in `ps`, so prefer "
                       f"--token-file or ${TOKEN_ENV}")
    token.add_argument("--token-file", metavar="FILE",
                       help="read the bearer token from FILE's first line (not blank, "
                       "not # comment); refused if every user may read FILE")


def _add_chatter_options(cmd: argparse.ArgumentParser) -> None:
    chatter = cmd.add_mutually_exclusive_group()
    chatter.add_argument("-q", "--quiet", action="store_true",
                         help="nothing on stderr but errors: no progress, retry or summary "
                         "lines")
    chatter.add_argument("--progress", action="store_true",
                         help="progress lines on stderr even for small problems")


def _add_solve(sub: Any, raw: type[argparse.HelpFormatter]) -> None:
    solve = sub.add_parser(
        "solve", help="solve problems (JSON, or CSV cost tables)", formatter_class=raw,
        epilog=SOLVE_EPILOG,
        description="Send a problem to /v1/solve and write the answer: the least-cost\n"
        "allocation with its certificate. FILE is a JSON problem (see openapi.yaml) or a\n"
        "CSV cost table (below); - reads standard input. Several FILEs, or a folder,\n"
        "are solved one by one into --out-dir.")
    solve.add_argument("file", metavar="FILE", nargs="+",
                       help="the problem: JSON or CSV, - for stdin, or a folder")
    _add_problem_options(solve)
    solve.add_argument("--prices", action="store_true",
                       help="also price overriding every allowed pair (the request's "
                       "\"prices\": true); the table lists the five cheapest overrides")
    out = solve.add_argument_group("output")
    out.add_argument("--format", choices=("json", "table", "csv"), default="json",
                     help="json (default), table or csv; see below")
    out.add_argument("-o", "--output", metavar="FILE",
                     help="write the answer to FILE instead of stdout (replaced whole, "
                     "only when a plan came back)")
    out.add_argument("--out-dir", metavar="DIR",
                     help="with several inputs: write one answer file per input here")
    out.add_argument("--unmet-csv", metavar="FILE",
                     help="write unmet demand to FILE: id,amount,demand,hard,reason,"
                     "reduced_cost")
    out.add_argument("--unused-csv", metavar="FILE",
                     help="write unused supply to FILE: id,amount,supply")
    out.add_argument("--summary-json", metavar="FILE",
                     help="write a summary (objective, shortfalls, exit code) to FILE")
    out.add_argument("--spreadsheet-safe", action=argparse.BooleanOptionalAction,
                     default=True,
                     help="put ' before ids starting with = + - @ ' in CSV output (default: "
                     "on); --no-spreadsheet-safe writes ids exactly")
    _add_chatter_options(solve)
    talk = _add_talk_options(solve)
    talk.add_argument("--idempotency-key", type=_key, metavar="KEY",
                       help="the Idempotency-Key of the solve (default: a new UUID per "
                       "run); with several inputs, KEY-<digest of each input>")
    solve.set_defaults(handler=_cmd_solve)


def _parser(argv: Sequence[str] = ()) -> argparse.ArgumentParser:
    raw = argparse.RawDescriptionHelpFormatter
    given = list(argv)

    class Parser(argparse.ArgumentParser):
        def error(self, message: str) -> NoReturn:
            # argparse quotes arguments back; a token on the command line must not be.
            super().error(redact_secrets(message, given))

    p = Parser(
        prog="certimatch", formatter_class=raw, epilog=MAIN_EPILOG,
        description="Least-cost allocation of supply to demand, with a proof of optimality.\n\n"
        "Sources (who can do work, and how much) are matched to sinks (what needs doing)\n"
        "at the least total cost; every answer carries a certificate, potentials and a\n"
        "cut, that anyone can check without trusting the service.")
    p.add_argument("--version", action="version", version=f"certimatch {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    serve = sub.add_parser("serve", help="run the HTTP service under gunicorn",
                           description="Run the HTTP service under gunicorn, with "
                           "deploy/gunicorn.conf.py when the checkout has one.")
    serve.add_argument("--host", help=f"address to bind (default: the config file's bind, "
                       f"else {DEFAULT_HOST})")
    serve.add_argument("--port", type=_port,
                       help=f"port to bind (default: the config file's, else {DEFAULT_PORT})")
    serve.add_argument("--workers", type=_positive, default=None,
                       help="worker processes (default: the config file's, else 2)")
    serve.add_argument("--insecure", action="store_true",
                       help="allow a non-loopback address with no bearer tokens "
                       "(CERTIMATCH_TOKENS); anyone who reaches it can use the service")
    serve.set_defaults(handler=_cmd_serve)

    _add_solve(sub, raw)

    verify = sub.add_parser(
        "verify", help="check an answer against its problem", formatter_class=raw,
        epilog=VERIFY_EPILOG,
        description="Send a problem with its answer to /v1/verify and print the verdict\n"
        "and every check. The answer is FILE's \"answer\", or the file --answer names.")
    verify.add_argument("file", metavar="FILE",
                        help="the problem (JSON or CSV), with an \"answer\" unless --answer "
                        "is given; - for stdin")
    verify.add_argument("--answer", metavar="ANSWER",
                        help="the answer, as certimatch solve or /v1/solve wrote it")
    _add_problem_options(verify)
    _add_talk_options(verify)
    verify.set_defaults(handler=_cmd_verify)

    report = sub.add_parser(
        "report", help="write an audit report (HTML page or SVG picture) for an answer",
        formatter_class=raw, epilog=REPORT_EPILOG,
        description="Check an answer with the independent verifier, here in this process,\n"
        "and write a page an auditor can read: the verdict, the checks, a picture of the\n"
        "allocation and what the certificate proves.")
    report.add_argument("file", metavar="FILE",
                        help="the problem (JSON or CSV), with an \"answer\" unless --answer "
                        "is given; - for stdin")
    report.add_argument("--answer", metavar="ANSWER",
                        help="the answer, as certimatch solve or /v1/solve wrote it")
    _add_problem_options(report)
    out = report.add_argument_group("output")
    out.add_argument("--format", choices=("html", "svg"),
                     help="html: the whole page; svg: the picture alone (default: svg for "
                     "an -o name ending in .svg, else html)")
    out.add_argument("-o", "--output", metavar="FILE",
                     help="write to FILE instead of stdout (replaced whole)")
    _add_chatter_options(report)
    report.set_defaults(handler=_cmd_report)

    demo = sub.add_parser("demo", help="start a server and solve the demo problems",
                          description="Start gunicorn on 127.0.0.1, solve and verify the "
                          "demo problems, print them, then keep serving until Ctrl-C or "
                          "SIGTERM, either of which stops the server.")
    demo.add_argument("--port", type=_port, default=DEFAULT_PORT,
                      help="port to bind (%(default)s)")
    demo.add_argument("--exit", action="store_true",
                      help="stop the server after the demo instead of serving on")
    _add_token_options(demo.add_argument_group("token (when CERTIMATCH_TOKENS is set)"))
    demo.set_defaults(handler=_cmd_demo)

    add_db(sub, raw)
    add_audit(sub, raw)
    return p


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``certimatch`` console script; returns the exit code."""
    argv = sys.argv[1:] if argv is None else list(argv)
    try:
        args = _parser(argv).parse_args(argv)
    except SystemExit as e:
        # argparse exits 2 on a usage error, which scripts would read as "infeasible".
        return EXIT_OK if e.code in (0, None) else EXIT_ERROR
    try:
        code: int = args.handler(args)
    except CliError as e:
        print(f"certimatch: {e}", file=sys.stderr)
        return e.code
    return code
