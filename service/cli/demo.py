"""``certimatch demo``: start a server, solve and verify the invented demo scenarios."""

from __future__ import annotations

import argparse
import json
import signal
import subprocess
import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from importlib import resources
from types import FrameType
from typing import Any

from service.cli.credentials import resolve_token
from service.cli.serve import _child_env, _gunicorn_argv, _port_free, _stop, _wait_healthy
from service.cli.talk import (
    DEFAULT_HOST,
    EXIT_ERROR,
    EXIT_INTERRUPTED,
    EXIT_OK,
    EXIT_TERMINATED,
    CliError,
    Post,
    _print_problem,
)
from service.cli.text import _num, _table, _verdict_line
from service.cli.transport import _http_post

DEMO_FILES = ("repair_tickets.json", "parts_network.json")

#: How long ``demo`` waits for a fresh server to answer /healthz.
DEMO_START_SECONDS = 20.0

# --- the demo ---------------------------------------------------------------------------

def demo_problem(name: str) -> dict[str, Any]:
    """One of the demo problems shipped as package data (see ``DEMO_FILES``)."""
    data = (resources.files("service") / "demo" / name).read_bytes()
    problem: dict[str, Any] = json.loads(data)
    return problem


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


def _posted_document(post: Post, path: str, doc: dict[str, Any], name: str
                     ) -> dict[str, Any] | None:
    """POST ``doc``; the 200 answer, or None after printing what came back instead."""
    reply = post(path, json.dumps(doc).encode())
    answer = reply.document()
    if reply.status != 200 or answer is None:
        print(f"{name}: {path} answered {reply.status}", file=sys.stderr)
        _print_problem(reply)
        return None
    return answer


def _run_demo(post: Post) -> int:
    """Solve and verify every demo problem through ``post``; print what came back."""
    code = EXIT_OK
    for i, name in enumerate(DEMO_FILES):
        if i:
            print()
        problem = demo_problem(name)
        answer = _posted_document(post, "/v1/solve", problem, name)
        if answer is None:
            code = EXIT_ERROR
            continue
        _RENDERERS[name](problem, answer)
        verdict = _posted_document(post, "/v1/verify", {**problem, "answer": answer}, name)
        if verdict is None:
            code = EXIT_ERROR
            continue
        print(_verdict_line(verdict))
        if verdict.get("valid") is not True:
            code = EXIT_ERROR
    sys.stdout.flush()
    return code


class _Terminated(BaseException):
    """SIGTERM arrived; raised like KeyboardInterrupt so that the server is stopped."""


class _Sigterm:
    """SIGTERM (systemd, docker stop, kill) ends the demo as Ctrl-C does, server included.

    While ``hold`` is set (the moment between starting gunicorn and holding it in a
    ``try`` whose ``finally`` stops it) the signal is only noted, and :meth:`release`
    raises it afterwards, so no SIGTERM can leave a server behind.
    """

    def __init__(self) -> None:
        self.hold = False
        self.pending = False

    def handler(self, signum: int, frame: FrameType | None) -> None:
        # Once is enough: a second SIGTERM while the server stops must not cut that short.
        signal.signal(signal.SIGTERM, signal.SIG_IGN)
        if self.hold:
            self.pending = True
            return
        raise _Terminated

    def release(self) -> None:
        self.hold = False
        if self.pending:
            raise _Terminated

    @contextmanager
    def installed(self) -> Iterator[_Sigterm]:
        try:
            previous = signal.signal(signal.SIGTERM, self.handler)
        except ValueError:          # not the main thread: signals cannot be caught here
            yield self
            return
        try:
            yield self
        finally:
            signal.signal(signal.SIGTERM, previous)


def _cmd_demo(args: argparse.Namespace) -> int:
    with _Sigterm().installed() as sigterm:
        try:
            return _run_server_and_demo(args, sigterm)
        except _Terminated:         # before the server was started: nothing to stop
            return EXIT_TERMINATED


def _run_server_and_demo(args: argparse.Namespace, sigterm: _Sigterm) -> int:
    token = resolve_token(args)
    host = DEFAULT_HOST
    # Checked first: otherwise gunicorn retries the bind while /healthz polling could
    # reach whatever already listens there and demo someone else's server.
    if not _port_free(host, args.port):
        raise CliError(f"port {args.port} on {host} is in use; choose another with --port")
    base = f"http://{host}:{args.port}"
    argv = _gunicorn_argv(host, args.port, 2, control_socket=False)
    # The server's logs (the deploy config sends its access log to stdout) go to our
    # stderr, so that stdout holds the demo's tables alone.
    serving = False
    sigterm.hold = True
    proc = subprocess.Popen(argv, env=_child_env(), stdout=2)
    try:
        sigterm.release()
        if not _wait_healthy(base, proc, DEMO_START_SECONDS):
            state = ("exited with status " + str(proc.returncode) if proc.poll() is not None
                     else f"did not answer /healthz within {DEMO_START_SECONDS:g} s")
            raise CliError(f"the server at {base} {state}")
        code = _run_demo(_http_post(base, 60.0, token))
        if args.exit or code != EXIT_OK:
            return code
        print(f"\nserver running at {base} -- press Ctrl-C (or send SIGTERM) to stop",
              flush=True)
        serving = True
        proc.wait()
        print(f"certimatch: the server stopped by itself (status {proc.returncode})",
              file=sys.stderr)
        return EXIT_ERROR
    except KeyboardInterrupt:
        # Ctrl-C is how a serving demo is meant to end; before that it cuts the demo short.
        return EXIT_OK if serving else EXIT_INTERRUPTED
    except _Terminated:
        return EXIT_OK if serving else EXIT_TERMINATED
    finally:
        _stop(proc)
