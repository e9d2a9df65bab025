"""``certimatch verify``: send a problem with an answer, print the verdict."""

from __future__ import annotations

import argparse

from service.cli.talk import _poster, _read_input, _verify_exit


def _cmd_verify(args: argparse.Namespace) -> int:
    body = _read_input(args.file)
    return _verify_exit(_poster(args)("/v1/verify", body))
