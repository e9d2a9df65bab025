"""``certimatch audit check``: check an export of the decision log, or the log a running
service serves, and name every piece of damage.

Every record's leaf is recomputed from its seven decision fields, both digests from the
stored bodies, the root from the leaves, and the checkpoint's Ed25519 signature is
checked; every kept answer is re-checked against its problem by the independent
verifier, here, in this process. The exit code is 0 only when all of it holds.
"""

from __future__ import annotations

import argparse
import json
import re
import sys
from collections.abc import Iterator
from typing import Any

from service.cli.talk import EXIT_NEGATIVE, EXIT_OK, CliError
from service.records.audit import AuditReport, Reverify, check

AUDIT_CHECK_EPILOG = """\
what is checked: each record's leaf (RFC 9162: SHA-256 of 0x00 and the RFC 8785
JSON of its seven decision fields) against the stored one; the problem and answer
against input_sha256 and answer_sha256; log indexes running on without gap,
repetition or disorder; the root made from the leaves against the signed
checkpoint and its Ed25519 signature (pin the service's key with --public-key,
else the checkpoint's own key is used); every kept answer re-checked against its
problem by the independent verifier in this process. Each finding names the line,
the log index and the decision id.

examples:
  certimatch audit export -o decisions.jsonl
  certimatch audit check decisions.jsonl --public-key "$(cat service-key.b64)"
  certimatch audit check --url https://solver.internal --token-file ~/.certimatch-token \\
      --public-key "$(cat service-key.b64)"

--url reads the log the service serves (GET /v1/log/checkpoint, the pages of
GET /v1/decisions, each GET /v1/decisions/{id}) and checks it the same way, here;
each record's inclusion proof is checked against the checkpoint served with it.

exit codes: 0 everything holds; 2 damage was found (each finding is printed);
4 the service (--url) could not be reached or answered 502/503/504; 1 anything
else (unreadable file, bad options, 401).
"""


def _verifier() -> Reverify:
    # Imported here: the verifier pulls in numpy and scipy, which --help does not need.
    from service.settings import load_settings
    from service.solve.pipeline import recheck_stored

    try:
        settings = load_settings()
    except ValueError as e:
        raise CliError(str(e)) from None

    def reverify(problem: Any, answer: Any) -> tuple[bool, str]:
        return recheck_stored(problem, answer, settings)

    return reverify


def _file_lines(name: str) -> Iterator[bytes]:
    try:
        handle = sys.stdin.buffer if name == "-" else open(name, "rb")
    except OSError as e:
        raise CliError(f"cannot read {name}: {e.strerror or e}") from None
    with handle:
        try:
            yield from handle
        except OSError as e:
            raise CliError(f"cannot read {name}: {e.strerror or e}") from None


def _print_report(report: AuditReport, as_json: bool) -> None:
    if as_json:
        print(json.dumps(report.to_dict(), indent=2))
        return
    for finding in report.findings:
        print(finding)
    what = (f"{report.records} record{'' if report.records == 1 else 's'}, "
            f"{report.reverified} answer{'' if report.reverified == 1 else 's'} re-verified")
    if report.ok:
        print(f"audit check: VALID ({what}; signed log of {report.size} records, "
              f"root {report.root_sha256})")
    else:
        count = len(report.findings)
        print(f"audit check: NOT VALID ({count} finding{'' if count == 1 else 's'}; {what})")


def _cmd_audit_check(args: argparse.Namespace) -> int:
    if (args.file is None) == (args.url is None):
        raise CliError("give an export FILE or --url URL, not both and not neither")
    reverify = None if args.no_reverify else _verifier()
    if args.url is not None:
        from service.cli.audit_remote import remote_lines

        lines, per_record = remote_lines(args)
        report = check(lines, reverify, args.public_key)
        # the lines were laid out here, so their numbers mean nothing to the reader
        report.findings = [re.sub(r"^line \d+, ", "", f) for f in report.findings]
        report.findings += per_record
    else:
        report = check(_file_lines(args.file), reverify, args.public_key)
    _print_report(report, args.json)
    return EXIT_OK if report.ok else EXIT_NEGATIVE
