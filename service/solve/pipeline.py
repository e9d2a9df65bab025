"""Solve and verify without HTTP: body dict in, answer dict out.

request -> schema -> network model -> dispatcher/engine -> certificate -> answer, and the
answer is loaded back through the verify schema and checked by the independent verifier
before it may leave. Flask never appears below this module.
"""

from __future__ import annotations

import gc
import logging
import time
from collections.abc import Iterator
from contextlib import contextmanager
from functools import partial
from typing import Any

from marshmallow import ValidationError

from schemas import AnswerSchema, ProblemSchema, VerifyRequestSchema, to_pointers
from service.check.verify import verify_answer
from service.errors import CertificateFailure, InvalidProblem, ServiceError
from service.network.build import build_network
from service.network.model import Network
from service.settings import Settings
from service.solve import dispatch
from service.solve.alternatives import alternatives_answer
from service.solve.answer import build_answer
from service.solve.bottleneck import solve_bottleneck, threshold_certificate
from service.solve.certificate import certify
from service.solve.deadline import deadline
from service.solve.prices_answer import add_prices
from service.solve.ranked import rank

log = logging.getLogger(__name__)

_problem_schema = ProblemSchema()
_answer_schema = AnswerSchema()
_verify_schema = VerifyRequestSchema()


def _load(schema: Any, body: Any) -> dict[str, Any]:
    try:
        return schema.load(body)
    except ValidationError as e:
        raise InvalidProblem(to_pointers(e.messages)) from None


def solve_body(body: Any, settings: Settings,
               timings: dict[str, float] | None = None) -> dict[str, Any]:
    """The 200 answer for a problem, or a ServiceError.

    ``timings``, when given, receives the seconds spent in each phase (for the benchmark).
    """
    clock = _Clock(timings)
    with request_scope(), deadline(time_limit(body, settings), "solving this problem"):
        data = clock.run("validate", _load, _problem_schema, body)
        net = clock.run("normalise", build_network, data, settings)
        if net.replans:
            # prices and alternatives are proven on the network without bounds or
            # parallel arcs
            asked = [key for key in ("prices", "alternatives") if data.get(key)]
            if asked:
                raise InvalidProblem([{"pointer": f"/{key}", "detail":
                                       f"{key} {data.get(key)!r} cannot be asked together "
                                       "with fixed, previous or load_costs (yet)"}
                                      for key in asked])
        if net.bottleneck:
            answer = _solve_bottleneck(net, clock)
            clock.run("self_verify", self_check, net, answer)
            return answer
        solution = clock.run("solve", dispatch.solve, net)
        cert = clock.run("certify", certify, net, solution)
        answer = clock.run("answer", build_answer, net, solution, cert)
        if data.get("prices"):
            clock.run("prices", add_prices, net, solution, cert, answer,
                      settings.max_prices_work)
        if data.get("alternatives"):
            k = data["alternatives"]
            ranked = clock.run("alternatives", rank, net, cert, solution.flow, k)
            answer.update(alternatives_answer(net, solution, cert, ranked, k))
        clock.run("self_verify", self_check, net, answer, data.get("alternatives"))
    return answer


def _solve_bottleneck(net: Network, clock: _Clock) -> dict[str, Any]:
    """The three stages of ``"objective": "bottleneck"``; the last one is certified on the
    pairs at or below the threshold (:mod:`service.solve.bottleneck`)."""
    result = clock.run("solve", solve_bottleneck, net)
    cert = clock.run("certify", certify, result.within, result.solution)
    answer = clock.run("answer", partial(build_answer, within=result.within), net,
                       result.solution, cert)
    answer["certificate"]["bottleneck"] = threshold_certificate(net, result)
    return answer


def time_limit(body: Any, settings: Settings) -> float:
    """The request's ``time_limit_s`` when it is a sensible number, capped by the server.

    An invalid value is reported by the schema; until then the server's cap applies.
    """
    asked: Any = body.get("time_limit_s") if isinstance(body, dict) else None
    cap = float(settings.max_time_limit_s)
    if isinstance(asked, int | float) and not isinstance(asked, bool) and 0 < asked < cap:
        return float(asked)
    return cap


@contextmanager
def request_scope() -> Iterator[None]:
    """Hold the cyclic garbage collector off while one request is worked on.

    A parsed body is millions of list entries; every full collection walks them all (0.1 s
    for 5 million cells) and allocation-heavy phases trigger several. The request's own
    objects are freed by reference counting when it ends; the collector resumes between
    requests.
    """
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


class _Clock:
    """Times each phase into a dict, or just runs it."""

    def __init__(self, timings: dict[str, float] | None) -> None:
        self.timings = timings

    def run(self, phase: str, fn: Any, *args: Any) -> Any:
        if self.timings is None:
            return fn(*args)
        start = time.perf_counter()
        try:
            return fn(*args)
        finally:
            self.timings[phase] = time.perf_counter() - start


def self_check(net: Network, answer: dict[str, Any], alternatives: int | None = None) -> None:
    """Refuse to let an answer leave unless the independent verifier accepts it
    (``alternatives``: how many next-best plans the request asked for)."""
    try:
        loaded = _answer_schema.load(answer)
    except ValidationError as e:
        log.error("answer does not match its own schema: %s", e.messages)
        raise CertificateFailure("the answer does not match its own schema") from None
    result = verify_answer(net, loaded, alternatives=alternatives)
    if not result["valid"]:
        failed = [c for c in result["checks"] if not c["passed"]]
        log.error("self-check failed: %s", failed)
        raise CertificateFailure(
            "the answer failed its own check: "
            + "; ".join(f"{c['name']}: {c['detail']}" for c in failed), checks=failed)


def verify_body(body: Any, settings: Settings) -> dict[str, Any]:
    """``{"valid", "checks"}`` for a problem plus an answer."""
    with request_scope(), deadline(time_limit(body, settings), "checking this answer"):
        data = _load(_verify_schema, body)
        answer = data.pop("answer")
        return verify_answer(build_network(data, settings), answer,
                             alternatives=data.get("alternatives"),
                             price_work=settings.max_prices_work)


def recheck_stored(problem: Any, answer: Any, settings: Settings) -> tuple[bool, str]:
    """A stored decision's answer re-checked against its stored problem by the independent
    verifier: (valid, what failed or that it holds). The decision store's audit takes this
    as its ``Reverify`` (the records room never imports the verifier itself)."""
    if not isinstance(problem, dict) or not isinstance(answer, dict):
        return False, "the stored problem and answer must be JSON objects"
    try:
        result = verify_body({**problem, "answer": answer}, settings)
    except ServiceError as e:
        return False, f"{e.title.lower()}: {e.detail}"
    failed = [c for c in result["checks"] if not c["passed"]]
    if result["valid"] and not failed:
        return True, f"the independent verifier passes all {len(result['checks'])} checks"
    return False, "; ".join(f"{c['name']}: {c['detail']}" for c in failed) or "not valid"
