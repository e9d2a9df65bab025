"""The way to the service: over HTTP (with a bearer token and retries) or in this process."""

from __future__ import annotations

import argparse
import dataclasses
import ipaddress
import os
import sys
import zlib
from collections.abc import Callable, Mapping
from urllib.parse import urlsplit

import requests

from service.cli.credentials import Secret, resolve_token
from service.cli.retries import RetryPolicy, retrying
from service.cli.talk import (
    DEFAULT_URL,
    URL_ENV,
    CliError,
    Post,
    Reply,
    Unreachable,
    _reason,
    shown_url,
)

#: The policy the command line uses; tests replace it to inject the sleep and the dice.
DEFAULT_POLICY = RetryPolicy()
#: Bodies from this size on go gzip-compressed to a server on another machine (--gzip).
GZIP_BYTES = 1_000_000
#: gzip level of bodies: 1 packs JSON to about a fifth at several times the speed of 6.
GZIP_LEVEL = 1


def on_this_machine(base_url: str) -> bool:
    """Whether ``base_url`` names a loopback host, where compressing saves no time."""
    host = urlsplit(base_url).hostname or ""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def gzip_wanted(choice: bool | None, base_url: str | None, size: int) -> bool:
    """--gzip (True), --no-gzip (False), or by default: a body of GZIP_BYTES or more sent
    to another machine (``base_url`` None is this process)."""
    if choice is not None:
        return choice
    return base_url is not None and size >= GZIP_BYTES and not on_this_machine(base_url)


def _gzipping(post: Post, choice: bool | None, base_url: str | None) -> Post:
    """``post`` sending each body gzip-compressed (Content-Encoding) where
    :func:`gzip_wanted` says so; compressed once, however often it is retried."""

    def send(path: str, body: bytes, headers: Mapping[str, str] | None = None) -> Reply:
        if not gzip_wanted(choice, base_url, len(body)):
            return post(path, body, headers)
        packer = zlib.compressobj(GZIP_LEVEL, zlib.DEFLATED, 16 + zlib.MAX_WBITS)
        return post(path, packer.compress(body) + packer.flush(),
                    {**(headers or {}), "Content-Encoding": "gzip"})

    return send


def _http_post(base_url: str, timeout: float, token: Secret | None = None) -> Post:
    """POST to ``base_url``: :class:`Unreachable` when no HTTP answer comes back at all.

    Answers come back gzip-compressed when the server does so: requests asks for it and
    inflates them.
    """
    base = base_url.rstrip("/")
    shown = shown_url(base)
    fixed = {"Content-Type": "application/json"}
    if token is not None:
        fixed["Authorization"] = f"Bearer {token.reveal()}"

    def post(path: str, body: bytes, headers: Mapping[str, str] | None = None) -> Reply:
        try:
            r = requests.post(base + path, data=body, timeout=timeout,
                             headers={**fixed, **(headers or {})})
        except requests.exceptions.SSLError as e:
            # A certificate the client refuses is refused again on the next attempt.
            raise CliError(f"cannot reach {shown}: TLS failed ({_reason(e)})") from None
        except requests.Timeout:
            raise Unreachable(f"cannot reach {shown}: no answer within {timeout:g} s "
                              "(--timeout)") from None
        except (requests.ConnectionError, requests.exceptions.ChunkedEncodingError) as e:
            raise Unreachable(f"cannot reach {shown}: {_reason(e)}") from None
        except requests.RequestException as e:
            # A malformed URL and the like: no retry makes it right.
            raise CliError(f"cannot reach {shown}: {_reason(e)}") from None
        # Decoded here rather than by requests, which would guess a charset for JSON.
        return Reply(r.status_code, r.headers.get("Content-Type", ""),
                     r.content.decode("utf-8", errors="replace"), r.headers.get("Retry-After"))

    return post


def _local_post() -> Post:
    # Imported here so that `serve` and remote `solve` never pay for numpy and scipy.
    from service.app import create_app

    try:
        # In this process nobody else can call the app: tokens configured for a server in
        # the environment (CERTIMATCH_TOKENS...) are left out rather than asked for.
        client = create_app({"TOKENS": None, "TOKENS_FILE": None}).test_client()
    except ValueError as e:  # a bad CERTIMATCH_* setting in the environment
        raise CliError(str(e)) from e

    def post(path: str, body: bytes, headers: Mapping[str, str] | None = None) -> Reply:
        r = client.post(path, data=body, content_type="application/json",
                        headers=dict(headers or {}))
        return Reply(r.status_code, r.content_type or "", r.get_data(as_text=True),
                     r.headers.get("Retry-After"))

    return post


def _say_unless_quiet(args: argparse.Namespace) -> Callable[[str], None]:
    quiet = bool(getattr(args, "quiet", False))

    def note(message: str) -> None:
        if not quiet:
            print(f"certimatch: {message}", file=sys.stderr, flush=True)

    return note


def _target(args: argparse.Namespace) -> tuple[Post, str | None]:
    """The way to the service, and its URL for progress lines (None: this process).

    In this process there is no connection to lose, so nothing is retried: a 503 with
    Retry-After from the app itself ends the command at once with exit 4.
    """
    gzip = getattr(args, "gzip", None)
    if args.local:
        return _gzipping(_local_post(), gzip, None), None
    base = (args.url or os.environ.get(URL_ENV) or DEFAULT_URL).rstrip("/")
    retries = getattr(args, "retries", DEFAULT_POLICY.retries)
    policy = dataclasses.replace(DEFAULT_POLICY, retries=retries)
    post = retrying(_http_post(base, args.timeout, resolve_token(args)), policy,
                    _say_unless_quiet(args))
    return _gzipping(post, gzip, base), shown_url(base)


def _poster(args: argparse.Namespace) -> Post:
    return _target(args)[0]
