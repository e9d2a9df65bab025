"""gunicorn workers under deploy/gunicorn.conf.py: how they start and how they leave.

A worker that leaves cleanly (recycled after max_requests, or the server stopping) ends at
once from the ``worker_exit`` hook instead of through Python's shutdown; these tests hold
that to what must not change: every log line and every count of the leaving worker stays,
the exit is clean, and a worker that cannot boot still stops the server with an error.
The master imports the service's modules before forking, but not prometheus_client, whose
multiprocess mode depends on the metrics directory on_starting sets up.
"""

from __future__ import annotations

import json
import os
import runpy
import subprocess
import sys
from collections import Counter
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import pytest
import requests
from prometheus_client.parser import text_string_to_metric_families
from servers import (
    CONFIG,
    DATA_DIR_ENV,
    GOOD,
    GOOD_OBJECTIVE,
    ROOT,
    Gunicorn,
    gunicorn,
    shell_setting,
    wait_for,
)

from service.settings import SETTINGS

#: Requests through a server whose workers are recycled every few requests.
RECYCLE_AFTER = 4
REQUESTS = 6 * RECYCLE_AFTER
#: Bound on a server that cannot boot its workers to give up.
GIVE_UP_SECONDS = 60.0


@pytest.fixture(autouse=True)
def clean_env(monkeypatch: pytest.MonkeyPatch) -> None:
    # gunicorn.conf.py reads CERTIMATCH_* from the environment; a shell's would leak in.
    for s in SETTINGS:
        if s.env != DATA_DIR_ENV:                # the session's temporary store
            monkeypatch.delenv(s.env, raising=False)


def _server_env(tmp_path: Path) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items()
           if not shell_setting(k) and k != "PROMETHEUS_MULTIPROC_DIR"}
    runtime = tmp_path / "runtime"
    runtime.mkdir(exist_ok=True)
    env["XDG_RUNTIME_DIR"] = str(runtime)      # gunicorn's control socket: one per server
    return env


# --- the worker_exit hook -------------------------------------------------------------------


@pytest.fixture
def worker_exit(monkeypatch: pytest.MonkeyPatch) -> Any:
    """The hook, with os._exit and logging.shutdown recorded instead of done."""
    conf = runpy.run_path(str(CONFIG))
    calls: list[Any] = []
    monkeypatch.setattr(os, "_exit", lambda code: calls.append(("_exit", code)))
    monkeypatch.setattr("logging.shutdown", lambda: calls.append(("shutdown",)))
    hook = conf["worker_exit"]

    def leave(leaving: BaseException | None, pid: int | None = None) -> list[Any]:
        """Call the hook as gunicorn does: from a finally block, ``leaving`` in flight."""
        worker = SimpleNamespace(pid=os.getpid() if pid is None else pid)
        try:
            try:
                if leaving is not None:
                    raise leaving
            finally:
                hook(None, worker)
        except (SystemExit, OSError):
            pass
        return calls

    return leave


@pytest.mark.parametrize("code", [0, None])
def test_a_clean_exit_ends_the_worker_at_once_after_flushing(worker_exit, code):
    assert worker_exit(SystemExit(code)) == [("shutdown",), ("_exit", 0)]


@pytest.mark.parametrize("leaving", [
    SystemExit(3),       # gunicorn's WORKER_BOOT_ERROR: the master must see it
    SystemExit(4),       # APP_LOAD_ERROR
    SystemExit(-1),      # an unexpected error in the worker
    None,                # nothing in flight
])
def test_any_other_ending_keeps_gunicorns_own_path(worker_exit, leaving):
    assert worker_exit(leaving) == []


def test_in_the_master_the_hook_does_nothing(worker_exit):
    # The master calls worker_exit for a worker it finds already gone (while handling the
    # OSError of os.kill); even a SystemExit in flight there is the master's own.
    other = os.getppid()
    assert worker_exit(SystemExit(0), pid=other) == []
    assert worker_exit(ProcessLookupError(), pid=other) == []


# --- what the master imports ------------------------------------------------------------------


def test_the_master_loads_the_app_modules_and_prometheus_only_once_its_dir_is_set(tmp_path):
    code = (
        "import runpy, sys\n"
        "from types import SimpleNamespace\n"
        "conf = runpy.run_path(sys.argv[1])\n"
        "print('service.app' in sys.modules, 'prometheus_client' in sys.modules)\n"
        "conf['on_starting'](SimpleNamespace(cfg=SimpleNamespace(bind=['127.0.0.1:8080'])))\n"
        "from service.http.observe import multiprocess_mode\n"
        "print('prometheus_client' in sys.modules, multiprocess_mode())\n"
        "conf['on_exit'](None)\n"
    )
    done = subprocess.run([sys.executable, "-c", code, str(CONFIG)], cwd=ROOT,
                          env=_server_env(tmp_path), capture_output=True, text=True,
                          timeout=120, check=False)
    assert done.returncode == 0, done.stderr
    # After loading the file: the app's modules, no metrics library. After on_starting:
    # the library, in the multiprocess mode that adds the workers' counts up.
    assert done.stdout.split() == ["True", "False", "True", "True"]


# --- a real gunicorn --------------------------------------------------------------------------


def _records(output: str) -> list[dict[str, Any]]:
    return [json.loads(line) for line in output.splitlines() if line.strip()]


def test_recycled_workers_keep_every_log_line_and_count(tmp_path):
    metrics = tmp_path / "metrics"
    metrics.mkdir()
    env = {"PROMETHEUS_MULTIPROC_DIR": str(metrics),
           "GUNICORN_CMD_ARGS": f"--max-requests {RECYCLE_AFTER} --max-requests-jitter 1"}
    with gunicorn(tmp_path, workers=2, env=env) as server:
        with requests.Session() as session:
            for i in range(REQUESTS):
                r = session.post(server.base + "/v1/solve", json=GOOD, timeout=30,
                                 headers={"X-Request-ID": f"recycle-{i}"})
                assert r.status_code == 200, r.text
                assert r.json()["objective"] == GOOD_OBJECTIVE
        # Recycling is asynchronous: wait until the master has replaced some workers.
        wait_for("workers recycled", lambda: server.output().count("Worker exiting") >= 2,
                 30.0, server.output)
        text = requests.get(server.base + "/metrics", timeout=10).text
        families = {f.name: f for f in text_string_to_metric_families(text)}
        solves = sum(s.value for s in families["certimatch_solves"].samples
                     if s.name == "certimatch_solves_total")
        assert server.stop() == 0
    records = _records(server.output())
    # Every solve of every worker, those that left included, is counted and logged once.
    assert solves == REQUESTS
    ids = Counter(r["request_id"] for r in records
                  if r.get("message") == "request" and r.get("path") == "/v1/solve")
    assert ids == Counter(f"recycle-{i}" for i in range(REQUESTS))
    # The workers left cleanly: the master reports no worker exiting with an error code.
    messages = [r["message"] for r in records]
    assert sum("Autorestarting worker" in m for m in messages) >= 2
    assert not [m for m in messages if "exited with code" in m or "was sent" in m]


def test_a_worker_that_cannot_boot_still_stops_the_server(tmp_path):
    # The worker leaves with gunicorn's APP_LOAD_ERROR; were it to end with 0, the master
    # would take it for a recycle and start new workers for ever instead of stopping.
    server = Gunicorn(tmp_path, workers=1, app="service.no_such_module:create_app()").launch()
    code = server.wait_exit(GIVE_UP_SECONDS)
    output = server.output()
    server.stop()
    assert code != 0
    assert "no_such_module" in output
