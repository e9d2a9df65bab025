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
    """The request computed longer than its time limit; nothing of it is answered."""

    status = 503
    slug = "time-limit"
    title = "Time limit reached"
