"""Bearer-token authentication (RFC 6750) for every route but the probes.

Tokens come from ``CERTIMATCH_TOKENS`` and ``CERTIMATCH_TOKENS_FILE``. Only their SHA-256
digests are kept; a presented token is hashed and compared with every digest in constant
time, so neither the comparison nor the number of tokens leaks through timing. With no
token configured the service is open, which ``deploy/gunicorn.conf.py`` allows on a
loopback address only.

Each token has a caller label, written into the decisions it asks for: the name beside
it in the tokens file (``<token or sha256:digest> <name>``), else ``sha256:`` and the
first 12 hex digits of its digest. The token itself is never written anywhere.
"""

from __future__ import annotations

import hashlib
import hmac
import ipaddress
import re
from collections.abc import Iterable
from pathlib import Path

from flask import Flask, g, request

from service.errors import Unauthorized
from service.settings import MIN_TOKEN_LENGTH, Settings

__all__ = ["TokenSet", "caller_label", "check_exposure", "current_caller", "init_app",
           "load_tokens"]

#: Routes that answer without a token: orchestrators probe them unauthenticated.
OPEN_PATHS = frozenset({"/healthz", "/readyz"})

_DIGEST = re.compile(r"sha256:([0-9a-fA-F]{64})")
#: A caller name in the tokens file: letters, digits and . _ - @, up to 64 characters.
_NAME = re.compile(r"[A-Za-z0-9._@-]{1,64}")
#: Hex digits of a token's digest in the label of a token without a name.
LABEL_DIGITS = 12
_REALM = 'Bearer realm="certimatch"'


def _digest(token: str) -> bytes:
    return hashlib.sha256(token.encode("utf-8")).digest()


def caller_label(digest: bytes, name: str | None = None) -> str:
    """The caller label of a token: its name, else the start of its SHA-256 digest."""
    return name if name else "sha256:" + digest.hex()[:LABEL_DIGITS]


class TokenSet:
    """The accepted tokens, as SHA-256 digests, each with its caller label."""

    def __init__(self, digests: list[bytes], names: list[str | None] | None = None) -> None:
        self._digests = tuple(digests)
        names = names or [None] * len(digests)
        self._labels = tuple(caller_label(d, n) for d, n in zip(digests, names, strict=True))

    def __bool__(self) -> bool:
        return bool(self._digests)

    def __len__(self) -> int:
        return len(self._digests)

    def match(self, token: str) -> str | None:
        """The caller label of ``token``, or None when it is not accepted."""
        presented = _digest(token)
        found = -1
        for i, known in enumerate(self._digests):   # no early exit: same time for all
            same = hmac.compare_digest(presented, known)
            found = i if same and found < 0 else found
        return self._labels[found] if found >= 0 else None

    def accepts(self, token: str) -> bool:
        return self.match(token) is not None


def load_tokens(settings: Settings) -> TokenSet:
    """The tokens of the settings and of the token file; ValueError naming a bad line."""
    digests = [_digest(t) for t in settings.tokens]
    names: list[str | None] = [None] * len(digests)
    if settings.tokens_file:
        path = Path(settings.tokens_file)
        try:
            lines = path.read_text(encoding="utf-8").splitlines()
        except OSError as e:
            raise ValueError(f"CERTIMATCH_TOKENS_FILE cannot be read: {e.strerror}") from None
        except UnicodeDecodeError:
            raise ValueError("CERTIMATCH_TOKENS_FILE is not UTF-8 text") from None
        for number, line in enumerate(lines, 1):
            words = line.split("#", 1)[0].split()
            if not words:
                continue
            text, name = words[0], words[1] if len(words) > 1 else None
            if len(words) > 2 or (name is not None and not _NAME.fullmatch(name)):
                raise ValueError(f"CERTIMATCH_TOKENS_FILE line {number}: after the token "
                                 "comes at most one caller name of letters, digits and "
                                 ". _ - @ (up to 64 characters)")
            match = _DIGEST.fullmatch(text)
            if match:
                digests.append(bytes.fromhex(match.group(1)))
            elif len(text) >= MIN_TOKEN_LENGTH and text.isprintable():
                digests.append(_digest(text))
            else:
                raise ValueError(f"CERTIMATCH_TOKENS_FILE line {number}: not a token of at "
                                 f"least {MIN_TOKEN_LENGTH} characters nor sha256:<64 hex>")
            names.append(name)
    return TokenSet(digests, names)


def current_caller() -> str | None:
    """The caller label of this request's token; None when the service has no tokens."""
    caller: str | None = g.get("certimatch_caller")
    return caller


def init_app(app: Flask, settings: Settings) -> TokenSet:
    """Require a bearer token on every route but the open ones, when tokens are set."""
    tokens = load_tokens(settings)
    if not tokens:
        return tokens
    open_paths = OPEN_PATHS | ({"/metrics"} if settings.metrics_public else set())

    @app.before_request
    def _require_token() -> None:
        if request.path in open_paths:
            return
        scheme, _, token = request.headers.get("Authorization", "").partition(" ")
        if scheme.lower() != "bearer" or not token.strip():
            raise Unauthorized("send Authorization: Bearer <token>",
                               headers={"WWW-Authenticate": _REALM})
        caller = tokens.match(token.strip())
        if caller is None:
            raise Unauthorized("the bearer token is not accepted", headers={
                "WWW-Authenticate": _REALM + ', error="invalid_token"'})
        g.certimatch_caller = caller

    return tokens


def _loopback(address: str) -> bool:
    if address.startswith("unix:") or address.startswith("fd://"):
        return True
    host = address.rsplit(":", 1)[0].strip("[]") if ":" in address else address
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False                        # a host name: could be any interface


def check_exposure(binds: Iterable[str], tokens: TokenSet, insecure: bool) -> str | None:
    """Refuse to listen beyond loopback with no tokens, unless ``insecure`` says so.

    Returns a warning to log when ``insecure`` lets an open service out; raises ValueError
    when it does not.
    """
    exposed = [b for b in binds if not _loopback(b)]
    if not exposed or tokens:
        return None
    where = ", ".join(exposed)
    if not insecure:
        raise ValueError(f"refusing to listen on {where} with no bearer tokens: set "
                         "CERTIMATCH_TOKENS or CERTIMATCH_TOKENS_FILE, or "
                         "CERTIMATCH_INSECURE=true (certimatch serve --insecure) to accept "
                         "an open service")
    return (f"listening on {where} with no bearer tokens (CERTIMATCH_INSECURE=true): "
            "anyone who reaches this address can use the service")
