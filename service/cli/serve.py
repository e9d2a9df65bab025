"""``certimatch serve``: run the service under gunicorn (and the helpers ``demo`` uses)."""

from __future__ import annotations

import argparse
import os
import socket
import subprocess
import sys
import time
from importlib import metadata
from pathlib import Path

import requests

from service.cli.credentials import TOKEN_ENV
from service.cli.talk import (
    DEFAULT_HOST,
    DEFAULT_PORT,
    EXIT_ERROR,
    CliError,
)
from service.http.auth import check_exposure, load_tokens
from service.settings import load_settings

APP_SPEC = "service.app:create_app()"

#: How long a stopped server may take to finish its requests before it is killed.
STOP_GRACE_SECONDS = 15.0

# --- running gunicorn -------------------------------------------------------------------

def _source_root() -> Path:
    """The folder holding the ``service`` package: the checkout, or site-packages."""
    return Path(__file__).resolve().parents[2]


def _gunicorn_config() -> Path | None:
    conf = _source_root() / "deploy" / "gunicorn.conf.py"
    return conf if conf.is_file() else None


def _gunicorn_version() -> tuple[int, ...]:
    parts = metadata.version("gunicorn").split(".")[:2]
    return tuple(int(p) for p in parts if p.isdigit())


def _gunicorn_argv(host: str | None, port: int | None, workers: int | None, *,
                   control_socket: bool = True) -> list[str]:
    """The gunicorn command line.

    What is given here wins over the config file; what is None is left to it (its bind and
    worker count follow the deployment's environment), or without one to our defaults.
    """
    argv = [sys.executable, "-m", "gunicorn"]
    conf = _gunicorn_config()
    if conf is not None:
        argv += ["--config", str(conf)]
    if host is not None or port is not None or conf is None:
        host = DEFAULT_HOST if host is None else host
        if ":" in host and not host.startswith("["):
            host = f"[{host}]"  # an IPv6 literal needs brackets before the port
        argv += ["--bind", f"{host}:{DEFAULT_PORT if port is None else port}"]
    # gunicorn >= 25.1 opens a control socket at one default path per user, which every
    # other instance on the machine unlinks on start and stop; a throwaway server opts out.
    if not control_socket and _gunicorn_version() >= (25, 1):
        argv.append("--no-control-socket")
    if workers is None and conf is None:
        workers = 2
    if workers is not None:
        argv += ["--workers", str(workers)]
    argv.append(APP_SPEC)
    return argv


def _child_env() -> dict[str, str]:
    # gunicorn imports the app by name; with the package's folder on PYTHONPATH that works
    # from any working directory, installed or not.
    # The client's own token (CERTIMATCH_TOKEN) is no business of a server we start.
    env = {k: v for k, v in os.environ.items() if k != TOKEN_ENV}
    parts = [str(_source_root()), env.get("PYTHONPATH", "")]
    env["PYTHONPATH"] = os.pathsep.join(p for p in parts if p)
    return env


def _cmd_serve(args: argparse.Namespace) -> int:
    argv = _gunicorn_argv(args.host, args.port, args.workers)
    env = _child_env()
    if args.insecure:
        env["CERTIMATCH_INSECURE"] = "true"
    if args.host is not None:
        # the config file's hook checks this too; without a config file only we can
        try:
            warning = check_exposure([args.host], load_tokens(load_settings()),
                                     env.get("CERTIMATCH_INSECURE", "").lower() == "true")
        except ValueError as e:
            raise CliError(str(e)) from None
        if warning and _gunicorn_config() is None:
            print(f"certimatch: warning: {warning}", file=sys.stderr)
    sys.stdout.flush()
    sys.stderr.flush()
    # exec, not a child: gunicorn becomes this process, so a supervisor's signals reach
    # its master directly and there is no second process to forward them.
    os.execve(argv[0], argv, env)
    return EXIT_ERROR  # not reached: execve either replaces the process or raises


def _port_free(host: str, port: int) -> bool:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        # Same option as gunicorn, so a port in TIME_WAIT counts as free, as it is for it.
        s.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            s.bind((host, port))
        except OSError:
            return False
    return True


def _wait_healthy(base: str, proc: subprocess.Popen[bytes], seconds: float) -> bool:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            return False
        try:
            if requests.get(base + "/healthz", timeout=2).status_code == 200:
                return True
        except requests.RequestException:
            pass
        time.sleep(0.2)
    return False


def _stop(proc: subprocess.Popen[bytes]) -> None:
    """SIGTERM (gunicorn's graceful stop), then SIGKILL if it overstays its grace."""
    if proc.poll() is None:
        proc.terminate()
    try:
        proc.wait(timeout=STOP_GRACE_SECONDS)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait()
