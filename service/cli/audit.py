"""``certimatch audit``: the auditor's commands, ``export`` and ``check`` (one module each)."""

from __future__ import annotations

import argparse
import base64
import binascii
from typing import Any

from service.cli.audit_check import AUDIT_CHECK_EPILOG, _cmd_audit_check
from service.cli.audit_export import _cmd_audit_export, since_argument
from service.cli.credentials import TOKEN_ENV, token_argument
from service.settings import ENV_PREFIX

AUDIT_EXPORT_EPILOG = f"""\
The export is read from the service's database ({ENV_PREFIX}DATABASE_URL, else the
SQLite file in {ENV_PREFIX}DATA_DIR) and its checkpoint signed with the service's
key ({ENV_PREFIX}SIGNING_KEY_FILE, else signing-key.pem in {ENV_PREFIX}DATA_DIR;
never a new one). Run it where the service runs, with its environment.

format: JSON lines, each the RFC 8785 JSON of one object: a header (with, after
--since, the hashes that stand for the earlier records), one line per record in
log order (its decision, leaf, mode and stored problem and answer), and the
signed checkpoint last. Two exports of the same log are byte for byte equal.

examples:
  certimatch audit export -o decisions.jsonl
  certimatch audit export --since 2026-12-01 -o december.jsonl

exit codes: 0 written; 1 not written (no database, a schema that is behind, no key,
an unwritable FILE).
"""


def _public_key(text: str) -> str:
    try:
        raw = base64.b64decode(text, validate=True)
    except binascii.Error:
        raw = b""
    if len(raw) != 32:
        raise argparse.ArgumentTypeError("must be the base64 of a 32-byte Ed25519 public "
                                         "key, as GET /v1/log/checkpoint serves it")
    return text


def add_audit(sub: Any, raw: type[argparse.HelpFormatter]) -> None:
    audit = sub.add_parser("audit", help="export the decision log, or check an export",
                           description="Export the decision log, or check an export of it.",
                           formatter_class=raw)
    actions = audit.add_subparsers(dest="audit_command", required=True, metavar="ACTION")

    export = actions.add_parser(
        "export", help="write the decision log as JSON lines with a signed checkpoint",
        formatter_class=raw, epilog=AUDIT_EXPORT_EPILOG,
        description="Write the decision log, or its records since DATE, as JSON lines\n"
        "ending in a checkpoint signed with the service's key.")
    export.add_argument("--since", type=since_argument, metavar="DATE",
                        help="only records made at or after DATE (2026-12-01: midnight UTC; "
                        "or an RFC 3339 time)")
    export.add_argument("-o", "--output", required=True, metavar="FILE",
                        help="write to FILE (replaced whole, only once complete); - for "
                        "standard output")
    export.add_argument("-q", "--quiet", action="store_true",
                        help="no summary line on stderr")
    export.set_defaults(handler=_cmd_audit_export)

    check = actions.add_parser(
        "check", help="check an export: leaves, root, signature, every answer",
        formatter_class=raw, epilog=AUDIT_CHECK_EPILOG,
        description="Check an export of the decision log and name every piece of damage:\n"
        "a changed byte in any record, a dropped, added or reordered record.")
    check.add_argument("file", metavar="FILE", nargs="?",
                       help="the export; - for standard input")
    remote = check.add_argument_group("the log of a running service, instead of FILE")
    remote.add_argument("--url", help="the service's URL (its token: --token-file, "
                        f"--token or ${TOKEN_ENV})")
    remote.add_argument("--timeout", type=float, default=60.0, metavar="S",
                        help="seconds to wait for each answer (%(default)g)")
    token = remote.add_mutually_exclusive_group()
    token.add_argument("--token", type=token_argument, metavar="TOKEN",
                       help="bearer token (visible in `ps`: prefer --token-file)")
    token.add_argument("--token-file", metavar="FILE",
                       help="read the bearer token from FILE's first line")
    check.add_argument("--public-key", type=_public_key, metavar="KEY",
                       help="the service's Ed25519 public key (base64) the checkpoint must "
                       "be signed with")
    check.add_argument("--no-reverify", action="store_true",
                       help="skip re-checking the stored answers with the verifier")
    check.add_argument("--json", action="store_true",
                       help="print the outcome as one JSON object (ok, records, size, "
                       "root_sha256, reverified, findings)")
    check.set_defaults(handler=_cmd_audit_check)
