"""The ``certimatch`` command: run the server, send it problems, report on answers, demo.

``solve``, ``verify`` and ``report`` are made for scripts (cron jobs, CI steps), so their
exit codes carry the verdict and stdout carries only the result (or -o FILE does)::

    0  solve: an optimal allocation        verify, report: the answer is valid
    2  solve: hard demand cannot be met    verify, report: the answer is not valid
    1  anything else: unreadable file, invalid problem, no server, server error

Every other answer (an RFC 9457 problem document) goes to stderr as received. ``solve``
also reads a CSV cost table (service/tables_io.py) and writes a table or CSV; ``report``
runs the verifier in this process and renders the audit page (service/report.py).
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
from service.auth import check_exposure, load_tokens
from service.settings import load_settings

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


def _target(args: argparse.Namespace) -> tuple[Post, str | None]:
    """The way to the service, and its URL for progress lines (None: this process)."""
    if args.local:
        return _local_post(), None
    base = args.url or os.environ.get(URL_ENV) or DEFAULT_URL
    return _http_post(base, args.timeout), base.rstrip("/")


def _poster(args: argparse.Namespace) -> Post:
    return _target(args)[0]


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


def _failure_exit(reply: Reply) -> int:
    """Print a reply that is not an answer to stderr; 2 when hard demand cannot be met."""
    doc = reply.document()
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


# --- progress, input and output ---------------------------------------------------------

#: Bodies from this size on get progress lines without --progress: they take seconds.
PROGRESS_BYTES = 1_000_000


class _Progress:
    """Lines on stderr about slow steps; stdout stays the result alone.

    ``auto`` speaks for big bodies or when stderr is a terminal, so a cron job's log holds
    the timings of long solves but a quick solve in a script stays silent.
    """

    def __init__(self, mode: str) -> None:
        self.mode = mode
        self.on = mode == "on"

    def size(self, n_bytes: int) -> None:
        if self.mode == "auto":
            self.on = n_bytes >= PROGRESS_BYTES or sys.stderr.isatty()

    def say(self, message: str) -> None:
        if self.on:
            print(f"certimatch: {message}", file=sys.stderr, flush=True)


def _progress(args: argparse.Namespace) -> _Progress:
    return _Progress("off" if args.quiet else "on" if args.progress else "auto")


def _size(n: int) -> str:
    if n >= 1_000_000:
        return f"{n / 1_000_000:.1f} MB"
    return f"{n / 1000:.1f} kB" if n >= 1000 else f"{n} bytes"


def _count_of(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


def _timed_post(post: Post, where: str | None, path: str, body: bytes,
                progress: _Progress) -> Reply:
    progress.say(f"posting {_size(len(body))} to {where}{path}" if where else
                 f"sending {_size(len(body))} to {path} in this process")
    started = time.monotonic()
    reply = post(path, body)
    progress.say(f"answered {reply.status} in {time.monotonic() - started:.1f} s")
    return reply


def _input_kind(args: argparse.Namespace) -> str:
    if args.input:
        return str(args.input)
    return "csv" if args.file.lower().endswith(".csv") else "json"


def _delimiter(text: str) -> str:
    text = {"tab": "\t", "\\t": "\t"}.get(text, text)
    if len(text) != 1:
        raise argparse.ArgumentTypeError(f"must be one character (or 'tab'), got {text!r}")
    return text


def _overrides(args: argparse.Namespace) -> dict[str, str]:
    found = {"objective": args.objective, "unmet_demand": args.unmet_demand}
    return {k: v for k, v in found.items() if v is not None}


def _reject_constant(name: str) -> Any:
    raise ValueError(f"{name} is not a JSON number")


def _parse_json(raw: bytes) -> Any:
    """Strict JSON like the service's: no NaN or Infinity."""
    return json.loads(raw, parse_constant=_reject_constant)


@dataclass
class _Problem:
    """What ``solve`` sends: the body, and the problem as a dict when it could be read."""

    body: bytes
    problem: dict[str, Any] | None
    note: str = ""


def _load_problem(args: argparse.Namespace, need_dict: bool) -> _Problem:
    raw = _read_input(args.file)
    overrides = _overrides(args)
    if _input_kind(args) == "csv":
        from service.tables_io import TableError, TableLayout, read_cost_table

        try:
            text = raw.decode("utf-8-sig")   # spreadsheets' "CSV UTF-8" starts with a BOM
        except UnicodeDecodeError as e:
            raise CliError(f"{args.file} is not UTF-8 text ({e.reason} at byte {e.start}); "
                           "save the sheet as CSV in UTF-8") from None
        layout = TableLayout(args.supply_column, args.demand_row, args.penalty_row,
                             args.delimiter)
        try:
            table = read_cost_table(text, layout)
        except TableError as e:
            raise CliError(f"{args.file}: {e}") from None
        problem = {**table.problem, **overrides}
        rows, cols = table.shape
        note = (f"read {args.file}: {rows} sources x {cols} sinks, {table.allowed} of "
                f"{rows * cols} pairs allowed")
        return _Problem(json.dumps(problem, separators=(",", ":")).encode(), problem, note)
    if not overrides and not need_dict:
        return _Problem(raw, None)
    try:
        parsed = _parse_json(raw)
    except ValueError:
        parsed = None
    if not isinstance(parsed, dict):
        # Sent as it is: the service's 400 or 422 says what is wrong, as it would over HTTP.
        return _Problem(raw, None)
    if not overrides:
        return _Problem(raw, parsed)
    parsed.update(overrides)
    return _Problem(json.dumps(parsed, separators=(",", ":")).encode(), parsed)


def _write_output(text: str, output: str | None) -> None:
    """Write to stdout, or to ``output`` whole or not at all.

    A cron job may pick the file up at any moment, so it is written beside its final name
    and renamed into place: a reader sees the old file or the new one, never half of one.
    """
    if not text.endswith("\n"):
        text += "\n"
    if output is None or output == "-":
        sys.stdout.write(text)
        sys.stdout.flush()
        return
    target = Path(output)
    temporary = target.with_name(f".{target.name}.{os.getpid()}.tmp")
    try:
        temporary.write_text(text, encoding="utf-8")
        os.replace(temporary, target)
    except OSError as e:
        temporary.unlink(missing_ok=True)
        raise CliError(f"cannot write {output}: {e.strerror or e}") from e


# --- solve ------------------------------------------------------------------------------

def _answer_table(problem: dict[str, Any] | None, answer: dict[str, Any],
                  verdict_line: str) -> str:
    """The answer as aligned text: allocation, unmet, unused, objective, verdict."""
    sinks = {str(s.get("id")): s for s in (problem or {}).get("sinks", [])}
    maximize = (problem or {}).get("objective") == "max"
    lines = [f"optimal allocation ({answer.get('shape', '?')}, solver "
             f"{answer.get('solver', '?')})", ""]
    rows = [("from", "to", "flow", "score" if maximize else "cost")]
    rows += [(str(r["from"]), str(r["to"]), _num(r["flow"]), _num(r.get("cost", "")))
             for r in answer["allocation"]]
    flow = sum(r["flow"] for r in answer["allocation"])
    total = sum(r.get("cost", 0) for r in answer["allocation"])
    rows.append(("total", "", _num(flow), _num(round(total, 6))))
    lines += _table(rows, frozenset({2, 3}))
    lines.append("")

    def kind(sid: str) -> str:
        sink = sinks.get(sid)
        if sink is None:
            return ""
        if sink.get("penalty") is None:
            return "hard demand"
        return f"soft, penalty {_num(sink['penalty'])} per unit"

    unmet = [("sink", "unmet", "kind")] + [(str(u["id"]), _num(u["amount"]), kind(str(u["id"])))
                                            for u in answer["unmet"]]
    lines.append("unmet demand:" + ("" if answer["unmet"] else " none"))
    if answer["unmet"]:
        lines += _table(unmet, frozenset({1}))
    unused = [("source", "unused")] + [(str(u["id"]), _num(u["amount"]))
                                       for u in answer["unused"]]
    lines.append("unused supply:" + ("" if answer["unused"] else " none"))
    if answer["unused"]:
        lines += _table(unused, frozenset({1}))
    lines.append("")
    what = ("greatest total score less penalties" if maximize
            else "least total cost plus penalties")
    lines.append(f"objective: {_num(answer['objective'])} ({what})")
    lines.append(f"units routed: {_num(answer.get('flow_value', flow))}")
    lines.append(verdict_line)
    return "\n".join(lines) + "\n"


def _check_answer(post: Post, where: str | None, problem: dict[str, Any] | None,
                  answer: dict[str, Any], progress: _Progress) -> tuple[str, bool]:
    """(verdict line, valid) from /v1/verify, for the table's last line."""
    if problem is None:
        return "certificate check: not run (the problem could not be read as JSON here)", False
    body = json.dumps({**problem, "answer": answer}, separators=(",", ":")).encode()
    reply = _timed_post(post, where, "/v1/verify", body, progress)
    verdict = reply.document()
    if reply.status != 200 or verdict is None or not isinstance(verdict.get("valid"), bool):
        _print_problem(reply)
        return f"certificate check: not run (/v1/verify answered {reply.status})", False
    return _verdict_line(verdict), verdict["valid"] is True


def _cmd_solve(args: argparse.Namespace) -> int:
    progress = _progress(args)
    loaded = _load_problem(args, need_dict=args.format == "table")
    progress.size(len(loaded.body))
    if loaded.note:
        progress.say(loaded.note)
    post, where = _target(args)
    reply = _timed_post(post, where, "/v1/solve", loaded.body, progress)
    answer = reply.document()
    if reply.status != 200 or answer is None or answer.get("status") != "optimal":
        return _failure_exit(reply)
    progress.say(f"optimal: objective {_num(answer.get('objective'))}, "
                 f"{_num(answer.get('flow_value'))} units routed, "
                 f"{_count_of(len(answer.get('unmet', [])), 'sink')} short")
    code = EXIT_OK
    if args.format == "csv":
        from service.tables_io import allocation_csv

        text = allocation_csv(answer)
    elif args.format == "table":
        line, valid = _check_answer(post, where, loaded.problem, answer, progress)
        text = _answer_table(loaded.problem, answer, line)
        # An answer the service itself cannot verify is a fault, not a result to act on.
        code = EXIT_OK if valid else EXIT_ERROR
    else:
        text = reply.text
    _write_output(text, args.output)
    if args.output not in (None, "-"):
        progress.say(f"wrote {args.format} to {args.output}")
    return code


def _cmd_verify(args: argparse.Namespace) -> int:
    body = _read_input(args.file)
    return _verify_exit(_poster(args)("/v1/verify", body))


# --- report -----------------------------------------------------------------------------

def _read_json_object(name: str, what: str) -> dict[str, Any]:
    try:
        doc = _parse_json(_read_input(name))
    except ValueError as e:
        raise CliError(f"{name} is not valid JSON: {e}") from None
    if not isinstance(doc, dict):
        raise CliError(f"{name} must hold a JSON object ({what}), not {type(doc).__name__}")
    return doc


def _report_body(args: argparse.Namespace) -> dict[str, Any]:
    if _input_kind(args) == "csv":
        loaded = _load_problem(args, need_dict=True)
        assert loaded.problem is not None     # a CSV table always becomes a dict
        body = loaded.problem
    else:
        body = {**_read_json_object(args.file, "a problem"), **_overrides(args)}
    if args.answer is not None:
        if "answer" in body:
            raise CliError(f"{args.file} already holds an \"answer\"; leave out --answer")
        body["answer"] = _read_json_object(args.answer, "an answer from solve")
    elif "answer" not in body:
        raise CliError(f"{args.file} holds no \"answer\": give the answer file with "
                       "--answer ANSWER.json")
    return body


def _report_format(args: argparse.Namespace) -> str:
    if args.format:
        return str(args.format)
    return "svg" if (args.output or "").lower().endswith(".svg") else "html"


def _cmd_report(args: argparse.Namespace) -> int:
    progress = _progress(args)
    body = _report_body(args)
    # Imported here: numpy and the verifier are not needed by serve or remote solve.
    from service.errors import ServiceError
    from service.report import build_report
    from service.settings import load_settings

    try:
        settings = load_settings()
    except ValueError as e:
        raise CliError(str(e)) from e
    fmt = _report_format(args)
    source = args.file if args.answer is None else f"{args.file} + {args.answer}"
    started = time.monotonic()
    try:
        text, valid = build_report(body, settings, fmt, source)
    except ServiceError as e:
        print(json.dumps(e.problem()), file=sys.stderr)
        return EXIT_ERROR
    progress.say(f"checked and rendered in {time.monotonic() - started:.1f} s: "
                 f"{'VALID' if valid else 'NOT VALID'}")
    _write_output(text, args.output)
    if args.output not in (None, "-"):
        progress.say(f"wrote {fmt} report to {args.output}")
    return EXIT_OK if valid else EXIT_NEGATIVE


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


_MAIN_EPILOG = f"""\
examples:
  certimatch serve                          run the service on {DEFAULT_HOST}:{DEFAULT_PORT}
  certimatch solve problem.json > answer.json
                                            solve with the running service
  certimatch solve costs.csv --format table --local
                                            a cost table from a spreadsheet, solved here
  certimatch solve costs.csv --format csv -o allocation.csv
                                            the allocation as a sheet, for a spreadsheet
  certimatch verify problem_with_answer.json
                                            check any answer against its problem
  certimatch report problem.json --answer answer.json -o report.html
                                            an audit report to open in a browser
  certimatch demo                           start a server and solve two invented scenarios

exit codes of solve, verify and report:
  0  solve: optimal allocation     verify, report: the answer is valid
  2  solve: hard demand cannot be met (only with --unmet-demand reject)
     verify, report: the answer is NOT valid (report still writes the page)
  1  anything else: unreadable file, invalid problem, no server, server error,
     wrong options

"certimatch COMMAND --help" explains one command. Without --url, solve and verify
use ${URL_ENV}, else {DEFAULT_URL}.
"""

_CSV_HELP = """\
CSV cost tables (FILE ending in .csv, or --input csv):
  ,ticket-1,ticket-2,ticket-3,supply     first row: a corner cell, then one sink id
  tech-a,10,25,,2                        per column; each further row: a source id,
  tech-b,12,,15,1                        then its cost to each sink. An empty cell
  demand,1,2,1,                          means the pair is not allowed.
  penalty,,,30,
  Optional: a column "supply" (each source's supply), a row "demand" (each sink's
  demand), a row "penalty" (cost of each unit left unmet; empty = hard demand).
  Without them every supply and demand is 1 and all demand is hard. Empty cells
  in them mean the same defaults. Spaces around cells are ignored; a UTF-8 byte
  order mark (as spreadsheets write "CSV UTF-8") is fine. Decimals take a dot.
"""

_SOLVE_EPILOG = _CSV_HELP + f"""
output (--format):
  json   the answer document exactly as the service returns it (default)
  table  allocation, unmet demand, unused supply, objective, aligned for reading,
         and the verdict of /v1/verify on the answer (exit 1 if it is not valid)
  csv    the allocation as rows from,to,flow,cost with a header row; ids that a
         spreadsheet would run as a formula (starting with = + - @) get a leading '

progress lines go to stderr when the body is {_size(PROGRESS_BYTES)} or more or stderr
is a terminal; with --progress always, with --quiet never. Errors from the service go
to stderr as the RFC 9457 JSON document it sent.

examples:
  certimatch solve problem.json --local
  certimatch solve costs.csv --objective max --format table
  certimatch solve costs.csv --unmet-demand reject --format csv -o plan.csv
  certimatch solve - --url http://solver.internal:8080 < problem.json

exit codes: 0 optimal; 2 hard demand cannot be met (--unmet-demand reject);
1 anything else (nothing is written to -o FILE then).
"""

_REPORT_EPILOG = _CSV_HELP + """
The page is one HTML file with inline styles and drawings, no script and nothing
loaded from anywhere: the verdict of the independent verifier (run here, on this
machine, not taken from the answer), every check, a heat map of reduced costs
with the chosen pairs ringed (or a diagram of the allocation for networks and
larger problems), unmet demand, unused supply, and what the certificate proves.

examples:
  certimatch solve problem.json > answer.json
  certimatch report problem.json --answer answer.json -o report.html
  certimatch report problem_with_answer.json -o heatmap.svg
  certimatch report costs.csv --answer answer.json -o report.html

exit codes: 0 the answer is valid; 2 it is NOT valid (the report is still written);
1 anything else (unreadable file, not a problem with an answer).
"""


def _add_problem_options(cmd: argparse.ArgumentParser) -> None:
    given = cmd.add_argument_group("problem")
    given.add_argument("--input", choices=("json", "csv"),
                       help="how to read FILE (default: csv for a name ending in .csv, "
                       "else json)")
    given.add_argument("--objective", choices=("min", "max"),
                       help="min: least total cost; max: greatest total score (default: "
                       "the JSON file's, else min); replaces the file's field")
    given.add_argument("--unmet-demand", choices=("minimize", "reject"),
                       help="minimize: meet as much hard demand as possible; reject: exit 2 "
                       "if any hard demand cannot be met (default: the file's, else minimize)")
    table = cmd.add_argument_group("CSV cost tables")
    table.add_argument("--supply-column", default="supply", metavar="NAME",
                       help="header of the supply column ('' for none; default %(default)s)")
    table.add_argument("--demand-row", default="demand", metavar="NAME",
                       help="label of the demand row ('' for none; default %(default)s)")
    table.add_argument("--penalty-row", default="penalty", metavar="NAME",
                       help="label of the penalty row ('' for none; default %(default)s)")
    table.add_argument("--delimiter", type=_delimiter, default=",", metavar="CHAR",
                       help="cell separator, one character or 'tab' (default ,)")


def _add_talk_options(cmd: argparse.ArgumentParser) -> None:
    where = cmd.add_mutually_exclusive_group()
    where.add_argument("--url", help=f"service URL (default: ${URL_ENV} or {DEFAULT_URL})")
    where.add_argument("--local", action="store_true",
                       help="answer in this process, without a server")
    cmd.add_argument("--timeout", type=float, default=300.0,
                     help="seconds to wait for the server (%(default)s)")


def _add_chatter_options(cmd: argparse.ArgumentParser) -> None:
    chatter = cmd.add_mutually_exclusive_group()
    chatter.add_argument("-q", "--quiet", action="store_true",
                         help="no progress lines on stderr")
    chatter.add_argument("--progress", action="store_true",
                         help="progress lines on stderr even for small problems")


def _parser() -> argparse.ArgumentParser:
    raw = argparse.RawDescriptionHelpFormatter
    p = argparse.ArgumentParser(
        prog="certimatch", formatter_class=raw, epilog=_MAIN_EPILOG,
        description="Least-cost allocation of supply to demand, with a proof of optimality.\n\n"
        "Sources (who can do work, and how much) are matched to sinks (what needs doing)\n"
        "at the least total cost; every answer carries a certificate, potentials and a\n"
        "cut, that anyone can check without trusting the service.")
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
    serve.add_argument("--insecure", action="store_true",
                       help="allow a non-loopback address with no bearer tokens "
                       "(CERTIMATCH_TOKENS); anyone who reaches it can use the service")
    serve.set_defaults(handler=_cmd_serve)

    solve = sub.add_parser(
        "solve", help="solve a problem (JSON, or a CSV cost table)", formatter_class=raw,
        epilog=_SOLVE_EPILOG,
        description="Send a problem to /v1/solve and write the answer: the least-cost\n"
        "allocation with its certificate. FILE is a JSON problem (see openapi.yaml) or a\n"
        "CSV cost table (below); - reads standard input.")
    solve.add_argument("file", metavar="FILE", help="the problem: JSON or CSV, - for stdin")
    _add_problem_options(solve)
    out = solve.add_argument_group("output")
    out.add_argument("--format", choices=("json", "table", "csv"), default="json",
                     help="json (default), table or csv; see below")
    out.add_argument("-o", "--output", metavar="FILE",
                     help="write to FILE instead of stdout (replaced whole, only on success)")
    _add_chatter_options(solve)
    _add_talk_options(solve)
    solve.set_defaults(handler=_cmd_solve)

    verify = sub.add_parser(
        "verify", help="check an answer against its problem",
        description="Send a problem with an \"answer\" to /v1/verify and print the verdict "
        "and every check. Exit 0 valid, 2 not valid, 1 otherwise.")
    verify.add_argument("file", metavar="FILE",
                        help="JSON problem with an \"answer\", or - for standard input")
    _add_talk_options(verify)
    verify.set_defaults(handler=_cmd_verify)

    report = sub.add_parser(
        "report", help="write an audit report (HTML page or SVG picture) for an answer",
        formatter_class=raw, epilog=_REPORT_EPILOG,
        description="Check an answer with the independent verifier, here in this process,\n"
        "and write a page an auditor can read: the verdict, the checks, a picture of the\n"
        "allocation and what the certificate proves.")
    report.add_argument("file", metavar="FILE",
                        help="the problem (JSON or CSV), with an \"answer\" unless --answer "
                        "is given; - for stdin")
    report.add_argument("--answer", metavar="ANSWER",
                        help="the answer, as certimatch solve or /v1/solve wrote it")
    _add_problem_options(report)
    out = report.add_argument_group("output")
    out.add_argument("--format", choices=("html", "svg"),
                     help="html: the whole page; svg: the picture alone (default: svg for "
                     "an -o name ending in .svg, else html)")
    out.add_argument("-o", "--output", metavar="FILE",
                     help="write to FILE instead of stdout (replaced whole)")
    _add_chatter_options(report)
    report.set_defaults(handler=_cmd_report)

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
