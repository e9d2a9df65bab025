"""gunicorn settings for certimatch.

Use: ``gunicorn -c deploy/gunicorn.conf.py 'service.app:create_app()'``.

Solving is CPU-bound numpy/OR-Tools work, so one synchronous worker per usable core is the
right shape: threads would only contend for the same core, and a slow solve must not block
other requests of the same worker's queue longer than needed.

Every value comes from a ``CERTIMATCH_*`` variable of the one settings table
(``service/settings.py``), read and checked here, in the master, before any worker starts:
a bad value stops gunicorn with a message naming the variable instead of a crash loop of
workers. Loading this file has no side effects (tests read it); directories, environment
and logging are set up by the ``on_starting`` hook.
"""

from __future__ import annotations

import logging
import math
import os
import shutil
import sys
import tempfile
from pathlib import Path
from typing import Any

from gunicorn import glogging

# Imported here, in the master, so that every worker -- and every worker recycled after
# max_requests -- starts with numpy, scipy, OR-Tools, marshmallow and Flask already loaded:
# a cold import costs about 0.8 s, which recycling would otherwise pay again and again.
# Importing the app module builds no app and imports no prometheus_client (see on_starting).
# Workers forked after a SIGHUP inherit these modules too: a reload re-reads the settings,
# not the code; new code needs a restart.
import service.app  # noqa: F401
from service.settings import load_server_settings, load_settings

try:
    # Checked now so that a bad CERTIMATCH_MAX_* stops the master, not each worker in turn.
    load_settings()
    _server = load_server_settings()
except ValueError as e:
    # SystemExit passes gunicorn's "Failed to read config file" traceback: one plain line
    # that names the variable and the values it allows is what an operator needs to read.
    raise SystemExit(f"certimatch: {e}") from None


def _cgroup_cpu_limit(root: Path = Path("/sys/fs/cgroup")) -> float | None:
    """CPUs allowed by the cgroup's CFS quota (a container's CPU limit), or None."""
    try:
        quota, period = (root / "cpu.max").read_text().split()[:2]   # cgroup v2
        if quota != "max":
            return int(quota) / int(period)
        return None
    except (OSError, ValueError):
        pass
    try:
        quota_us = int((root / "cpu" / "cpu.cfs_quota_us").read_text())  # cgroup v1
        period_us = int((root / "cpu" / "cpu.cfs_period_us").read_text())
    except (OSError, ValueError):
        return None
    return quota_us / period_us if quota_us > 0 and period_us > 0 else None


def usable_cores(root: Path = Path("/sys/fs/cgroup")) -> int:
    """Cores this process may run on: CPU affinity, capped by a cgroup CPU limit.

    ``os.cpu_count()`` counts the host's cores; in a container limited to 2 CPUs on a
    64-core node it would start 64 workers that share 2 CPUs of time and 64 x the memory.
    """
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        cores = os.cpu_count() or 1
    limit = _cgroup_cpu_limit(root)
    if limit is not None:
        cores = min(cores, math.ceil(limit))
    return max(1, cores)


# Loopback unless told otherwise: the service has no authentication of its own yet. The
# container image and the Kubernetes ConfigMap set CERTIMATCH_BIND=0.0.0.0:8080.
bind = _server.bind
workers = _server.workers or usable_cores()
worker_class = "sync"
# A large problem may take tens of seconds end to end; past this the worker is killed and
# replaced, and the client gets a closed connection rather than a hung one.
timeout = _server.worker_timeout
# On SIGTERM (a rolling update, systemd stop), requests in flight get this long to finish.
# Kubernetes' terminationGracePeriodSeconds and systemd's TimeoutStopSec are set above it.
graceful_timeout = _server.graceful_timeout
# The sync worker closes each connection after its answer; keepalive matters only to
# gunicorn's other worker types and is kept short in case one is chosen.
keepalive = 5
# Recycle workers now and then so that the memory of one huge request does not linger;
# the jitter keeps all workers from restarting at the same moment.
max_requests = 1000
max_requests_jitter = 100
# The app is built in each worker after the fork, never in the master (whose imports
# above build nothing): building it creates the metrics, whose values live in one file per
# process under the directory on_starting sets up, and every worker must hold its own
# solver state.
preload_app = False
# The worker heartbeat is a file touched every second; on a container's overlay or a slow
# disk that write can stall a worker into a timeout, while /dev/shm is memory.
worker_tmp_dir = "/dev/shm" if os.access("/dev/shm", os.W_OK) else None
# gunicorn >= 25 opens a control socket at one path per user; several servers on one
# machine (tests, a demo, a dev server) would delete each other's. We do not use it.
control_socket_disable = True
loglevel = _server.log_level
errorlog = "-"
# The app writes one JSON line per request itself (service/http/observe.py), with the request
# id; gunicorn's access log would repeat it, so it is off unless CERTIMATCH_ACCESS_LOG is
# true, and then it is JSON too (JsonLogger.access below).
accesslog = "-" if _server.access_log else None


class JsonLogger(glogging.Logger):  # type: ignore[misc]
    """gunicorn's own log lines (start, workers, errors, access) as JSON lines."""

    def setup(self, cfg: Any) -> None:
        super().setup(cfg)
        from service.http.observe import JsonFormatter  # imports no prometheus_client

        for logger in (self.error_log, self.access_log):
            for handler in logger.handlers:
                handler.setFormatter(JsonFormatter())

    def access(self, resp: Any, req: Any, environ: dict[str, Any], request_time: Any) -> None:
        # Built as a dict and dumped by the formatter: a format string would not escape a
        # backslash or a control character in a path into valid JSON.
        if not self.cfg.accesslog:
            return
        headers = dict((k.lower(), v) for k, v in getattr(resp, "headers", []))
        seconds = request_time.seconds + request_time.microseconds / 1e6
        status = str(resp.status).split(None, 1)[0]
        self.access_log.info("access", extra={"event": {
            "remote_addr": environ.get("REMOTE_ADDR"),
            "method": environ.get("REQUEST_METHOD"),
            "path": environ.get("PATH_INFO"),   # no query string: it may hold secrets
            "status": int(status) if status.isdigit() else status,
            "duration_ms": round(seconds * 1000, 3),
            "bytes_out": getattr(resp, "sent", None),
            "request_id": headers.get("x-request-id"),
        }})


logger_class = JsonLogger

#: Prefix of the metrics directory this file creates; on_exit removes only such a one.
_OWN_DIR_PREFIX = "certimatch-metrics-"
_METRIC_FILES = ("counter_*.db", "gauge_*.db", "histogram_*.db", "summary_*.db")


def _open_the_store_once() -> None:
    """The decision store and its signing key, checked (and on an empty database created)
    by the master before any worker starts: workers then never race to create them, and a
    schema that is behind stops the server with one line saying what to run, instead of
    every worker failing to boot."""
    from service.http.recording import Recorder
    from service.records.config import RecordSettings
    from service.records.errors import SchemaNotCurrent, StoreUnavailable
    from service.records.signing import KeyFileError

    try:
        Recorder(RecordSettings.of(load_settings())).close()
    except (SchemaNotCurrent, StoreUnavailable, KeyFileError, ValueError) as e:
        raise SystemExit(f"certimatch: {e}") from None


def on_starting(server: Any) -> None:
    """In the master, before any worker: the exposure check, metrics directory, logging."""
    # Checked here, not at import: server.cfg.bind includes a --bind given on the command
    # line, which overrides CERTIMATCH_BIND.
    from service.http.auth import check_exposure, load_tokens

    try:
        warning = check_exposure(server.cfg.bind, load_tokens(load_settings()),
                                 _server.insecure)
    except ValueError as e:
        raise SystemExit(f"certimatch: {e}") from None
    if warning:
        print(f"certimatch: warning: {warning}", file=sys.stderr, flush=True)
    _open_the_store_once()
    path = os.environ.get("PROMETHEUS_MULTIPROC_DIR")
    if path:
        # A directory given by the operator may hold the files of a previous run, whose
        # counts would be added to this one's; prometheus_client's multiprocess mode wants
        # it emptied before start-up. Only its own files are removed.
        os.makedirs(path, exist_ok=True)
        for pattern in _METRIC_FILES:
            for stale in Path(path).glob(pattern):
                stale.unlink(missing_ok=True)
    else:
        os.environ["PROMETHEUS_MULTIPROC_DIR"] = tempfile.mkdtemp(prefix=_OWN_DIR_PREFIX)
    from service.http.observe import configure_logging

    configure_logging(_server.log_level)
    # prometheus_client picks its multiprocess mode when first imported, so only now, with
    # the directory set; imported once here, a worker does not pay 70 ms for it at each boot.
    # It creates no metric file until a worker creates its metrics.
    import prometheus_client  # noqa: F401


def on_reload(server: Any) -> None:
    from service.http.observe import configure_logging

    configure_logging(load_server_settings().log_level)


def worker_exit(server: Any, worker: Any) -> None:
    """In a worker leaving cleanly (recycled, or the server stopping): end it at once.

    Python's orderly shutdown would take numpy, scipy, OR-Tools and Flask apart object by
    object, touching -- and so copying -- the pages the worker shares with the master:
    about 0.2 s of CPU per worker, as much as ~200 requests for a small problem, paid at
    every max_requests recycle. Nothing needs it: metric values are already in their
    memory-mapped files, the log handlers are flushed here, and the service registers no
    exit handlers. In the worker, gunicorn calls this hook while the worker's SystemExit is
    on its way out; any other ending (a boot error, a crash) keeps gunicorn's own path and
    exit code, which the master reads to tell a failed boot from a recycle. The master
    calls it too, for a worker found already gone: there it does nothing.
    """
    if worker.pid != os.getpid():
        return
    # the engine host leaves when its socket closes; reaped here, so none is left behind
    from service.solve import host

    host.stop()
    leaving = sys.exc_info()[1]
    if not isinstance(leaving, SystemExit) or leaving.code not in (0, None):
        return
    logging.shutdown()
    sys.stdout.flush()
    sys.stderr.flush()
    os._exit(0)


def post_worker_init(worker: Any) -> None:
    """In each worker, once: the engine host is started, and gunicorn's own error answers
    become problem documents.

    The engine host (``service.solve.host``) is forked now, while the worker holds only
    its imports and app: a host forked later, in the middle of a request, would keep that
    request's memory alive (copy-on-write) for as long as it lives.

    gunicorn answers a request it cannot parse (a bad request line, header fields over
    ``limit_request_field_size``...) itself, before the app sees it, with a small HTML page
    written by ``gunicorn.util.write_error``; it offers no hook for that page. Its worker
    calls the function through the module, so replacing it here, in the worker process
    only, changes the page and nothing else: the status and the reason stay gunicorn's,
    the body becomes the RFC 9457 document every other error is, with a request id.
    tests/http/test_gunicorn_errors.py holds a real gunicorn to this.
    """
    from gunicorn import util

    from service.solve import host

    host.start()
    util.write_error = write_problem


def write_problem(sock: Any, status: int, reason: str, message: str) -> None:
    """gunicorn's ``write_error``, answering ``application/problem+json``."""
    import uuid

    import orjson

    from service.errors import PROBLEM_CONTENT_TYPE, problem_document
    from service.http.observe import REQUEST_ID_HEADER

    if message:
        detail = "the server could not read the request: " + message[:1].lower() + message[1:]
    else:
        detail = "the server failed before the service could answer; the error is logged"
    # the message may quote bytes of the request that are no text: shown escaped
    detail = detail[:1000].encode("utf-8", "backslashreplace").decode("utf-8")
    body = orjson.dumps(problem_document(status, reason, detail))
    head = (f"HTTP/1.1 {status} {reason}\r\nConnection: close\r\n"
            f"Content-Type: {PROBLEM_CONTENT_TYPE}\r\nContent-Length: {len(body)}\r\n"
            f"{REQUEST_ID_HEADER}: {uuid.uuid4().hex}\r\n\r\n")
    from gunicorn import util

    util.write_nonblock(sock, head.encode("latin-1") + body)


def child_exit(server: Any, worker: Any) -> None:
    """A worker ended (recycled, killed, crashed): drop its live gauges from /metrics."""
    from prometheus_client import multiprocess

    multiprocess.mark_process_dead(worker.pid)


def on_exit(server: Any) -> None:
    # Recognised by name and place rather than remembered in a variable: a reload (SIGHUP)
    # runs this file again and would forget. A directory given by the operator stays.
    path = Path(os.environ.get("PROMETHEUS_MULTIPROC_DIR", ""))
    if path.name.startswith(_OWN_DIR_PREFIX) and path.parent == Path(tempfile.gettempdir()):
        shutil.rmtree(path, ignore_errors=True)
