"""The ``certimatch`` command: run the server, send it problems, or show the demo.

``solve`` and ``verify`` are made for scripts (cron jobs, CI steps), so their exit codes
carry the verdict and stdout carries only a 200 answer::

    0  solve: an optimal allocation        verify: the answer is valid
    2  solve: hard demand cannot be met    verify: the answer is not valid
    1  anything else: unreadable file, invalid problem, no server, server error

Every other answer (an RFC 9457 problem document) goes to stderr as received.
"""

from __future__ import annotations

import argparse
import json
import os
import socket
import subprocess
import sys
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from importlib import metadata, resources
from pathlib import Path
from typing import Any

import requests

from service import __version__

EXIT_OK = 0
EXIT_ERROR = 1
EXIT_NEGATIVE = 2
EXIT_INTERRUPTED = 130  # the shell's code for a command ended by Ctrl-C

DEFAULT_HOST = "127.0.0.1"
DEFAULT_PORT = 8080
DEFAULT_URL = f"http://{DEFAULT_HOST}:{DEFAULT_PORT}"
URL_ENV = "CERTIMATCH_URL"
APP_SPEC = "service.app:create_app()"
DEMO_FILES = ("repair_tickets.json", "parts_network.json")

#: How long ``demo`` waits for a fresh server to answer /healthz.
DEMO_START_SECONDS = 20.0
#: How long a stopped server may take to finish its requests before it is killed.
STOP_GRACE_SECONDS = 15.0


@dataclass(frozen=True)
class Reply:
    """One HTTP answer, the same whether it came over the network or from the test client."""

    status: int
    content_type: str
    text: str

    def document(self) -> dict[str, Any] | None:
        """The body as a JSON object, or None when it is not one."""
        try:
            doc = json.loads(self.text)
        except ValueError:
            return None
        return doc if isinstance(doc, dict) else None


Post = Callable[[str, bytes], Reply]


class CliError(Exception):
    """A failure the user can act on; main prints it on one line and exits 1."""


# --- talking to the service -------------------------------------------------------------

def _http_post(base_url: str, timeout: float) -> Post:
    base = base_url.rstrip("/")

    def post(path: str, body: bytes) -> Reply:
        try:
            r = requests.post(base + path, data=body, timeout=timeout,
                              headers={"Content-Type": "application/json"})
        except requests.RequestException as e:
            raise CliError(f"cannot reach {base}: {e}") from e
        # Decoded here rather than by requests, which would guess a charset for JSON.
        return Reply(r.status_code, r.headers.get("Content-Type", ""),
                     r.content.decode("utf-8", errors="replace"))

    return post


def _local_post() -> Post:
    # Imported here so that `serve` and remote `solve` never pay for numpy and scipy.
    from service.app import create_app

    try:
        client = create_app().test_client()
    except ValueError as e:  # a bad CERTIMATCH_* setting in the environment
        raise CliError(str(e)) from e

    def post(path: str, body: bytes) -> Reply:
        r = client.post(path, data=body, content_type="application/json")
        return Reply(r.status_code, r.content_type or "", r.get_data(as_text=True))

    return post


def _poster(args: argparse.Namespace) -> Post:
    if args.local:
        return _local_post()
    return _http_post(args.url or os.environ.get(URL_ENV) or DEFAULT_URL, args.timeout)


def _read_input(name: str) -> bytes:
    # Raw bytes go to the service unparsed: it alone decides what is malformed, so the
    # CLI and HTTP callers get the same 400 for the same file.
    if name == "-":
        return sys.stdin.buffer.read()
    try:
        return Path(name).read_bytes()
    except OSError as e:
        raise CliError(f"cannot read {name}: {e.strerror or e}") from e


def _print_answer(reply: Reply) -> None:
    print(reply.text.rstrip("\n"))


def _print_problem(reply: Reply) -> None:
    if reply.document() is not None:
        print(reply.text.rstrip("\n"), file=sys.stderr)
    else:
        shown = reply.text[:500].rstrip("\n")
        print(f"certimatch: HTTP {reply.status} ({reply.content_type or 'no content type'}): "
              f"{shown}", file=sys.stderr)


def _solve_exit(reply: Reply) -> int:
    doc = reply.document()
    if reply.status == 200 and doc is not None and doc.get("status") == "optimal":
        _print_answer(reply)
        return EXIT_OK
    _print_problem(reply)
    # Invalid problems are 422 too; only the problem type tells "cannot be met" apart.
    if reply.status == 422 and doc is not None and str(doc.get("type", "")).endswith(
            "infeasible"):
        return EXIT_NEGATIVE
    return EXIT_ERROR


def _verify_exit(reply: Reply) -> int:
    doc = reply.document()
    if reply.status == 200 and doc is not None and isinstance(doc.get("valid"), bool):
        _print_answer(reply)
        return EXIT_OK if doc["valid"] else EXIT_NEGATIVE
    _print_problem(reply)
    return EXIT_ERROR


def _cmd_solve(args: argparse.Namespace) -> int:
    body = _read_input(args.file)
    return _solve_exit(_poster(args)("/v1/solve", body))


def _cmd_verify(args: argparse.Namespace) -> int:
    body = _read_input(args.file)
    return _verify_exit(_poster(args)("/v1/verify", body))


# --- running gunicorn -------------------------------------------------------------------

def _source_root() -> Path:
    """The folder holding the ``service`` package: the checkout, or site-packages."""
    return Path(__file__).resolve().parent.parent


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
    env = dict(os.environ)
    parts = [str(_source_root()), env.get("PYTHONPATH", "")]
    env["PYTHONPATH"] = os.pathsep.join(p for p in parts if p)
    return env


def _cmd_serve(args: argparse.Namespace) -> int:
    argv = _gunicorn_argv(args.host, args.port, args.workers)
    sys.stdout.flush()
    sys.stderr.flush()
    # exec, not a child: gunicorn becomes this process, so a supervisor's signals reach
    # its master directly and there is no second process to forward them.
    os.execve(argv[0], argv, _child_env())
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


# --- the demo ---------------------------------------------------------------------------

def demo_problem(name: str) -> dict[str, Any]:
    """One of the demo problems shipped as package data (see ``DEMO_FILES``)."""
    data = (resources.files("service") / "demo" / name).read_bytes()
    problem: dict[str, Any] = json.loads(data)
    return problem


def _num(x: Any) -> str:
    """A JSON number as a person writes it: 589 rather than 589.0."""
    if isinstance(x, float) and x.is_integer():
        return str(int(x))
    return str(x)


def _table(rows: Sequence[Sequence[str]], right: frozenset[int] = frozenset()) -> list[str]:
    """Rows padded to common column widths; columns in ``right`` are right-aligned."""
    if not rows:
        return []
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    return ["  " + "  ".join(c.rjust(w) if i in right else c.ljust(w)
                             for i, (c, w) in enumerate(zip(r, widths, strict=True))).rstrip()
            for r in rows]


def _verdict_line(verdict: dict[str, Any]) -> str:
    checks = verdict.get("checks", [])
    failed = [str(c.get("name")) for c in checks if not c.get("passed")]
    if verdict.get("valid") is True:
        return f"certificate check: VALID ({len(checks) - len(failed)} checks passed)"
    return (f"certificate check: INVALID ({len(failed)} of {len(checks)} checks failed: "
            f"{', '.join(failed)})")


def _sinks_by_id(problem: dict[str, Any]) -> dict[str, dict[str, Any]]:
    return {s["id"]: s for s in problem["sinks"]}


def _print_repair(problem: dict[str, Any], answer: dict[str, Any]) -> None:
    sinks = _sinks_by_id(problem)
    slots = sum(s.get("supply", 1) for s in problem["sources"])
    print(f"== Repair tickets: {len(problem['sources'])} technicians, {slots} slots, "
          f"{len(sinks)} tickets ==")
    print(f"solved as {answer['shape']} by {answer['solver']}")
    print()
    rows = [("technician", "", "ticket", "travel min")]
    rows += [(r["from"], "->", r["to"], _num(r["cost"])) for r in answer["allocation"]]
    print("\n".join(_table(rows, frozenset({3}))))
    print()
    waiting = [(u["id"], f"x{u['amount']}" if u["amount"] != 1 else "",
                f"waits, penalty {_num(sinks[u['id']]['penalty'])}"
                if "penalty" in sinks[u["id"]] else "URGENT, not covered")
               for u in answer["unmet"]]
    print("tickets left waiting:" + ("" if waiting else " none"))
    print("\n".join(_table(waiting)))
    unused = [(u["id"], f"{u['amount']} slot{'s' if u['amount'] != 1 else ''}")
              for u in answer["unused"]]
    print("unused slots:" + ("" if unused else " none"))
    print("\n".join(_table(unused)))
    print(f"objective: {_num(answer['objective'])} "
          "(travel minutes + penalties of waiting tickets)")


def _print_parts(problem: dict[str, Any], answer: dict[str, Any]) -> None:
    arcs = problem["arcs"]
    print(f"== Spare-parts network: {len(problem['sources'])} warehouses -> "
          f"{len(problem.get('nodes', []))} depots -> {len(problem['sinks'])} vans ==")
    print(f"solved as {answer['shape']} by {answer['solver']}")
    print()
    rows = [("from", "", "to", "units", "unit cost", "cost", "capacity")]
    for r in answer["allocation"]:
        arc = arcs[r["arc"]] if "arc" in r else {}
        cap = arc.get("capacity")
        rows.append((r["from"], "->", r["to"], str(r["flow"]), _num(arc.get("cost", "?")),
                     _num(r["cost"]), "-" if cap is None else str(cap)))
    print("\n".join(_table(rows, frozenset({3, 4, 5, 6}))))
    print()
    sinks = _sinks_by_id(problem)
    short = [(u["id"], f"{u['amount']} units short",
              f"penalty {_num(sinks[u['id']]['penalty'])} per unit"
              if "penalty" in sinks[u["id"]] else "HARD demand")
             for u in answer["unmet"]]
    print("vans short:" + ("" if short else " none"))
    print("\n".join(_table(short)))
    left = [(u["id"], f"{u['amount']} units") for u in answer["unused"]]
    print("stock left in warehouses:" + ("" if left else " none"))
    print("\n".join(_table(left, frozenset({1}))))
    print(f"objective: {_num(answer['objective'])} (shipping + penalties of short vans)")


_RENDERERS: dict[str, Callable[[dict[str, Any], dict[str, Any]], None]] = {
    "repair_tickets.json": _print_repair,
    "parts_network.json": _print_parts,
}


def _run_demo(post: Post) -> int:
    """Solve and verify every demo problem through ``post``; print what came back."""
    code = EXIT_OK
    for i, name in enumerate(DEMO_FILES):
        if i:
            print()
        problem = demo_problem(name)
        solved = post("/v1/solve", json.dumps(problem).encode())
        answer = solved.document()
        if solved.status != 200 or answer is None:
            print(f"{name}: /v1/solve answered {solved.status}", file=sys.stderr)
            _print_problem(solved)
            code = EXIT_ERROR
            continue
        _RENDERERS[name](problem, answer)
        checked = post("/v1/verify", json.dumps({**problem, "answer": answer}).encode())
        verdict = checked.document()
        if checked.status != 200 or verdict is None:
            print(f"{name}: /v1/verify answered {checked.status}", file=sys.stderr)
            _print_problem(checked)
            code = EXIT_ERROR
            continue
        print(_verdict_line(verdict))
        if verdict.get("valid") is not True:
            code = EXIT_ERROR
    sys.stdout.flush()
    return code


def _cmd_demo(args: argparse.Namespace) -> int:
    host = DEFAULT_HOST
    # Checked first: otherwise gunicorn retries the bind while /healthz polling could
    # reach whatever already listens there and demo someone else's server.
    if not _port_free(host, args.port):
        raise CliError(f"port {args.port} on {host} is in use; choose another with --port")
    base = f"http://{host}:{args.port}"
    argv = _gunicorn_argv(host, args.port, 2, control_socket=False)
    # The server's logs (the deploy config sends its access log to stdout) go to our
    # stderr, so that stdout holds the demo's tables alone.
    proc = subprocess.Popen(argv, env=_child_env(), stdout=2)
    serving = False
    try:
        if not _wait_healthy(base, proc, DEMO_START_SECONDS):
            state = ("exited with status " + str(proc.returncode) if proc.poll() is not None
                     else f"did not answer /healthz within {DEMO_START_SECONDS:g} s")
            raise CliError(f"the server at {base} {state}")
        code = _run_demo(_http_post(base, timeout=60.0))
        if args.exit or code != EXIT_OK:
            return code
        print(f"\nserver running at {base} -- press Ctrl-C to stop", flush=True)
        serving = True
        proc.wait()
        print(f"certimatch: the server stopped by itself (status {proc.returncode})",
              file=sys.stderr)
        return EXIT_ERROR
    except KeyboardInterrupt:
        # Ctrl-C is how a serving demo is meant to end; before that it cuts the demo short.
        return EXIT_OK if serving else EXIT_INTERRUPTED
    finally:
        _stop(proc)


# --- command line -----------------------------------------------------------------------

def _port(text: str) -> int:
    value = int(text)
    if not 1 <= value <= 65535:
        raise argparse.ArgumentTypeError(f"must be from 1 to 65535, got {value}")
    return value


def _positive(text: str) -> int:
    value = int(text)
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="certimatch",
        description="Least-cost allocation of supply to demand, with a proof of optimality.")
    p.add_argument("--version", action="version", version=f"certimatch {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    serve = sub.add_parser("serve", help="run the HTTP service under gunicorn",
                           description="Run the HTTP service under gunicorn, with "
                           "deploy/gunicorn.conf.py when the checkout has one.")
    serve.add_argument("--host", help=f"address to bind (default: the config file's bind, "
                       f"else {DEFAULT_HOST})")
    serve.add_argument("--port", type=_port,
                       help=f"port to bind (default: the config file's, else {DEFAULT_PORT})")
    serve.add_argument("--workers", type=_positive, default=None,
                       help="worker processes (default: the config file's, else 2)")
    serve.set_defaults(handler=_cmd_serve)

    for name, handler, what in (
            ("solve", _cmd_solve, "a problem"),
            ("verify", _cmd_verify, "a problem with an \"answer\" to check")):
        cmd = sub.add_parser(name, help=f"send {what} to /v1/{name}",
                             description=f"Send {what} to /v1/{name} and print the answer. "
                             "Exit 0 optimal/valid, 2 infeasible/invalid, 1 otherwise.")
        cmd.add_argument("file", metavar="FILE", help="JSON file, or - for standard input")
        where = cmd.add_mutually_exclusive_group()
        where.add_argument("--url", help=f"service URL (default: ${URL_ENV} or {DEFAULT_URL})")
        where.add_argument("--local", action="store_true",
                           help="answer in this process, without a server")
        cmd.add_argument("--timeout", type=float, default=300.0,
                         help="seconds to wait for the server (%(default)s)")
        cmd.set_defaults(handler=handler)

    demo = sub.add_parser("demo", help="start a server and solve the demo problems",
                          description="Start gunicorn on 127.0.0.1, solve and verify the "
                          "demo problems, print them, then keep serving until Ctrl-C.")
    demo.add_argument("--port", type=_port, default=DEFAULT_PORT,
                      help="port to bind (%(default)s)")
    demo.add_argument("--exit", action="store_true",
                      help="stop the server after the demo instead of serving on")
    demo.set_defaults(handler=_cmd_demo)
    return p


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``certimatch`` console script; returns the exit code."""
    try:
        args = _parser().parse_args(argv)
    except SystemExit as e:
        # argparse exits 2 on a usage error, which scripts would read as "infeasible".
        return EXIT_OK if e.code in (0, None) else EXIT_ERROR
    try:
        code: int = args.handler(args)
    except CliError as e:
        print(f"certimatch: {e}", file=sys.stderr)
        return EXIT_ERROR
    return code


if __name__ == "__main__":
    sys.exit(main())
