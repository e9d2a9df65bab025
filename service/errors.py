"""The exception family of the service; each carries its HTTP status and problem type.

Every error the service answers with is an RFC 9457 problem document built by
:meth:`ServiceError.problem`, so callers parse one shape whatever went wrong.
"""

from __future__ import annotations

from typing import Any

PROBLEM_TYPE_BASE = "urn:certimatch:problem:"
PROBLEM_CONTENT_TYPE = "application/problem+json"


def problem_document(status: int, title: str, detail: str, slug: str | None = None,
                     **extra: Any) -> dict[str, Any]:
    """One RFC 9457 body; ``slug`` None means the plain HTTP meaning (``about:blank``)."""
    body: dict[str, Any] = {
        "type": PROBLEM_TYPE_BASE + slug if slug else "about:blank",
        "title": title,
        "status": status,
        "detail": detail,
    }
    body.update(extra)
    return body


class ServiceError(Exception):
    """Base of every error the service answers with; subclasses fix status and type."""

    status = 500
    slug = "internal-error"
    title = "Internal error"

    def __init__(self, detail: str, *, headers: dict[str, str] | None = None,
                 **extra: Any) -> None:
        super().__init__(detail)
        self.detail = detail
        self.extra = extra
        self.headers = headers or {}

    def problem(self) -> dict[str, Any]:
        return problem_document(self.status, self.title, self.detail, self.slug, **self.extra)


class MalformedBody(ServiceError):
    """The body is not JSON (syntax, encoding, nesting depth, number range)."""

    status = 400
    slug = "malformed-json"
    title = "Malformed JSON body"


class UnsupportedMediaType(ServiceError):
    status = 415
    slug = "unsupported-media-type"
    title = "Unsupported media type"


class InvalidProblem(ServiceError):
    """Fields that break the wire format; ``errors`` lists every one with its JSON Pointer."""

    status = 422
    slug = "invalid-problem"
    title = "Invalid problem"

    def __init__(self, errors: list[dict[str, str]], detail: str | None = None) -> None:
        if detail is None:
            first = errors[0]
            more = f" (and {len(errors) - 1} more)" if len(errors) > 1 else ""
            detail = f"{first['pointer'] or '/'}: {first['detail']}{more}"
        super().__init__(detail, errors=errors)
        self.errors = errors


class TooLarge(ServiceError):
    """The problem is within the body limit but over a size limit of the server."""

    status = 413
    slug = "too-large"
    title = "Problem too large"


class OutOfRange(ServiceError):
    """Numbers whose sums would leave exact 64-bit (or exact JSON) arithmetic."""

    status = 422
    slug = "out-of-range"
    title = "Numbers out of exact range"


class Infeasible(ServiceError):
    """Hard demand cannot all be met and the caller asked to reject that."""

    status = 422
    slug = "infeasible"
    title = "Hard demand cannot be met"


class PinsInfeasible(ServiceError):
    """The pins (``fixed``) alone exceed a supply, a demand or a capacity."""

    status = 422
    slug = "pins-infeasible"
    title = "The pins cannot be routed"


class Unbounded(ServiceError):
    """A cycle of unbounded arcs has negative cost: the cost can fall without limit."""

    status = 422
    slug = "unbounded"
    title = "Unbounded problem"


class CertificateFailure(ServiceError):
    """The service's own check rejected an answer: a bug, never sent as a result."""

    status = 500
    slug = "certificate-failure"
    title = "Answer failed its optimality check"


class Unauthorized(ServiceError):
    """No bearer token, or one the service does not know (RFC 6750)."""

    status = 401
    slug = "unauthorized"
    title = "Bearer token required"


class TimeLimitExceeded(ServiceError):
    """The request ran out of its own ``time_limit_s`` while it had the CPU: the same
    limit runs out again (a retry needs a longer limit or a smaller problem), so the answer
    is a 4xx without ``Retry-After``. Nothing of the request is answered.

    The time limit raises this (``service.solve.deadline``); the HTTP edge, which knows
    whether the limit was the request's own or the server's cap, turns the latter into a
    :class:`ServerTimeLimit` (:meth:`for_server`).
    """

    status = 422
    slug = "time-limit"
    title = "Time limit of the request reached"

    def __init__(self, detail: str, *, what: str, limit_s: float, **extra: Any) -> None:
        super().__init__(detail, time_limit_s=limit_s, **extra)
        self.what = what
        self.limit_s = limit_s

    def for_server(self, asked: float | None) -> ServerTimeLimit:
        """The same event when the limit was the server's ``MAX_TIME_LIMIT_S``."""
        more = (f" (the request asked for {asked:g} s, more than the server allows)"
                if asked is not None else "")
        return ServerTimeLimit(
            f"{self.what} took longer than the server's limit of {self.limit_s:g} s"
            f"{more}; a request cannot raise that limit, so the same problem runs out again: "
            "send a smaller problem, or ask the operator for a higher MAX_TIME_LIMIT_S",
            what=self.what, limit_s=self.limit_s)


class ServerTimeLimit(TimeLimitExceeded):
    """The server's ``MAX_TIME_LIMIT_S`` ran out (the request asked for no limit, or for
    more): a request cannot raise it, and waiting does not shorten the work."""

    status = 422
    slug = "server-time-limit"
    title = "Time limit of the server reached"


class ServerBusy(ServiceError):
    """The time limit ran out because the request did not get the CPU (other work on the
    machine took most of it): the same request may finish later, so ``Retry-After``."""

    status = 503
    slug = "server-busy"
    title = "Server too busy to finish in time"


class BadParameter(ServiceError):
    """A query parameter or request header with a value the service does not take;
    ``parameter`` names it."""

    status = 400
    slug = "invalid-parameter"
    title = "Invalid parameter"

    def __init__(self, parameter: str, detail: str) -> None:
        super().__init__(f"{parameter}: {detail}", parameter=parameter)
        self.parameter = parameter
