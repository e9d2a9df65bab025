"""The long help texts of the ``certimatch`` command (``--help``), kept beside each other.

The exit-code table here and the one in the README ("Command line") say the same thing;
tests/cli/test_cli.py holds the two to each other.
"""

from __future__ import annotations

from service.cli.credentials import TOKEN_ENV
from service.cli.files import PROGRESS_BYTES
from service.cli.retries import BASE_SECONDS, CAP_SECONDS, MAX_WAIT_SECONDS
from service.cli.talk import DEFAULT_HOST, DEFAULT_PORT, DEFAULT_URL, URL_ENV
from service.cli.text import _size

EXIT_CODES = """\
exit codes (solve; verify and report: 0 valid, 2 NOT valid, 4 and 1 as here):
  0  a plan in which all hard demand is met
  2  refused as infeasible: hard demand cannot be met and the problem says
     --unmet-demand reject (no plan is written)
  3  a plan was written, but some hard demand is left unmet
  4  a transient failure outlasted the retries: no HTTP answer at all (connection
     refused or reset, nothing within --timeout), or 502/503/504 with
     Retry-After (overloaded); the same command may succeed later
  1  anything permanent: invalid input, authentication (401), an unreadable file,
     a 503 without Retry-After (a time limit the request asked for), wrong options
  several inputs: the worst of their codes, in the order 1 > 4 > 2 > 3 > 0
"""

MAIN_EPILOG = f"""\
examples:
  certimatch serve                          run the service on {DEFAULT_HOST}:{DEFAULT_PORT}
  certimatch solve problem.json > answer.json
                                            solve with the running service
  certimatch solve costs.csv --format table --local
                                            a cost table from a spreadsheet, solved here
  certimatch solve costs.csv --format csv -o allocation.csv
                                            the allocation as a sheet, for a spreadsheet
  certimatch solve inbox/ --out-dir answers/ --summary-json answers/summary.json
                                            every problem in a folder, one answer each
  certimatch verify problem.json --answer answer.json
                                            check any answer against its problem
  certimatch report problem.json --answer answer.json -o report.html
                                            an audit report to open in a browser
  certimatch demo                           start a server and solve two invented scenarios
  certimatch audit export -o decisions.jsonl && certimatch audit check decisions.jsonl
                                            take the decision log out and check it
                                            (exit codes: certimatch audit check --help)

{EXIT_CODES}
"certimatch COMMAND --help" explains one command. Without --url, solve and verify
use ${URL_ENV}, else {DEFAULT_URL}. The bearer token comes from
--token-file FILE, ${TOKEN_ENV} or --token TOKEN (the last is visible in `ps`).
"""

CSV_HELP = """\
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
  order mark (as spreadsheets write "CSV UTF-8") is fine. Numbers are written
  like 12, -3, 7.5 or 1e3: decimals take a dot, and 1_000 or 1,000 is no number.
"""

TALK_HELP = f"""\
server, token and retries:
  --url, else ${URL_ENV}, else {DEFAULT_URL}; --local answers in this
  process (no server, no token, no retries). The bearer token is --token TOKEN or
  --token-file FILE (its first line that is neither blank nor a # comment; a file
  every user may read is refused), else ${TOKEN_ENV}. A --token on the command
  line can be seen by other users of the machine in `ps`: prefer the file or the
  variable. The token is never printed.
  Transient failures are retried --retries times (0: never), after a random wait
  of up to {BASE_SECONDS:g} s, doubling with each retry up to {CAP_SECONDS:g} s ("full jitter"), or
  the server's Retry-After when that is longer (at most {MAX_WAIT_SECONDS:g} s per wait). A
  retried solve sends the same Idempotency-Key, so the service records it once.
"""

SOLVE_EPILOG = CSV_HELP + f"""
output:
  --format json   the answer document exactly as the service returns it (default)
  --format table  allocation, unmet demand, unused supply, objective, aligned for
                  reading, and the verdict of /v1/verify on the answer (exit 1 if
                  it is not valid)
  --format csv    the allocation as rows from,to,flow,cost with a header row
  --unmet-csv FILE     unmet demand as rows id,amount,demand,hard,reason,reduced_cost
  --unused-csv FILE    unused supply as rows id,amount,supply
  --summary-json FILE  objective, units routed, hard and soft demand unmet,
                  unused supply, the exit code and its meaning, the input's
                  SHA-256; written whatever came of the solve (the others only
                  when a plan came back). A one-line summary also goes to stderr.
  In every CSV written, ids starting with = + - @ ' get a leading ' so that a
  spreadsheet shows them as text (remove one leading ' to get the id back);
  --no-spreadsheet-safe writes ids exactly, for a program to read.

several inputs (files, or folders standing for their *.json and *.csv files):
  solved one by one, each answer written to --out-dir DIR as NAME.answer.json
  (json), NAME.allocation.csv (csv) or NAME.answer.txt (table); the unmet and
  unused sheets get a first column "input"; a summary table goes to stdout.

{TALK_HELP}
progress lines go to stderr when the body is {_size(PROGRESS_BYTES)} or more or stderr
is a terminal; with --progress always, with --quiet never (--quiet also drops the
summary line and retry notices). Errors from the service go to stderr as the RFC
9457 JSON document it sent.

examples:
  certimatch solve problem.json --local
  certimatch solve costs.csv --objective max --format table
  certimatch solve costs.csv --format csv -o plan.csv --unmet-csv waiting.csv \\
      --unused-csv idle.csv --summary-json summary.json
  certimatch solve - --url http://solver.internal:8080 --token-file ~/.certimatch-token \\
      < problem.json
  certimatch solve monday.json tuesday.csv inbox/ --out-dir answers/

{EXIT_CODES}"""

VERIFY_EPILOG = CSV_HELP + f"""
{TALK_HELP}
examples:
  certimatch verify problem_with_answer.json
  certimatch verify problem.json --answer answer.json
  certimatch verify costs.csv --answer answer.json --local

exit codes: 0 the answer is valid; 2 it is NOT valid; 4 a transient failure outlasted
the retries; 1 anything else (unreadable file, not a problem with an answer, 401).
"""

REPORT_EPILOG = CSV_HELP + """
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
