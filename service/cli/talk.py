"""Talking to the service: where it is, posting a body, the replies, the exit codes."""

from __future__ import annotations

import argparse
import json
import os
import sys
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import requests

EXIT_OK = 0
EXIT_ERROR = 1
EXIT_NEGATIVE = 2
EXIT_INTERRUPTED = 130  # the shell's code for a command ended by Ctrl-C

DEFAULT_HOST = "127.0.0.1"
DEFAULT_PORT = 8080
DEFAULT_URL = f"http://{DEFAULT_HOST}:{DEFAULT_PORT}"
URL_ENV = "CERTIMATCH_URL"


@dataclass(frozen=True)
class Reply:
    """One HTTP answer, the same whether it came over the network or from the test client."""

    status: int
    content_type: str
    text: str

    def document(self) -> dict[str, Any] | None:
        """The body as a JSON object, or None when it is not one."""
        try:
            doc = json.loads(self.text)
        except ValueError:
            return None
        return doc if isinstance(doc, dict) else None


Post = Callable[[str, bytes], Reply]


class CliError(Exception):
    """A failure the user can act on; main prints it on one line and exits 1."""



# --- talking to the service -------------------------------------------------------------

def _http_post(base_url: str, timeout: float) -> Post:
    base = base_url.rstrip("/")

    def post(path: str, body: bytes) -> Reply:
        try:
            r = requests.post(base + path, data=body, timeout=timeout,
                              headers={"Content-Type": "application/json"})
        except requests.RequestException as e:
            raise CliError(f"cannot reach {base}: {e}") from e
        # Decoded here rather than by requests, which would guess a charset for JSON.
        return Reply(r.status_code, r.headers.get("Content-Type", ""),
                     r.content.decode("utf-8", errors="replace"))

    return post


def _local_post() -> Post:
    # Imported here so that `serve` and remote `solve` never pay for numpy and scipy.
    from service.app import create_app

    try:
        client = create_app().test_client()
    except ValueError as e:  # a bad CERTIMATCH_* setting in the environment
        raise CliError(str(e)) from e

    def post(path: str, body: bytes) -> Reply:
        r = client.post(path, data=body, content_type="application/json")
        return Reply(r.status_code, r.content_type or "", r.get_data(as_text=True))

    return post


def _target(args: argparse.Namespace) -> tuple[Post, str | None]:
    """The way to the service, and its URL for progress lines (None: this process)."""
    if args.local:
        return _local_post(), None
    base = args.url or os.environ.get(URL_ENV) or DEFAULT_URL
    return _http_post(base, args.timeout), base.rstrip("/")


def _poster(args: argparse.Namespace) -> Post:
    return _target(args)[0]


def _read_input(name: str) -> bytes:
    # Raw bytes go to the service unparsed: it alone decides what is malformed, so the
    # CLI and HTTP callers get the same 400 for the same file.
    if name == "-":
        return sys.stdin.buffer.read()
    try:
        return Path(name).read_bytes()
    except OSError as e:
        raise CliError(f"cannot read {name}: {e.strerror or e}") from e


def _print_answer(reply: Reply) -> None:
    print(reply.text.rstrip("\n"))


def _print_problem(reply: Reply) -> None:
    if reply.document() is not None:
        print(reply.text.rstrip("\n"), file=sys.stderr)
    else:
        shown = reply.text[:500].rstrip("\n")
        print(f"certimatch: HTTP {reply.status} ({reply.content_type or 'no content type'}): "
              f"{shown}", file=sys.stderr)


def _failure_exit(reply: Reply) -> int:
    """Print a reply that is not an answer to stderr; 2 when hard demand cannot be met."""
    doc = reply.document()
    _print_problem(reply)
    # Invalid problems are 422 too; only the problem type tells "cannot be met" apart.
    if reply.status == 422 and doc is not None and str(doc.get("type", "")).endswith(
            "infeasible"):
        return EXIT_NEGATIVE
    return EXIT_ERROR


def _verify_exit(reply: Reply) -> int:
    doc = reply.document()
    if reply.status == 200 and doc is not None and isinstance(doc.get("valid"), bool):
        _print_answer(reply)
        return EXIT_OK if doc["valid"] else EXIT_NEGATIVE
    _print_problem(reply)
    return EXIT_ERROR
