"""Start and stop a real gunicorn serving certimatch on a free loopback port, for tests.

One :class:`Gunicorn` is one master process we started, with the deploy configuration
(``deploy/gunicorn.conf.py``), its own ``XDG_RUNTIME_DIR`` and its own log file. Every
wait here is bounded and fails the test when the bound runs out; nothing measures or
asserts on time. :meth:`Gunicorn.stop` always ends the master and its workers, by SIGTERM
and then, past a bound, SIGKILL to the process group the master leads.

Workers are found through ``/proc/<master>/task/*/children`` (Linux), so no process
library is needed.
"""

from __future__ import annotations

import contextlib
import hashlib
import math
import os
import re
import signal
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

import requests

ROOT = Path(__file__).resolve().parents[1]
CONFIG = ROOT / "deploy" / "gunicorn.conf.py"
APP = "service.app:create_app()"

START_SECONDS = 30.0   # bound on a server coming up with all its workers
STOP_SECONDS = 45.0    # bound on a graceful stop (the deploy graceful_timeout is 30 s)
POLL_SECONDS = 0.05    # pause between two looks at a condition we wait for

#: The scipy.optimize.linear_sum_assignment docstring example; its optimum is 5. Small
#: enough to fit under any body limit a test sets, so it can follow every bad request.
GOOD = {
    "sources": [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}],
    "sinks": [{"id": "c0"}, {"id": "c1"}, {"id": "c2"}],
    "costs": [[4, 1, 3], [2, 0, 5], [3, 2, 2]],
}
GOOD_OBJECTIVE = 5


#: Where the decision store of every app and server of a test session lives (a temporary
#: folder tests/conftest.py sets): a place, not a behaviour, so the cleaners keep it, and
#: no test writes into ./certimatch-data.
DATA_DIR_ENV = "CERTIMATCH_DATA_DIR"


_DECISION = re.compile(rb',"decision":\{[^{}]*\}')


def without_decision(body: bytes) -> bytes:
    """An answer's bytes without its ``decision`` object, whose id and time differ from
    one request to the next; the rest is the same bytes for the same request (README,
    "Determinism")."""
    return _DECISION.sub(b"", body)


def shell_setting(name: str) -> bool:
    """True for a ``CERTIMATCH_*`` variable a test must not inherit from the shell."""
    return name.startswith("CERTIMATCH_") and name != DATA_DIR_ENV


def clean_app(config: Mapping[str, Any] | None = None) -> Any:
    """``create_app`` as the tests mean it: without the ``CERTIMATCH_*`` variables a shell
    may hold (a limit or a token there would change what is under test)."""
    from service.app import create_app

    saved = {k: os.environ.pop(k) for k in list(os.environ) if shell_setting(k)}
    try:
        return create_app({"TESTING": True, **(config or {})})
    finally:
        os.environ.update(saved)


class ServerFailed(AssertionError):
    """A server did not come up, or did not go down, within its bound (fails the test)."""


def free_port() -> int:
    """A loopback port nobody listens on right now."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port: int = s.getsockname()[1]
    return port


def wait_for(what: str, condition: Callable[[], Any], seconds: float,
             context: Callable[[], str] = lambda: "") -> Any:
    """Poll ``condition`` until it returns something true; fail the test after ``seconds``."""
    deadline = time.monotonic() + seconds
    while True:
        value = condition()
        if value:
            return value
        if time.monotonic() >= deadline:
            raise ServerFailed(f"{what}: not within {seconds} s\n{context()}")
        time.sleep(POLL_SECONDS)


def children(pid: int) -> set[int]:
    """Direct children of ``pid``, read from /proc (empty once the process is gone)."""
    found: set[int] = set()
    with contextlib.suppress(FileNotFoundError, ProcessLookupError):
        for task in Path(f"/proc/{pid}/task").iterdir():
            with contextlib.suppress(FileNotFoundError, ProcessLookupError):
                found.update(int(p) for p in (task / "children").read_text().split())
    return found


def cpu_ticks(pid: int) -> int:
    """User + system CPU time of ``pid`` in clock ticks; -1 once the process is gone."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except (FileNotFoundError, ProcessLookupError):
        return -1
    # The command name (field 2) may hold spaces; the fields after its ')' are fixed.
    fields = stat[stat.rindex(")") + 2:].split()
    return int(fields[11]) + int(fields[12])   # utime, stime: fields 14 and 15 of proc(5)


def alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text()
    except (FileNotFoundError, ProcessLookupError):
        return False
    return state[state.rindex(")") + 2] != "Z"


class Gunicorn:
    """``gunicorn -c deploy/gunicorn.conf.py 'service.app:create_app()'`` on a free port.

    ``env`` adds ``CERTIMATCH_*`` settings (``MAX_BODY_BYTES``...) for the app and its
    workers. ``app`` serves another application (the benchmark's hello-world), found on
    ``pythonpath``; ``command`` starts the server another way that must end up as this
    gunicorn on :attr:`port` (``certimatch serve --port ...``): it is called with the port
    and returns the argv. ``health`` is the path polled until it answers 200. Use as a
    context manager, or call :meth:`start` and :meth:`stop` yourself.
    """

    def __init__(self, folder: Path, *, workers: int = 2,
                 env: Mapping[str, str] | None = None, app: str = APP,
                 pythonpath: str | None = None,
                 command: Callable[[int], list[str]] | None = None,
                 health: str = "/healthz", log_name: str = "gunicorn.log") -> None:
        self.port = free_port()
        self.base = f"http://127.0.0.1:{self.port}"
        self.workers = workers
        self.folder = folder
        self.extra_env = dict(env or {})
        self.app = app
        self.pythonpath = pythonpath
        self.command = command
        self.health = health
        self.log_path = folder / log_name
        self.proc: subprocess.Popen[bytes] | None = None
        self._log: IO[bytes] | None = None

    # -- life cycle ----------------------------------------------------------------------

    def argv(self) -> list[str]:
        """The command line this server is started with."""
        if self.command is not None:
            return self.command(self.port)
        argv = [sys.executable, "-m", "gunicorn", "-c", str(CONFIG)]
        if self.pythonpath:
            argv += ["--pythonpath", self.pythonpath]
        return [*argv, self.app]

    def launch(self) -> Gunicorn:
        """Start the process and return at once, without waiting for it to serve."""
        runtime = self.folder / f"runtime-{self.port}"
        runtime.mkdir(parents=True, exist_ok=True)
        env = {k: v for k, v in os.environ.items()
               if not shell_setting(k) and k != "PROMETHEUS_MULTIPROC_DIR"}
        env.update({
            # Each server its own runtime folder: gunicorn >= 25.1 puts its control
            # socket there, and two servers sharing one would delete each other's.
            "XDG_RUNTIME_DIR": str(runtime),
            "CERTIMATCH_BIND": f"127.0.0.1:{self.port}",
            "CERTIMATCH_WORKERS": str(self.workers),
            **self.extra_env,
        })
        self._log = open(self.log_path, "w+b")  # closed in stop()
        # A session of its own: one killpg ends master and workers if a graceful stop hangs.
        self.proc = subprocess.Popen(self.argv(), cwd=ROOT, env=env, stdout=self._log,
                                     stderr=subprocess.STDOUT, start_new_session=True)
        return self

    def start(self) -> Gunicorn:
        """Start, and wait (bounded) until it serves with all its workers."""
        self.launch()
        try:
            self.wait_ready()
        except BaseException:
            self.stop()
            raise
        return self

    def wait_ready(self) -> None:
        """Bounded wait until the health path answers and every worker has booted."""
        def ready() -> bool:
            self._check_running()
            if len(self.worker_pids()) != self.workers:
                return False
            try:
                return requests.get(self.base + self.health, timeout=2).status_code == 200
            except requests.RequestException:
                return False
        wait_for(f"{self.argv()[-1]} serving with all its workers", ready, START_SECONDS,
                 self.output)

    def wait_exit(self, seconds: float) -> int:
        """Bounded wait for the server to end by itself; its exit code."""
        assert self.proc is not None, "server not started"
        try:
            return self.proc.wait(timeout=seconds)
        except subprocess.TimeoutExpired:
            self.stop()
            raise ServerFailed(f"the server did not stop by itself within {seconds} s:\n"
                               f"{self.output()}") from None

    def stop(self) -> int | None:
        """SIGTERM, a bounded wait, then SIGKILL to the whole group; the master's exit code."""
        code: int | None = None
        if self.proc is not None:
            if self.proc.poll() is None:
                self.proc.send_signal(signal.SIGTERM)
            try:
                code = self.proc.wait(timeout=STOP_SECONDS)
            except subprocess.TimeoutExpired:
                with contextlib.suppress(ProcessLookupError):
                    os.killpg(self.proc.pid, signal.SIGKILL)
                code = self.proc.wait()
            # Workers orphaned by a killed master would keep the port: end the group too.
            with contextlib.suppress(ProcessLookupError):
                os.killpg(self.proc.pid, signal.SIGKILL)
        if self._log is not None:
            self._log.close()
            self._log = None
        return code

    def __enter__(self) -> Gunicorn:
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()

    # -- looking at it -------------------------------------------------------------------

    @property
    def pid(self) -> int:
        assert self.proc is not None, "server not started"
        return self.proc.pid

    def worker_pids(self) -> set[int]:
        return {p for p in children(self.pid) if alive(p)}

    def output(self) -> str:
        if not self.log_path.exists():
            return ""
        text = self.log_path.read_bytes().decode(errors="replace")
        return text[-20_000:]

    def restarts(self) -> int:
        """Workers booted so far, the first ones included (recycles show as more)."""
        return self.output().count("Booting worker")

    def _check_running(self) -> None:
        assert self.proc is not None
        if self.proc.poll() is not None:
            raise ServerFailed(f"gunicorn exited with {self.proc.returncode}:\n{self.output()}")

    def post(self, path: str, body: Any, session: requests.Session | None = None,
             timeout: float = 60) -> requests.Response:
        send = session.post if session is not None else requests.post
        return send(self.base + path, json=body, timeout=timeout)

    def answers_good(self, session: requests.Session | None = None) -> bool:
        """True when the server solves :data:`GOOD` right (any failure is False)."""
        try:
            r = self.post("/v1/solve", GOOD, session, timeout=10)
        except requests.RequestException:
            return False
        return r.status_code == 200 and r.json().get("objective") == GOOD_OBJECTIVE


@contextlib.contextmanager
def gunicorn(folder: Path, **kwargs: Any) -> Iterator[Gunicorn]:
    """A started :class:`Gunicorn`, always stopped on the way out."""
    server = Gunicorn(folder, **kwargs)
    with server:
        yield server


# --------------------------------------------------------------------------------------------
# Traffic: client threads that post problems until told to stop, bounded in count and time
# --------------------------------------------------------------------------------------------


@dataclass
class Outcome:
    """One request of a :class:`Traffic` run."""

    client: int
    problem: int          # index into the traffic's problem list
    started: float        # time.monotonic() just before sending
    ended: float          # ... and once the answer (or the failure) was in
    status: int | None    # None: no HTTP answer at all (connection reset, refused...)
    digest: bytes | None  # sha256 of the answer body; the bodies are kept once each
    error: str | None

    @property
    def seconds(self) -> float:
        return self.ended - self.started


class Traffic:
    """``clients`` threads, each with its own ``requests.Session``, posting problems.

    Each thread walks ``schedule`` (indices into ``bodies``, JSON bytes) from its own
    offset and stops at the first of: :meth:`stop`, ``seconds`` elapsed, or
    ``max_per_client`` requests. Answers are kept once per distinct body (a correct
    service answers the same request with the same bytes, but for the ``decision``
    object), so long runs stay small.
    """

    def __init__(self, server: Gunicorn, bodies: list[bytes], *, clients: int, seconds: float,
                 max_per_client: int = 100_000, schedule: list[int] | None = None,
                 path: str = "/v1/solve", timeout: float = 120) -> None:
        self.server = server
        self.bodies = bodies
        self.schedule = schedule or list(range(len(bodies)))
        self.clients = clients
        self.seconds = seconds
        self.max_per_client = max_per_client
        self.path = path
        self.timeout = timeout
        self.outcomes: list[Outcome] = []
        self.answers: dict[tuple[int, bytes], bytes] = {}
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._threads: list[threading.Thread] = []
        self.started = 0.0
        self.ended = 0.0

    def start(self) -> Traffic:
        self.started = time.monotonic()
        for c in range(self.clients):
            t = threading.Thread(target=self._run, args=(c,), name=f"client-{c}", daemon=True)
            self._threads.append(t)
            t.start()
        return self

    def stop(self) -> None:
        """Ask every client to stop and wait for it (each ends within one request)."""
        self._stop.set()
        self.join()

    def join(self) -> None:
        for t in self._threads:
            t.join(timeout=self.seconds + 2 * self.timeout)
            assert not t.is_alive(), f"{t.name} did not stop"
        self.ended = time.monotonic()

    def _run(self, client: int) -> None:
        deadline = self.started + self.seconds
        step = max(1, len(self.schedule) // max(1, self.clients))
        k = client * step
        headers = {"Content-Type": "application/json"}
        with requests.Session() as session:
            for _ in range(self.max_per_client):
                if self._stop.is_set() or time.monotonic() >= deadline:
                    return
                index = self.schedule[k % len(self.schedule)]
                k += 1
                started = time.monotonic()
                try:
                    r = session.post(self.server.base + self.path, data=self.bodies[index],
                                     headers=headers, timeout=self.timeout)
                except requests.RequestException as e:
                    self._record(Outcome(client, index, started, time.monotonic(), None, None,
                                         repr(e)))
                    continue
                ended = time.monotonic()
                # the same request, the same bytes, but for the answer's decision object
                digest = hashlib.sha256(without_decision(r.content)).digest()
                with self._lock:
                    self.answers.setdefault((index, digest), r.content)
                self._record(Outcome(client, index, started, ended, r.status_code, digest,
                                     None if r.status_code == 200 else r.text[:300]))

    def _record(self, outcome: Outcome) -> None:
        with self._lock:
            self.outcomes.append(outcome)

    def ok(self) -> int:
        with self._lock:
            return sum(o.status == 200 for o in self.outcomes)

    def failures(self) -> list[Outcome]:
        with self._lock:
            return [o for o in self.outcomes if o.status != 200]


def percentile(values: list[float], q: float) -> float:
    """The q-quantile (0..1) by the nearest-rank method; 0 for no values."""
    if not values:
        return 0.0
    ordered = sorted(values)
    rank = max(1, math.ceil(q * len(ordered)))
    return ordered[rank - 1]


def _socket_inodes(pid: int) -> set[int]:
    """Inodes of the sockets ``pid`` holds open."""
    found: set[int] = set()
    with contextlib.suppress(FileNotFoundError, ProcessLookupError, PermissionError):
        for fd in Path(f"/proc/{pid}/fd").iterdir():
            with contextlib.suppress(FileNotFoundError, ProcessLookupError, OSError):
                target = os.readlink(fd)
                if target.startswith("socket:["):
                    found.add(int(target[8:-1]))
    return found


def connection_owner(server: Gunicorn, client_port: int) -> int | None:
    """The worker holding the server end of the loopback connection from ``client_port``.

    None while no worker has accepted it (it waits in the listen queue) or once it is
    closed. A worker that holds it has the request in flight: accepted, not yet answered.
    """
    inode = 0
    for table in ("/proc/net/tcp", "/proc/net/tcp6"):
        with contextlib.suppress(FileNotFoundError):
            for line in Path(table).read_text().splitlines()[1:]:
                cols = line.split()
                local, remote, state = cols[1], cols[2], cols[3]
                # Ports are the hex digits after the colon; state 01 is ESTABLISHED.
                if (state == "01" and int(local.rsplit(":", 1)[1], 16) == server.port
                        and int(remote.rsplit(":", 1)[1], 16) == client_port):
                    inode = int(cols[9])
    if inode == 0:
        return None
    for pid in server.worker_pids():
        if inode in _socket_inodes(pid):
            return pid
    return None


def peak_memory_kib(pid: int) -> int:
    """Peak resident memory of ``pid`` (VmHWM) in KiB; -1 once it is gone."""
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1])
    except (FileNotFoundError, ProcessLookupError):
        return -1
    return -1
