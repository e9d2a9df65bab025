"""The ``certimatch`` command: run the server, send it problems, report on answers, demo.

``solve``, ``verify`` and ``report`` are made for scripts (cron jobs, CI steps), so their
exit codes carry the verdict and stdout carries only the result (or -o FILE does)::

    0  solve: an optimal allocation        verify, report: the answer is valid
    2  solve: hard demand cannot be met    verify, report: the answer is not valid
    1  anything else: unreadable file, invalid problem, no server, server error

Every other answer (an RFC 9457 problem document) goes to stderr as received. ``solve``
also reads a CSV cost table (service/cli/tables.py) and writes a table or CSV; ``report``
runs the verifier in this process and renders the audit page (service/report/).
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence

from service import __version__
from service.cli.demo import _cmd_demo
from service.cli.files import PROGRESS_BYTES, _delimiter
from service.cli.report import _cmd_report
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
from service.cli.text import _size
from service.cli.verify import _cmd_verify

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


_MAIN_EPILOG = f"""\
examples:
  certimatch serve                          run the service on {DEFAULT_HOST}:{DEFAULT_PORT}
  certimatch solve problem.json > answer.json
                                            solve with the running service
  certimatch solve costs.csv --format table --local
                                            a cost table from a spreadsheet, solved here
  certimatch solve costs.csv --format csv -o allocation.csv
                                            the allocation as a sheet, for a spreadsheet
  certimatch verify problem_with_answer.json
                                            check any answer against its problem
  certimatch report problem.json --answer answer.json -o report.html
                                            an audit report to open in a browser
  certimatch demo                           start a server and solve two invented scenarios

exit codes of solve, verify and report:
  0  solve: optimal allocation     verify, report: the answer is valid
  2  solve: hard demand cannot be met (only with --unmet-demand reject)
     verify, report: the answer is NOT valid (report still writes the page)
  1  anything else: unreadable file, invalid problem, no server, server error,
     wrong options

"certimatch COMMAND --help" explains one command. Without --url, solve and verify
use ${URL_ENV}, else {DEFAULT_URL}.
"""

_CSV_HELP = """\
CSV cost tables (FILE ending in .csv, or --input csv):
  ,ticket-1,ticket-2,ticket-3,supply     first row: a corner cell, then one sink id
  tech-a,10,25,,2                        per column; each further row: a source id,
  tech-b,12,,15,1                        then its cost to each sink. An empty cell
  demand,1,2,1,                          means the pair is not allowed.
  penalty,,,30,
  Optional: a column "supply" (each source's supply), a row "demand" (each sink's
  demand), a row "penalty" (cost of each unit left unmet; empty = hard demand).
  Without them every supply and demand is 1 and all demand is hard. Empty cells
  in them mean the same defaults. Spaces around cells are ignored; a UTF-8 byte
  order mark (as spreadsheets write "CSV UTF-8") is fine. Decimals take a dot.
"""

_SOLVE_EPILOG = _CSV_HELP + f"""
output (--format):
  json   the answer document exactly as the service returns it (default)
  table  allocation, unmet demand, unused supply, objective, aligned for reading,
         and the verdict of /v1/verify on the answer (exit 1 if it is not valid)
  csv    the allocation as rows from,to,flow,cost with a header row; ids that a
         spreadsheet would run as a formula (starting with = + - @) get a leading '

progress lines go to stderr when the body is {_size(PROGRESS_BYTES)} or more or stderr
is a terminal; with --progress always, with --quiet never. Errors from the service go
to stderr as the RFC 9457 JSON document it sent.

examples:
  certimatch solve problem.json --local
  certimatch solve costs.csv --objective max --format table
  certimatch solve costs.csv --unmet-demand reject --format csv -o plan.csv
  certimatch solve - --url http://solver.internal:8080 < problem.json

exit codes: 0 optimal; 2 hard demand cannot be met (--unmet-demand reject);
1 anything else (nothing is written to -o FILE then).
"""

_REPORT_EPILOG = _CSV_HELP + """
The page is one HTML file with inline styles and drawings, no script and nothing
loaded from anywhere: the verdict of the independent verifier (run here, on this
machine, not taken from the answer), every check, a heat map of reduced costs
with the chosen pairs ringed (or a diagram of the allocation for networks and
larger problems), unmet demand, unused supply, and what the certificate proves.

examples:
  certimatch solve problem.json > answer.json
  certimatch report problem.json --answer answer.json -o report.html
  certimatch report problem_with_answer.json -o heatmap.svg
  certimatch report costs.csv --answer answer.json -o report.html

exit codes: 0 the answer is valid; 2 it is NOT valid (the report is still written);
1 anything else (unreadable file, not a problem with an answer).
"""


def _add_problem_options(cmd: argparse.ArgumentParser) -> None:
    given = cmd.add_argument_group("problem")
    given.add_argument("--input", choices=("json", "csv"),
                       help="how to read FILE (default: csv for a name ending in .csv, "
                       "else json)")
    given.add_argument("--objective", choices=("min", "max"),
                       help="min: least total cost; max: greatest total score (default: "
                       "the JSON file's, else min); replaces the file's field")
    given.add_argument("--unmet-demand", choices=("minimize", "reject"),
                       help="minimize: meet as much hard demand as possible; reject: exit 2 "
                       "if any hard demand cannot be met (default: the file's, else minimize)")
    table = cmd.add_argument_group("CSV cost tables")
    table.add_argument("--supply-column", default="supply", metavar="NAME",
                       help="header of the supply column ('' for none; default %(default)s)")
    table.add_argument("--demand-row", default="demand", metavar="NAME",
                       help="label of the demand row ('' for none; default %(default)s)")
    table.add_argument("--penalty-row", default="penalty", metavar="NAME",
                       help="label of the penalty row ('' for none; default %(default)s)")
    table.add_argument("--delimiter", type=_delimiter, default=",", metavar="CHAR",
                       help="cell separator, one character or 'tab' (default ,)")


def _add_talk_options(cmd: argparse.ArgumentParser) -> None:
    where = cmd.add_mutually_exclusive_group()
    where.add_argument("--url", help=f"service URL (default: ${URL_ENV} or {DEFAULT_URL})")
    where.add_argument("--local", action="store_true",
                       help="answer in this process, without a server")
    cmd.add_argument("--timeout", type=float, default=300.0,
                     help="seconds to wait for the server (%(default)s)")


def _add_chatter_options(cmd: argparse.ArgumentParser) -> None:
    chatter = cmd.add_mutually_exclusive_group()
    chatter.add_argument("-q", "--quiet", action="store_true",
                         help="no progress lines on stderr")
    chatter.add_argument("--progress", action="store_true",
                         help="progress lines on stderr even for small problems")


def _parser() -> argparse.ArgumentParser:
    raw = argparse.RawDescriptionHelpFormatter
    p = argparse.ArgumentParser(
        prog="certimatch", formatter_class=raw, epilog=_MAIN_EPILOG,
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

    solve = sub.add_parser(
        "solve", help="solve a problem (JSON, or a CSV cost table)", formatter_class=raw,
        epilog=_SOLVE_EPILOG,
        description="Send a problem to /v1/solve and write the answer: the least-cost\n"
        "allocation with its certificate. FILE is a JSON problem (see openapi.yaml) or a\n"
        "CSV cost table (below); - reads standard input.")
    solve.add_argument("file", metavar="FILE", help="the problem: JSON or CSV, - for stdin")
    _add_problem_options(solve)
    out = solve.add_argument_group("output")
    out.add_argument("--format", choices=("json", "table", "csv"), default="json",
                     help="json (default), table or csv; see below")
    out.add_argument("-o", "--output", metavar="FILE",
                     help="write to FILE instead of stdout (replaced whole, only on success)")
    _add_chatter_options(solve)
    _add_talk_options(solve)
    solve.set_defaults(handler=_cmd_solve)

    verify = sub.add_parser(
        "verify", help="check an answer against its problem",
        description="Send a problem with an \"answer\" to /v1/verify and print the verdict "
        "and every check. Exit 0 valid, 2 not valid, 1 otherwise.")
    verify.add_argument("file", metavar="FILE",
                        help="JSON problem with an \"answer\", or - for standard input")
    _add_talk_options(verify)
    verify.set_defaults(handler=_cmd_verify)

    report = sub.add_parser(
        "report", help="write an audit report (HTML page or SVG picture) for an answer",
        formatter_class=raw, epilog=_REPORT_EPILOG,
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
                          "demo problems, print them, then keep serving until Ctrl-C.")
    demo.add_argument("--port", type=_port, default=DEFAULT_PORT,
                      help="port to bind (%(default)s)")
    demo.add_argument("--exit", action="store_true",
                      help="stop the server after the demo instead of serving on")
    demo.set_defaults(handler=_cmd_demo)
    return p


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``certimatch`` console script; returns the exit code."""
    try:
        args = _parser().parse_args(argv)
    except SystemExit as e:
        # argparse exits 2 on a usage error, which scripts would read as "infeasible".
        return EXIT_OK if e.code in (0, None) else EXIT_ERROR
    try:
        code: int = args.handler(args)
    except CliError as e:
        print(f"certimatch: {e}", file=sys.stderr)
        return EXIT_ERROR
    return code
