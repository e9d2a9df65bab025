"""Retrying transient failures with exponential backoff, full jitter and Retry-After.

Transient, and so retried (then exit 4 once the retries are used up):

* no HTTP answer at all: the connection was refused, reset or closed early, or no answer
  came within ``--timeout`` (:class:`service.cli.talk.Unreachable`);
* an answer 502, 503 or 504 that carries a ``Retry-After`` header: the server (or a proxy
  in front of it) says it is overloaded and when to come back.

Everything else is permanent and is not retried: every other status, and a 502, 503 or
504 *without* ``Retry-After`` (the service sends a time limit the request asked for itself
that way: the same request would fail the same way again).

Waits follow "full jitter" (Brooker, "Exponential Backoff And Jitter", AWS Architecture
Blog, 2015): before retry *k* (0, 1, ...) the command sleeps a uniform random time in
``[0, min(cap, base * 2**k)]``; when the server asked for longer with ``Retry-After``
(seconds, or an HTTP date, RFC 9110 section 10.2.3) it waits that long instead, but never
longer than ``max_wait``.
"""

from __future__ import annotations

import random
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from email.utils import parsedate_to_datetime

from service.cli.talk import Post, Reply, Unreachable, transient_reply

DEFAULT_RETRIES = 3
BASE_SECONDS = 0.5
CAP_SECONDS = 8.0
MAX_WAIT_SECONDS = 60.0


def retry_after_seconds(value: str | None, now: float) -> float | None:
    """Seconds to wait from a Retry-After value (delay-seconds or an HTTP date).

    ``now`` is the current Unix time, for a date. None when the value is absent or
    unreadable; never negative.
    """
    text = (value or "").strip()
    if not text:
        return None
    if text.isdigit():
        return float(text)
    try:
        when = parsedate_to_datetime(text)
    except (TypeError, ValueError, IndexError):
        return None
    if when.tzinfo is None:       # RFC 9110 dates are GMT; a zone-less one is read as such
        return None
    return max(0.0, when.timestamp() - now)


@dataclass(frozen=True)
class RetryPolicy:
    """How often and how long to retry; the clock and the dice are injectable for tests."""

    retries: int = DEFAULT_RETRIES
    base: float = BASE_SECONDS
    cap: float = CAP_SECONDS
    max_wait: float = MAX_WAIT_SECONDS
    sleep: Callable[[float], None] = field(default=time.sleep, repr=False)
    random: Callable[[], float] = field(default=random.random, repr=False)
    now: Callable[[], float] = field(default=time.time, repr=False)

    def wait(self, retry: int, retry_after: str | None) -> float:
        """Seconds to sleep before retry number ``retry`` (0 for the first)."""
        backoff = self.random() * min(self.cap, self.base * 2.0 ** retry)
        asked = retry_after_seconds(retry_after, self.now())
        if asked is not None and asked > backoff:
            backoff = asked
        return min(backoff, self.max_wait)


def _why(reply: Reply) -> str:
    return f"answered {reply.status} with Retry-After: {reply.retry_after}"


def retrying(post: Post, policy: RetryPolicy, note: Callable[[str], None]) -> Post:
    """``post`` that retries transient failures under ``policy``; ``note`` hears each retry.

    The same path, body and headers are sent on every attempt, so a solve keeps its
    ``Idempotency-Key``. Once the retries are used up, a transient reply is returned as it
    is (the caller maps it to exit 4) and a failed connection raises its
    :class:`Unreachable`, whose message counts the attempts.
    """
    def post_again(path: str, body: bytes, headers: Mapping[str, str] | None = None) -> Reply:
        attempts = policy.retries + 1
        for attempt in range(attempts):
            last = attempt == attempts - 1
            try:
                reply = post(path, body, headers)
            except Unreachable as e:
                if last:
                    tried = f" (tried {attempts} times)" if attempts > 1 else ""
                    raise Unreachable(f"{e}{tried}") from e
                seconds, why = policy.wait(attempt, None), str(e)
            else:
                if last or not transient_reply(reply):
                    return reply
                seconds, why = policy.wait(attempt, reply.retry_after), _why(reply)
            note(f"{path}: {why}; retry {attempt + 1} of {policy.retries} in {seconds:.1f} s")
            policy.sleep(seconds)
        raise AssertionError("unreachable: the last attempt returns or raises")

    return post_again
