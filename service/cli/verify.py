"""``certimatch verify``: send a problem with an answer, print the verdict."""

from __future__ import annotations

import argparse
import json

from service.cli.files import _input_kind, _overrides, _problem_with_answer
from service.cli.talk import _read_input, _verify_exit
from service.cli.transport import _poster


def _verify_body(args: argparse.Namespace) -> bytes:
    if args.answer is None and not _overrides(args) and _input_kind(args, args.file) == "json":
        # Sent as read: the service alone says what is malformed (or that "answer" is
        # missing), as it would to any HTTP caller.
        return _read_input(args.file)
    return json.dumps(_problem_with_answer(args), separators=(",", ":")).encode()


def _cmd_verify(args: argparse.Namespace) -> int:
    body = _verify_body(args)
    return _verify_exit(_poster(args)("/v1/verify", body))
