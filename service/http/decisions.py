"""The decision log over HTTP: checkpoints, proofs, records, pages and re-verification.

``GET /v1/log/checkpoint``                   the latest signed checkpoint
``GET /v1/log/consistency?from=M&to=N``      RFC 9162 consistency proof between sizes
``GET /v1/decisions/{id}``                   a record with its inclusion proof
``GET /v1/decisions?after=ID&limit=N&caller=NAME``   a page, in log order
``POST /v1/decisions/{id}/verify``           the record re-checked, ``{"valid", "checks"}``

Thin views: the store (``service.records``) does the work; query parameters are read
here and refused with 400 ``invalid-parameter`` naming the parameter; an unknown id is a
404 problem document.
"""

from __future__ import annotations

from typing import Any

import orjson
from flask import Blueprint, Response, request

from service.errors import BadParameter, ServiceError
from service.http.body import current_recorder, current_settings, json_response
from service.records.audit import verify_decision
from service.records.errors import LogDamaged
from service.records.model import MAX_CALLER, StoredDecision
from service.records.reads import MAX_PAGE
from service.solve.pipeline import recheck_stored

__all__ = ["DEFAULT_PAGE", "UnknownDecision", "decisions_bp"]

decisions_bp = Blueprint("decisions", __name__)

#: Decisions in a page of GET /v1/decisions when ``limit`` is not given.
DEFAULT_PAGE = 100
#: Longest decision id looked up (ids are UUIDs, 36 characters).
MAX_ID = 64


class UnknownDecision(ServiceError):
    """No decision of the log has this id."""

    status = 404
    slug = "unknown-decision"
    title = "Unknown decision"


def _whole(name: str, low: int, high: int | None = None,
           default: int | None = None) -> int:
    raw = request.args.get(name)
    if raw is None:
        if default is None:
            raise BadParameter(name, "is required")
        return default
    allowed = (f"must be a whole number from {low} to {high}" if high is not None
               else f"must be a whole number of at least {low}")
    if not (raw.isascii() and raw.isdigit()) or len(raw) > 18:
        raise BadParameter(name, f"{allowed}, not {raw[:40]!r}")
    value = int(raw)
    if value < low or (high is not None and value > high):
        raise BadParameter(name, f"{allowed}, not {value}")
    return value


def _text(name: str, longest: int) -> str | None:
    raw = request.args.get(name)
    if raw is not None and not 0 < len(raw) <= longest:
        raise BadParameter(name, f"must be 1 to {longest} characters")
    return raw


def _no_other_parameters(*known: str) -> None:
    unknown = sorted(set(request.args) - set(known))
    if unknown:
        raise BadParameter(unknown[0], f"is not a parameter of this route (it takes "
                           f"{', '.join(known) or 'none'})")


def _record(decision_id: str) -> StoredDecision:
    store, _ = current_recorder().reader()
    record = store.get(decision_id) if len(decision_id) <= MAX_ID else None
    if record is None:
        raise UnknownDecision(f"no decision of the log has the id {decision_id[:MAX_ID]!r}")
    return record


def _body(record: StoredDecision, name: str) -> Any:
    raw = getattr(record, name)
    if raw is None:
        return None
    try:
        return orjson.loads(raw)
    except orjson.JSONDecodeError:
        raise LogDamaged(f"the stored {name} of decision {record.decision.id} is not JSON: "
                         "the record was changed; run certimatch audit check") from None


@decisions_bp.get("/v1/log/checkpoint")
def checkpoint() -> Response:
    _no_other_parameters()
    store, signer = current_recorder().reader()
    return json_response(store.checkpoint(signer).to_dict())


@decisions_bp.get("/v1/log/consistency")
def consistency() -> Response:
    _no_other_parameters("from", "to")
    store, _ = current_recorder().reader()
    size = store.head()[0]
    new = _whole("to", 0, size, default=size)
    old = _whole("from", 0, new)
    try:
        hashes = store.consistency_proof(old, new)
    except ValueError as e:       # the log moved between the two reads: cannot shrink
        raise BadParameter("to", str(e)) from None
    return json_response({"from": old, "to": new, "hashes": [h.hex() for h in hashes]})


@decisions_bp.get("/v1/decisions/<decision_id>")
def decision(decision_id: str) -> Response:
    _no_other_parameters()
    record = _record(decision_id)
    store, signer = current_recorder().reader()
    signed = store.checkpoint(signer)
    index = record.decision.log_index
    assert index is not None
    proof = store.inclusion_proof(index, signed.size)
    return json_response({
        "decision": record.decision.to_dict(),
        "problem": _body(record, "problem"),
        "answer": _body(record, "answer"),
        "inclusion_proof": {"log_index": index, "tree_size": signed.size,
                            "hashes": [h.hex() for h in proof]},
        "checkpoint": signed.to_dict(),
    })


@decisions_bp.get("/v1/decisions")
def decisions() -> Response:
    _no_other_parameters("after", "limit", "caller")
    limit = _whole("limit", 1, MAX_PAGE, default=DEFAULT_PAGE)
    after = _text("after", MAX_ID)
    caller = _text("caller", MAX_CALLER)
    store, _ = current_recorder().reader()
    try:
        page = store.page(after=after, limit=limit, caller=caller)
    except LookupError as e:
        raise BadParameter("after", str(e)) from None
    full = len(page) == limit
    return json_response({"decisions": [d.to_dict() for d in page],
                          "next": page[-1].id if full else None})


@decisions_bp.post("/v1/decisions/<decision_id>/verify")
def verify(decision_id: str) -> Response:
    _no_other_parameters()
    _record(decision_id)                          # 404 before any work
    store, signer = current_recorder().reader()
    settings = current_settings()
    result = verify_decision(store, signer, decision_id,
                             lambda problem, answer: recheck_stored(problem, answer, settings))
    if result is None:                            # cannot happen: records are never deleted
        raise UnknownDecision(f"no decision of the log has the id {decision_id!r}")
    return json_response(result)
