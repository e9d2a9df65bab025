"""The engine host: one persistent child process per worker that runs engine calls.

:mod:`service.solve.isolation` used to fork a child for every engine call, so that the
time limit could SIGKILL a call into compiled code. A fork of a worker-sized process
costs 5-150 ms on a busy virtual machine, more than a mid-size problem's whole solve. The
host is that child made once and kept: forked from the worker (in gunicorn's
``post_worker_init``, while the worker is still small, or on the first call that needs
it), it waits on a Unix socket for calls and answers them; only a kill at the deadline,
a crash or the worker's end replaces it.

The arrays travel through shared memory: one anonymous file (``memfd_create``, no name in
any file system, gone when the last of the two processes closes it), made before the
fork so both hold it, mapped by both and grown on demand. The worker copies the call's
arrays into it, the host reads them in place and writes its answer's arrays after them,
the worker copies those out. The socket carries only small messages, both ways an
8-byte length and a JSON header: the call, named by its module and qualified name (a
module-level function; nothing is pickled, nothing executable crosses), its arguments as
numpy arrays (dtype, shape, offset in the shared file) or JSON scalars (int, float, str,
bool, None); the answer's arrays, or an error message. A call with any other argument (a
whole :class:`~service.network.model.Network`) is refused here, and
:mod:`service.solve.isolation` forks for it as before. The shared file keeps its size for
the next call up to ``ARENA_KEEP_BYTES``, and is emptied after a larger call.

Lifecycle:

* started by :func:`start` (idempotent); the host is the worker's own child, so the
  worker reaps it, and it asks the kernel for SIGKILL when the worker dies
  (``PR_SET_PDEATHSIG``), so a worker killed by gunicorn's timeout takes it along;
* a call interrupted in any way (the deadline's exception, a broken socket, a host that
  died) leaves the stream in an unknown state: the host is killed with SIGKILL and
  reaped at once, and the next call starts a new one;
* :func:`stop` (gunicorn's ``worker_exit`` hook and ``atexit``) closes the socket, which
  the host reads as its end, and reaps it; a host that does not leave within
  ``STOP_WAIT_S`` is killed;
* the host ignores the signals gunicorn and process managers send for a graceful stop
  (SIGTERM, SIGINT, SIGQUIT, SIGHUP, ...): a worker draining its last request keeps its
  engine until it has answered, then ends it.

The CPU the host spends on a call is the request's (:mod:`service.solve.deadline`), as a
forked child's was.
"""

from __future__ import annotations

import atexit
import ctypes
import importlib
import mmap
import os
import signal
import socket
import struct
import sys
import time
from collections.abc import Callable
from typing import Any

import numpy as np
import orjson

from service.solve import deadline

__all__ = ["ARENA_KEEP_BYTES", "Refused", "call", "forget", "in_host", "pid", "start", "stop"]

Arrays = dict[str, np.ndarray]

#: Bound on a host's leaving after its socket is closed, before it is killed.
STOP_WAIT_S = 2.0
#: The shared file keeps up to this many bytes between calls (reused pages are cheaper
#: than fresh ones); after a larger call it is emptied, so an idle worker holds no more.
ARENA_KEEP_BYTES = 64 << 20
_ALIGN = 64
_LENGTH = struct.Struct("<Q")
_PR_SET_PDEATHSIG = 1
#: Signals a graceful stop sends (to the process group, by some managers): the host
#: leaves when its worker closes the socket, never in the middle of a call.
_IGNORED = ("SIGTERM", "SIGINT", "SIGQUIT", "SIGHUP", "SIGUSR1", "SIGUSR2", "SIGWINCH",
            "SIGTTIN", "SIGTTOU")
#: Scalars a header carries as they are.
_SCALARS = (bool, int, float, str, type(None))


class Refused(Exception):
    """The call cannot go to the host (an argument it cannot carry, or no host)."""


class _Arena:
    """The shared file and this process's mapping of it."""

    def __init__(self, fd: int) -> None:
        self.fd = fd
        self.map: mmap.mmap | None = None
        self.mapped = 0

    def size(self) -> int:
        return os.fstat(self.fd).st_size

    def grow(self, needed: int) -> None:
        """At least ``needed`` bytes in the file, and all of the file mapped."""
        if self.size() < needed:
            os.ftruncate(self.fd, needed)
        self.follow()

    def follow(self) -> None:
        """Map the file as it is now (the other process may have grown or emptied it).

        An old mapping is dropped, not closed: arrays still viewing it keep it alive."""
        size = self.size()
        if size != self.mapped:
            self.map = mmap.mmap(self.fd, size) if size else None
            self.mapped = size

    def empty(self) -> None:
        os.ftruncate(self.fd, 0)
        self.follow()

    def view(self, dtype: str, shape: list[int], offset: int) -> np.ndarray:
        dt = np.dtype(dtype)
        count = int(np.prod(shape, dtype=np.int64))
        if count == 0:
            return np.empty(tuple(shape), dt)
        assert self.map is not None
        return np.frombuffer(self.map, dt, count, offset).reshape(tuple(shape))

    def put(self, arrays: list[np.ndarray], start: int) -> list[int]:
        """Copy ``arrays`` in from byte ``start``; their offsets."""
        offsets, end = [], start
        for a in arrays:
            end = -(-end // _ALIGN) * _ALIGN
            offsets.append(end)
            end += a.nbytes
        self.grow(end)
        for a, at in zip(arrays, offsets, strict=True):
            if a.size:
                self.view(a.dtype.str, list(a.shape), at)[...] = a
        return offsets

    def close(self) -> None:
        self.map, self.mapped = None, 0
        os.close(self.fd)


class _Host:
    """The worker's end: the host's pid, the socket to it and the shared file."""

    def __init__(self, pid: int, sock: socket.socket, arena: _Arena) -> None:
        self.pid = pid
        self.sock = sock
        self.arena = arena

    def close(self) -> None:
        self.sock.close()
        self.arena.close()


_host: _Host | None = None
#: The pid of the process that owns ``_host``: a forked child must not use its parent's.
_owner = -1
_in_host = False


def pid() -> int | None:
    """The live host's pid, or None."""
    return _host.pid if _host is not None and _owner == os.getpid() else None


def in_host() -> bool:
    """True inside the host itself (its calls run where they are)."""
    return _in_host


def start() -> int | None:
    """Fork the host if there is none; its pid, or None when no host can be made here."""
    global _host, _owner
    if _host is not None and _owner == os.getpid():
        return _host.pid
    _host, _owner = None, os.getpid()
    if _in_host or not hasattr(os, "fork") or not hasattr(os, "memfd_create"):
        return None
    try:
        fd = os.memfd_create("certimatch-engine", os.MFD_CLOEXEC)
    except OSError:
        return None
    parent_end, child_end = socket.socketpair(socket.AF_UNIX, socket.SOCK_STREAM)
    parent = os.getpid()
    try:
        child = os.fork()
    except OSError:
        parent_end.close()
        child_end.close()
        os.close(fd)
        return None
    if child == 0:                              # pragma: no cover - the host itself
        parent_end.close()
        _serve(child_end, _Arena(fd), parent)
    child_end.close()
    _host = _Host(child, parent_end, _Arena(fd))
    return child


def stop() -> None:
    """End the host: close its socket (its signal to leave), reap it, kill it if slow."""
    global _host
    host = _host
    if host is None or _owner != os.getpid():
        _host = None
        return
    _host = None
    host.close()
    end = time.monotonic() + STOP_WAIT_S
    while time.monotonic() < end:
        if _ended(host.pid):
            spent = deadline.child_cpu(host.pid)
            os.waitpid(host.pid, 0)
            deadline.child_reaped(host.pid, spent)
            return
        time.sleep(0.005)
    _kill(host.pid)


atexit.register(stop)


def forget() -> None:
    """In a freshly forked child: drop the parent's host without touching it."""
    global _host
    if _host is not None and _owner != os.getpid():
        _host.close()
    _host = None


def _kill(host_pid: int) -> None:
    """SIGKILL and reap; its CPU time, read before the reaping, settles the accounting."""
    try:
        os.kill(host_pid, signal.SIGKILL)
    except ProcessLookupError:
        pass
    spent = deadline.child_cpu(host_pid)
    try:
        os.waitpid(host_pid, 0)
    except ChildProcessError:           # reaped already (by a SIGCHLD handler of others)
        pass
    deadline.child_reaped(host_pid, spent)


# --------------------------------------------------------------------------- the worker's end


def call(fn: Callable[..., Arrays], args: tuple[Any, ...]) -> Arrays:
    """``fn(*args)`` in the host; Refused when it cannot go there.

    Must run with SIGALRM blocked on entry; unblocks it only while the host works. Any
    exception out of the exchange (the deadline's, a host that died: EOFError) leaves
    the host killed and reaped.
    """
    header, arrays = _request(fn, args)
    if _host is not None and _owner == os.getpid() and _ended(_host.pid):
        _abandon(_host)             # died while idle (the OOM killer...): reaped, replaced
    host_pid = start()
    host = _host
    if host_pid is None or host is None:
        raise Refused("no engine host")
    deadline.working_children.add(host_pid, deadline.child_cpu(host_pid))
    finished = False
    mask = signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGALRM})
    try:
        arena = host.arena
        for spec, at in zip((s for s in header["args"] if "a" in s),
                            arena.put(arrays, 0), strict=True):
            spec["a"].append(at)
        _send(host.sock, header)
        reply = _receive(host.sock)
        arena.follow()
        out = {name: arena.view(dtype, shape, at).copy()
               for name, dtype, shape, at in reply.get("out", ())}
        if arena.mapped > ARENA_KEEP_BYTES:
            arena.empty()
        finished = True
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, mask)
        if finished:
            deadline.child_idle(host_pid)
        else:
            _abandon(host)
    if "error" in reply:        # the call raised; the host is fine and serves on
        raise RuntimeError(f"the engine failed: {reply['error']}")
    return out


def _ended(host_pid: int) -> bool:
    """Whether the host has left (it is not reaped: its CPU time can still be read)."""
    try:
        return os.waitid(os.P_PID, host_pid, os.WEXITED | os.WNOHANG | os.WNOWAIT) is not None
    except ChildProcessError:
        return True


def _abandon(host: _Host) -> None:
    global _host
    if _host is host:
        _host = None
    host.close()
    _kill(host.pid)


def _request(fn: Callable[..., Arrays], args: tuple[Any, ...]
             ) -> tuple[dict[str, Any], list[np.ndarray]]:
    qualname = getattr(fn, "__qualname__", "")
    module = getattr(fn, "__module__", None)
    if not module or "<" in qualname:
        raise Refused("not a module-level function")
    spec: list[Any] = []
    arrays: list[np.ndarray] = []
    for a in args:
        if isinstance(a, np.generic):
            a = a.item()
        if isinstance(a, np.ndarray):
            if a.dtype.hasobject:
                raise Refused("an object array")
            arrays.append(a)
            spec.append({"a": [a.dtype.str, list(a.shape)]})
        elif isinstance(a, _SCALARS) and not (isinstance(a, int) and abs(a) >= 2**63):
            spec.append({"v": a})
        else:
            raise Refused(f"an argument of type {type(a).__name__}")
    return {"call": [module, qualname], "args": spec}, arrays


def _send(sock: socket.socket, header: dict[str, Any]) -> None:
    head = orjson.dumps(header)
    sock.sendall(_LENGTH.pack(len(head)) + head)


def _receive(sock: socket.socket) -> dict[str, Any]:
    """The other end's header; EOFError when the socket closes first."""
    (length,) = _LENGTH.unpack(_read_exactly(sock, _LENGTH.size))
    header: dict[str, Any] = orjson.loads(_read_exactly(sock, length))
    return header


def _read_exactly(sock: socket.socket, n: int) -> bytes:
    buffer = bytearray(n)
    view = memoryview(buffer)
    while len(view):
        got = sock.recv_into(view)
        if not got:
            raise EOFError("the engine process ended without an answer")
        view = view[got:]
    return bytes(buffer)


# --------------------------------------------------------------------------- the host's end


def _serve(sock: socket.socket, arena: _Arena, parent: int) -> None:  # pragma: no cover
    """The host's whole life: calls until the socket closes; never returns."""
    global _in_host
    code = 1
    try:
        _in_host = True
        for name in _IGNORED:
            signal.signal(getattr(signal, name), signal.SIG_IGN)
        signal.signal(signal.SIGALRM, signal.SIG_DFL)
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.pthread_sigmask(signal.SIG_SETMASK, set())
        _die_with(parent)
        while True:
            try:
                header = _receive(sock)
            except EOFError:
                code = 0
                return
            _answer(sock, arena, header)
    except BaseException:               # a broken exchange: the worker sees EOF
        code = 1
    finally:
        os._exit(code)


def _die_with(parent: int) -> None:
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(_PR_SET_PDEATHSIG, signal.SIGKILL)
    except (OSError, AttributeError):
        return
    if os.getppid() != parent:            # the worker died before the request was made
        os._exit(1)


def _answer(sock: socket.socket, arena: _Arena, header: dict[str, Any]) -> None:
    arena.follow()
    args: list[Any] = []
    end = 0
    for item in header["args"]:
        if "v" in item:
            args.append(item["v"])
        else:
            dtype, shape, at = item["a"]
            args.append(arena.view(dtype, shape, at))
            end = max(end, at + args[-1].nbytes)
    module, qualname = header["call"]
    try:
        fn: Any = sys.modules.get(module) or importlib.import_module(module)
        for part in qualname.split("."):
            fn = getattr(fn, part)
        out = {str(k): np.asarray(v) for k, v in fn(*args).items()}
        if any(v.dtype.hasobject for v in out.values()):
            raise TypeError("the call returned an object array")
    except Exception as e:              # reported to the worker, which raises it again
        _send(sock, {"error": f"{type(e).__name__}: {e}"})
        return
    del args
    arrays = list(out.values())
    offsets = arena.put(arrays, end)
    _send(sock, {"out": [[k, a.dtype.str, list(a.shape), at]
                         for k, a, at in zip(out, arrays, offsets, strict=True)]})
