"""Talking to the service: where it is, posting a body, the replies, the exit codes.

The exit codes (one table in the README, "Command line", and in ``certimatch --help``)::

    0  a plan in which all hard demand is met (verify, report: the answer is valid)
    2  refused as infeasible under --unmet-demand reject (verify, report: NOT valid)
    3  a plan was written, but some hard demand is left unmet
    4  a transient failure that outlasted the retries (service/cli/retries.py)
    1  anything permanent: invalid input, authentication, an unreadable file, ...
"""

from __future__ import annotations

import json
import re
import sys
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Protocol
from urllib.parse import urlsplit, urlunsplit

EXIT_OK = 0
EXIT_ERROR = 1
EXIT_NEGATIVE = 2
EXIT_SHORT = 3
EXIT_UNAVAILABLE = 4
EXIT_INTERRUPTED = 130  # the shell's code for a command ended by Ctrl-C (128 + SIGINT)
EXIT_TERMINATED = 143   # ... and by SIGTERM (128 + 15)

#: Of several outcomes, the one a batch exits with: the first of this order that occurred.
#: A broken input needs a person (1); an unreachable server needs a later run (4); a refusal
#: (2) and a plan with a shortfall (3) are results; 0 is the only all-clear.
SEVERITY = (EXIT_ERROR, EXIT_UNAVAILABLE, EXIT_NEGATIVE, EXIT_SHORT, EXIT_OK)

DEFAULT_HOST = "127.0.0.1"
DEFAULT_PORT = 8080
DEFAULT_URL = f"http://{DEFAULT_HOST}:{DEFAULT_PORT}"
URL_ENV = "CERTIMATCH_URL"

#: Statuses that are transient when, and only when, they carry Retry-After.
RETRYABLE_STATUSES = frozenset({502, 503, 504})


@dataclass(frozen=True)
class Reply:
    """One HTTP answer, the same whether it came over the network or from the test client."""

    status: int
    content_type: str
    text: str
    retry_after: str | None = None   # the Retry-After header, as sent

    def document(self) -> dict[str, Any] | None:
        """The body as a JSON object, or None when it is not one."""
        try:
            doc = json.loads(self.text)
        except ValueError:
            return None
        return doc if isinstance(doc, dict) else None


class Post(Protocol):
    """POST ``body`` to ``path`` (with extra request headers); the reply."""

    def __call__(self, path: str, body: bytes,
                 headers: Mapping[str, str] | None = None) -> Reply: ...


class CliError(Exception):
    """A failure the user can act on; main prints it on one line and exits with ``code``."""

    def __init__(self, message: str, code: int = EXIT_ERROR) -> None:
        super().__init__(message)
        self.code = code


class Unreachable(CliError):
    """No HTTP answer at all (refused, reset, timed out): transient, exit 4 once retried."""

    def __init__(self, message: str) -> None:
        super().__init__(message, EXIT_UNAVAILABLE)


def shown_url(url: str) -> str:
    """``url`` without a user name or password, for messages."""
    parts = urlsplit(url)
    if "@" not in parts.netloc:
        return url
    return urlunsplit(parts._replace(netloc=parts.netloc.rsplit("@", 1)[1]))


_ERRNO = re.compile(r"\[Errno -?\d+\] ([^'\")]+)")
_QUOTED = re.compile(r"'([^']{3,})'")


def _reason(e: Exception) -> str:
    """A short cause of a failed connection: "Connection refused" rather than a chain."""
    text = str(e)
    found = _ERRNO.findall(text) or [q for q in _QUOTED.findall(text) if "<" not in q]
    return found[-1].strip() if found else type(e).__name__


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


def transient_reply(reply: Reply) -> bool:
    """True for a 502, 503 or 504 that carries Retry-After (see service/cli/retries.py)."""
    return reply.status in RETRYABLE_STATUSES and bool((reply.retry_after or "").strip())


def infeasible_reply(reply: Reply) -> bool:
    """True for the 422 that refuses unmet hard demand under ``unmet_demand: reject``."""
    doc = reply.document()
    # Invalid problems are 422 too; only the problem type tells "cannot be met" apart.
    return (reply.status == 422 and doc is not None
            and str(doc.get("type", "")).endswith(":infeasible"))


def failure_code(reply: Reply) -> int:
    """The exit code of a reply that is not an answer: 2, 4 or 1."""
    if infeasible_reply(reply):
        return EXIT_NEGATIVE
    return EXIT_UNAVAILABLE if transient_reply(reply) else EXIT_ERROR


def _failure_exit(reply: Reply) -> int:
    """Print a reply that is not an answer to stderr; its exit code (2, 4 or 1)."""
    _print_problem(reply)
    return failure_code(reply)


def _verify_exit(reply: Reply) -> int:
    doc = reply.document()
    if reply.status == 200 and doc is not None and isinstance(doc.get("valid"), bool):
        _print_answer(reply)
        return EXIT_OK if doc["valid"] else EXIT_NEGATIVE
    _print_problem(reply)
    return EXIT_UNAVAILABLE if transient_reply(reply) else EXIT_ERROR
