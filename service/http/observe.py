"""What operators see: Prometheus metrics, one JSON log line per request, a request id.

Metrics use prometheus_client. Under gunicorn every worker is its own process, so the
counters live in per-process files under ``PROMETHEUS_MULTIPROC_DIR`` (set by
``deploy/gunicorn.conf.py`` before any worker starts) and ``/metrics`` adds them up; in a
single process (tests, the Flask test client, ``certimatch solve --local``) they live in
the default registry. prometheus_client picks its mode when it is first imported, so it
is imported here only when the first app is built, never at module import: the gunicorn
master imports this module for its log formatter before it creates that directory.

Logs are JSON lines. :func:`configure_logging` installs the handler; the server process
calls it (``deploy/gunicorn.conf.py``), while ``create_app`` leaves the process's logging
alone, so that embedding the app (tests, the CLI's ``--local``) prints nothing extra.
A request line holds method, path, status, duration, byte counts and the request id;
never a body, a query string or a header, so tokens and problem data stay out of logs.
"""

from __future__ import annotations

import json
import logging
import re
import sys
import time
import uuid
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime
from functools import cache
from typing import IO, Any

import orjson
from flask import Flask, Request, Response, g, has_request_context, request

REQUEST_ID_HEADER = "X-Request-ID"
#: The Prometheus text exposition format every Prometheus release reads; the names here
#: need none of the escaping that later versions of the format add.
METRICS_CONTENT_TYPE = "text/plain; version=0.0.4; charset=utf-8"
REQUEST_ID_MAX = 128
#: Loggers that get the JSON handler: the request log and the modules of the service.
LOGGERS = ("certimatch", "service", "schemas")

log = logging.getLogger("certimatch")

# 1 to 128 characters from space to tilde, not beginning or ending with a space (README,
# "Observe"): anything else (control characters, other encodings, an empty or over-long
# value) could forge or break log lines, so such an id is replaced, never trimmed or cut.
_CLIENT_ID = re.compile(rf"[\x21-\x7e](?:[\x20-\x7e]{{0,{REQUEST_ID_MAX - 2}}}[\x21-\x7e])?")

#: Solve time buckets in seconds: a 1 x 1 problem takes about a millisecond, the largest
#: allowed ones a minute or two (the worker timeout is 120 s by default).
SOLVE_SECONDS_BUCKETS = (0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0,
                         2.5, 5.0, 10.0, 30.0, 60.0, 120.0)
#: Problem size buckets (cells of a matrix or arcs of a list): powers of ten up to past
#: the default limits (16 million cells, 2 million arcs).
PROBLEM_SIZE_BUCKETS = (1.0, 10.0, 100.0, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8)


def request_id_from(raw: str | None) -> str:
    """The client's ``X-Request-ID`` exactly as it came when it is safe to log and echo,
    else a fresh one (32 lower-case hexadecimal digits)."""
    if raw is not None and _CLIENT_ID.fullmatch(raw):
        return raw
    return uuid.uuid4().hex


# --- logging ----------------------------------------------------------------------------

class JsonFormatter(logging.Formatter):
    """One JSON object per record: time, level, logger, message, pid, request id, fields.

    Fields come from ``extra={"event": {...}}``; inside a request the request id is added
    to every record, so an error logged deep in the pipeline can be joined to its request.
    """

    def format(self, record: logging.LogRecord) -> str:
        doc: dict[str, Any] = {
            "time": datetime.fromtimestamp(record.created, UTC).isoformat(
                timespec="milliseconds").replace("+00:00", "Z"),
            "level": record.levelname.lower(),
            "logger": record.name,
            "message": record.getMessage(),
            "pid": record.process,
        }
        if has_request_context() and "request_id" in g:
            doc["request_id"] = g.request_id
        event = getattr(record, "event", None)
        if isinstance(event, dict):
            doc.update(event)
        if record.exc_info:
            doc["exception"] = self.formatException(record.exc_info)
        # default=str: a stray object in an event must not cost the log line. orjson, as
        # for the answers: a tenth of json's time on the line written for every request.
        try:
            return orjson.dumps(doc, default=str, option=orjson.OPT_NON_STR_KEYS).decode()
        except orjson.JSONEncodeError:      # beyond orjson: an integer past 64 bits...
            return json.dumps(doc, ensure_ascii=False, default=str)


def configure_logging(level: str = "info", stream: IO[str] | None = None) -> None:
    """Send the service's loggers to ``stream`` (stderr) as JSON lines at ``level``.

    Idempotent: calling it again replaces the handler it installed before. The loggers stop
    propagating, so that a root handler (gunicorn's, a framework's) does not print each
    line a second time in its own format.
    """
    handler = logging.StreamHandler(stream if stream is not None else sys.stderr)
    handler.setFormatter(JsonFormatter())
    handler.certimatch = True  # type: ignore[attr-defined]
    for name in LOGGERS:
        logger = logging.getLogger(name)
        for old in [h for h in logger.handlers if getattr(h, "certimatch", False)]:
            logger.removeHandler(old)
        logger.addHandler(handler)
        logger.setLevel(level.upper())
        logger.propagate = False


# --- metrics ----------------------------------------------------------------------------

@dataclass(frozen=True)
class Metrics:
    """The service's metric objects (prometheus_client types, untyped there)."""

    requests: Any
    solves: Any
    solve_seconds: Any
    problem_size: Any
    certificate_failures: Any
    verifications: Any


@cache
def metrics() -> Metrics:
    """The metric objects, created on first use (see the module docstring for why)."""
    from prometheus_client import Counter, Histogram

    return Metrics(
        requests=Counter("certimatch_http_requests", "HTTP requests answered, by route "
                         "template, method and status", ["route", "method", "status"]),
        solves=Counter("certimatch_solves", "problems solved and certified, by shape and "
                       "solver", ["shape", "solver"]),
        solve_seconds=Histogram("certimatch_solve_duration_seconds", "time from the parsed "
                                "body to the self-checked answer of a solved problem",
                                ["shape", "solver"], buckets=SOLVE_SECONDS_BUCKETS),
        problem_size=Histogram("certimatch_problem_size", "size of each solved problem: "
                               "cells of its cost matrix (rows x columns) or arcs of its "
                               "arc list", ["measure"], buckets=PROBLEM_SIZE_BUCKETS),
        certificate_failures=Counter("certimatch_certificate_failures", "answers refused "
                                     "by the service's own optimality check (a bug)"),
        verifications=Counter("certimatch_verifications", "answers checked by /v1/verify, "
                              "by verdict", ["valid"]),
    )


def multiprocess_mode() -> bool:
    """Whether the metrics live in per-process files (as decided when prometheus_client
    was imported), so that /metrics must add the files up."""
    from prometheus_client import values

    return bool(getattr(values.ValueClass, "_multiprocess", False))


def exposition() -> bytes:
    """Every metric in the Prometheus text exposition format."""
    from prometheus_client import REGISTRY, CollectorRegistry, generate_latest
    from prometheus_client.multiprocess import MultiProcessCollector

    if multiprocess_mode():
        # A fresh registry per scrape, as prometheus_client's multiprocess mode requires:
        # the collector reads every worker's file at collect time.
        registry = CollectorRegistry()
        MultiProcessCollector(registry)
        return generate_latest(registry)
    return generate_latest(REGISTRY)


def problem_size(body: Any) -> tuple[str, int] | None:
    """("cells", rows x columns) or ("arcs", count) of a problem the service accepted."""
    if not isinstance(body, dict):
        return None
    arcs, costs = body.get("arcs"), body.get("costs")
    if isinstance(arcs, list):
        return "arcs", len(arcs)
    if isinstance(arcs, dict) and isinstance(arcs.get("from"), list):   # the columnar form
        return "arcs", len(arcs["from"])
    if isinstance(costs, list) and costs and isinstance(costs[0], list):
        # The matrix was checked rectangular before it was solved (MAX_CELLS counts the same).
        return "cells", len(costs) * len(costs[0])
    return None


@cache
def _child(metric: Any, *labels: str) -> Any:
    """The child of ``metric`` with these label values, looked up once per process.

    prometheus_client's ``labels()`` checks, converts and locks on every call; the label
    values here are few (route templates, methods, statuses, shapes), so each request
    after the first finds its child in this cache instead.
    """
    return metric.labels(*labels)


def count_solve(answer: dict[str, Any], body: Any, seconds: float) -> None:
    m = metrics()
    shape, solver = str(answer.get("shape", "")), str(answer.get("solver", ""))
    _child(m.solves, shape, solver).inc()
    _child(m.solve_seconds, shape, solver).observe(seconds)
    size = problem_size(body)
    if size is not None:
        _child(m.problem_size, size[0]).observe(size[1])


def count_certificate_failure() -> None:
    metrics().certificate_failures.inc()


def count_verification(valid: bool) -> None:
    _child(metrics().verifications, "true" if valid else "false").inc()


def _metrics_view() -> Response:
    return Response(exposition(), content_type=METRICS_CONTENT_TYPE)


# --- Flask wiring -----------------------------------------------------------------------

def _start() -> None:
    g.request_id = request_id_from(request.headers.get(REQUEST_ID_HEADER))
    g.started = time.perf_counter()


def _finisher(count: bool) -> Callable[[Response], Response]:
    """The after-request hook: the id on the answer, the count, the log line."""
    requests = metrics().requests if count else None

    def _finish(response: Response) -> Response:
        # Runs for error answers too (Flask finalises handled errors the same way), so every
        # answer, 404s and 500s included, carries the id and is counted and logged once.
        # The request and g are taken from their proxies once (Flask documents
        # _get_current_object for this): each proxy access is a context lookup.
        req: Request = request._get_current_object()  # type: ignore[attr-defined]
        state = g._get_current_object()
        request_id = state.get("request_id") or request_id_from(None)
        response.headers[REQUEST_ID_HEADER] = request_id
        started = state.get("started")
        duration_ms = (time.perf_counter() - started) * 1000 if started is not None else 0.0
        rule = req.url_rule
        route = rule.rule if rule is not None else "unmatched"  # raw paths would explode labels
        status = response.status_code
        if requests is not None:
            _child(requests, route, req.method, str(status)).inc()
        log.info("request", extra={"event": {
            "method": req.method,
            "path": req.path,            # without the query string, which may hold secrets
            "route": route,
            "status": status,
            "duration_ms": round(duration_ms, 3),
            "bytes_in": req.content_length or 0,
            "bytes_out": response.calculate_content_length() or 0,
            "request_id": request_id,
        }})
        return response

    return _finish


def init_app(app: Flask, metrics_enabled: bool) -> None:
    """Request ids and request logging always; counting and ``/metrics`` when enabled."""
    app.before_request(_start)
    app.after_request(_finisher(metrics_enabled))
    if metrics_enabled:
        app.add_url_rule("/metrics", "metrics", _metrics_view, methods=["GET"])
