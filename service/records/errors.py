"""Errors of the decision store, in the service's exception family."""

from __future__ import annotations

from service.errors import ServiceError

__all__ = ["IdempotencyKeyReused", "LogDamaged", "SchemaNotCurrent", "StoreUnavailable"]


class StoreUnavailable(ServiceError):
    """The database cannot be reached or refused the write; nothing was recorded."""

    status = 503
    slug = "store-unavailable"
    title = "Decision store unavailable"


class IdempotencyKeyReused(ServiceError):
    """An Idempotency-Key the caller already used for a different request body."""

    status = 422
    slug = "idempotency-key-reused"
    title = "Idempotency key reused"


class SchemaNotCurrent(RuntimeError):
    """The database's schema is not the one this version needs; the message says what
    to run. Raised at start-up, never during a request."""


class LogDamaged(ServiceError):
    """The stored log lacks a row its own head says it has (a deleted record or node):
    proofs cannot be made. Found by audit; never caused by the service itself."""

    status = 500
    slug = "log-damaged"
    title = "Decision log damaged"
