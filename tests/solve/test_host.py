"""The engine host (service/solve/host.py): one persistent process per worker for engine
calls, killed at the deadline and replaced, ended and reaped with its worker.

Nothing here asserts that anything was fast; every wait is bounded. The expected values
are computed in the test by numpy on the same arrays (arithmetic, no source needed).
"""

from __future__ import annotations

import os
import signal
import time
from pathlib import Path

import numpy as np
import pytest
from servers import alive, wait_for

from service.errors import ServerBusy, TimeLimitExceeded
from service.solve import deadline as clock
from service.solve import host, isolation
from service.solve.deadline import deadline

BIG = isolation.IN_PROCESS_WORK + 1


def _pid_and_sum(x: np.ndarray, k: int) -> isolation.Arrays:
    return {"pid": np.array(os.getpid()), "sum": np.array(int(x.sum()) * k), "x": x[::-1]}


def _raise(message: str) -> isolation.Arrays:
    raise ValueError(message)


def _die() -> isolation.Arrays:
    os.kill(os.getpid(), signal.SIGKILL)
    return {}


def _record_pid_and_spin(path: str) -> isolation.Arrays:
    Path(path).write_text(str(os.getpid()))
    end = time.monotonic() + 120
    while time.monotonic() < end:
        pass
    return {}


def _burn(cpu_s: float) -> isolation.Arrays:
    start = time.process_time()
    while time.process_time() - start < cpu_s:
        pass
    return {}


def _memfds() -> list[str]:
    """This process's open shared files of the engine host."""
    out = []
    for fd in os.listdir("/proc/self/fd"):
        try:
            target = os.readlink(f"/proc/self/fd/{fd}")
        except OSError:
            continue
        if "certimatch-engine" in target:
            out.append(target)
    return out


def _gone(pid: int) -> bool:
    """No such process, not even a zombie: it was reaped."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    return False


def _call(*args: object, fn=_pid_and_sum) -> isolation.Arrays:
    with deadline(60, "test"):
        return isolation.run(fn, *args, work=BIG)


@pytest.fixture(autouse=True)
def fresh_host():
    host.stop()
    yield
    host.stop()


def test_calls_go_to_one_persistent_host_and_come_back_whole():
    x = np.arange(200_000, dtype=np.int64)
    first, second = _call(x, 3), _call(x[:10], 2)
    assert int(first["pid"]) == int(second["pid"]) == host.pid() != os.getpid()
    assert int(first["sum"]) == 3 * int(x.sum()) and int(second["sum"]) == 2 * 45
    assert np.array_equal(first["x"], x[::-1]) and first["x"].dtype == np.int64
    assert first["pid"].shape == ()
    # the answer is the caller's own copy, not a view of memory the next call reuses
    _call(np.zeros(200_000, np.int64), 1)
    assert np.array_equal(first["x"], x[::-1])


def test_the_deadline_kills_the_host_and_the_next_call_starts_a_new_one(tmp_path):
    before = int(_call(np.arange(3), 1)["pid"])
    pid_file = tmp_path / "pid"
    with pytest.raises((TimeLimitExceeded, ServerBusy)), deadline(0.5, "spinning"):
        isolation.run(_record_pid_and_spin, str(pid_file), work=BIG)
    assert int(pid_file.read_text()) == before      # the host itself was at work
    assert _gone(before)                            # killed and reaped: no zombie
    assert host.pid() is None
    assert _memfds() == []                          # its shared file closed with it
    assert signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)
    after = int(_call(np.arange(3), 1)["pid"])
    assert after != before and after == host.pid()


def test_an_engine_error_comes_back_and_the_host_serves_on():
    before = int(_call(np.arange(3), 1)["pid"])
    with pytest.raises(RuntimeError, match="ValueError: no luck"):
        _call("no luck", fn=_raise)
    assert int(_call(np.arange(3), 1)["pid"]) == before


def test_a_host_that_dies_is_an_error_and_is_replaced():
    before = int(_call(np.arange(3), 1)["pid"])
    with pytest.raises(RuntimeError, match="without an answer"):
        _call(fn=_die)
    assert _gone(before)
    assert int(_call(np.arange(3), 1)["pid"]) not in (before, os.getpid())


def test_a_host_killed_while_idle_is_replaced_without_an_error():
    before = int(_call(np.arange(3), 1)["pid"])
    os.kill(before, signal.SIGKILL)          # as the kernel's out-of-memory killer would
    wait_for("the host to have died", lambda: not alive(before), 30)
    assert int(_call(np.arange(3), 1)["pid"]) not in (before, os.getpid())
    assert _gone(before)


def test_stop_ends_and_reaps_the_host_and_frees_its_shared_memory():
    pid = int(_call(np.arange(1_000_000), 1)["pid"])
    assert _memfds()            # the shared file (and the mapping's own descriptor)
    host.stop()
    assert _gone(pid)
    assert _memfds() == []
    assert host.pid() is None


def test_the_host_ignores_a_graceful_stop_signal():
    # A process manager may send SIGTERM to the whole group: the worker drains its request,
    # so its engine must not die under it. The host leaves when the worker closes it.
    pid = int(_call(np.arange(3), 1)["pid"])
    for sig in (signal.SIGTERM, signal.SIGINT, signal.SIGHUP):
        os.kill(pid, sig)
    assert int(_call(np.arange(3), 1)["pid"]) == pid


def test_the_host_s_cpu_counts_for_the_request_it_works_for_and_no_other():
    _call(np.arange(3), 1)                          # a host that exists already
    base = clock._request_cpu()
    _call(0.3, fn=_burn)
    spent = clock._request_cpu() - base
    # /proc counts in clock ticks (1/100 s here): the host's 0.3 s, less a tick or two
    assert spent >= 0.25
    # a later call does not count the host's earlier work again
    base = clock._request_cpu()
    _call(np.arange(3), 1)
    assert clock._request_cpu() - base < 0.25


def test_a_call_the_host_cannot_carry_is_forked_as_before():
    # an argument that is neither an array nor a number (a whole network) goes to a fork
    out = _call({"not": "an array"}, fn=_pid_of_anything)
    assert int(out["pid"]) not in (os.getpid(), host.pid())


def _pid_of_anything(_: object) -> isolation.Arrays:
    return {"pid": np.array(os.getpid())}


def test_a_forked_child_does_not_use_its_parent_s_host():
    parent_host = int(_call(np.arange(3), 1)["pid"])
    child = os.fork()
    if child == 0:
        code = 0 if host.pid() is None else 1
        os._exit(code)
    _, status = os.waitpid(child, 0)
    assert os.waitstatus_to_exitcode(status) == 0
    assert host.pid() == parent_host
