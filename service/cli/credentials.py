"""The bearer token the command sends: from --token, --token-file or CERTIMATCH_TOKEN.

The token is held in a :class:`Secret`, whose ``repr`` and ``str`` never show it, and is
revealed only where the ``Authorization`` header is built. Nothing here puts it in a
message: errors about a token name where it came from, never what it is.
"""

from __future__ import annotations

import argparse
import os
import stat
from collections.abc import Sequence
from pathlib import Path

from service.cli.talk import CliError

TOKEN_ENV = "CERTIMATCH_TOKEN"

#: A token file is read up to this size: a token is a line, not a document.
TOKEN_FILE_BYTES = 64 * 1024

#: Options whose value may be a secret: --token, the prefixes argparse accepts for it, and
#: misspellings of it (argparse quotes those back as unrecognized arguments).
_SECRET_START = "--tok"


class Secret:
    """A string that is not shown by ``repr``, ``str`` or a format string."""

    __slots__ = ("_value",)

    def __init__(self, value: str) -> None:
        self._value = value

    def reveal(self) -> str:
        """The token itself, for the ``Authorization`` header and nothing else."""
        return self._value

    def __repr__(self) -> str:
        return "Secret('<hidden>')"

    __str__ = __repr__

    def __format__(self, spec: str) -> str:
        return repr(self)


def _unusable(text: str) -> str | None:
    """Why ``text`` cannot be a bearer token in an HTTP header, or None when it can."""
    if not text:
        return "it is empty"
    # Visible ASCII only: a space, a line break or a control character would split or end
    # the header (and requests would echo the header value in its error).
    if not all("!" <= ch <= "~" for ch in text):
        return "it holds a space, a line break or a character outside visible ASCII"
    return None


def token_argument(text: str) -> Secret:
    """argparse type of --token; its error names the option, never the value."""
    why = _unusable(text)
    if why is not None:
        # ArgumentTypeError: argparse prints this message instead of the rejected value.
        raise argparse.ArgumentTypeError(f"not a usable bearer token: {why}")
    return Secret(text)


def read_token_file(name: str) -> Secret:
    """The first line of ``name`` that is neither blank nor a ``#`` comment.

    A regular file that every user of the machine may read is refused, as ssh refuses such
    a private key: the token in it is no longer a secret. Pipes (``<(command)``) and
    devices are read as they are.
    """
    path = Path(name)
    try:
        with path.open("rb") as f:
            info = os.fstat(f.fileno())
            raw = f.read(TOKEN_FILE_BYTES)
    except OSError as e:
        raise CliError(f"cannot read --token-file {name}: {e.strerror or e}") from None
    if os.name == "posix" and stat.S_ISREG(info.st_mode) and info.st_mode & stat.S_IROTH:
        raise CliError(f"--token-file {name} can be read by every user (mode "
                       f"{stat.S_IMODE(info.st_mode):03o}); make it private with "
                       f"chmod 600 {name}")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise CliError(f"--token-file {name} is not UTF-8 text") from None
    for line in text.splitlines():
        token = line.strip()
        if not token or token.startswith("#"):
            continue
        why = _unusable(token)
        if why is not None:
            raise CliError(f"--token-file {name}: its first line is not a usable bearer "
                           f"token: {why}")
        return Secret(token)
    raise CliError(f"--token-file {name} holds no token (only blank lines and # comments)")


def resolve_token(args: argparse.Namespace) -> Secret | None:
    """--token, else --token-file, else $CERTIMATCH_TOKEN, else None (no header sent)."""
    given: Secret | None = getattr(args, "token", None)
    if given is not None:
        return given
    file: str | None = getattr(args, "token_file", None)
    if file is not None:
        return read_token_file(file)
    value = os.environ.get(TOKEN_ENV, "").strip()
    if not value:
        return None
    why = _unusable(value)
    if why is not None:
        raise CliError(f"${TOKEN_ENV} is not a usable bearer token: {why}")
    return Secret(value)


def redact_secrets(message: str, argv: Sequence[str]) -> str:
    """``message`` with every value given to a secret option in ``argv`` replaced.

    argparse quotes the arguments it could not use ("unrecognized arguments: ..."), which
    would print a token given to a misspelt or misplaced --token. The value of every option
    starting with ``--tok`` is hidden, --token-file's path included: a small loss.
    """
    secrets: list[str] = []
    for i, arg in enumerate(argv):
        name, eq, value = arg.partition("=")
        if not name.startswith(_SECRET_START):
            continue
        if eq:
            secrets.append(value)
        elif i + 1 < len(argv):
            secrets.append(argv[i + 1])
    for secret in sorted(filter(None, secrets), key=len, reverse=True):
        message = message.replace(secret, "<hidden>")
    return message
