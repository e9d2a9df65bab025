"""The service describes itself: the OpenAPI document at ``/v1/openapi.yaml`` and a short
page at ``/`` with a worked example."""

from __future__ import annotations

import html
import json
import re
import shlex
from functools import cache
from importlib import metadata
from pathlib import Path, PurePosixPath
from typing import Any

from flask import Blueprint, Response, current_app, request

from service.errors import ServiceError
from service.http.body import current_settings
from service.solve.pipeline import solve_body

pages_bp = Blueprint("pages", __name__)

#: The worked example of the page at /: the README's, so that its explanation of the
#: certificate reads against the same numbers.
EXAMPLE: dict[str, Any] = {
    "sources": [{"id": "north", "supply": 2}, {"id": "south", "supply": 1}],
    "sinks": [{"id": "fridge"}, {"id": "oven"}, {"id": "washer", "penalty": 50}],
    "costs": [[20, 35, 60], [30, 25, None]],
}

#: RFC 9512 registers application/yaml for YAML documents such as this one.
YAML_CONTENT_TYPE = "application/yaml"
#: Where a wheel installs the spec (pyproject.toml, [tool.setuptools.data-files]).
SPEC_DATA_PATH = ("share", "certimatch", "openapi.yaml")


# --- the OpenAPI document ---------------------------------------------------------------

def openapi_path() -> Path | None:
    """Where this copy of the service finds openapi.yaml, or None.

    The contract lives at the top of the repository, beside pyproject.toml, not inside the
    package. A checkout (and so an editable install) reads it there, always current. A
    wheel carries it as a data file installed under ``<prefix>/share/certimatch/``; the
    distribution's own record says where that prefix is (a virtual environment, a user
    install, the system), so no install scheme is guessed.
    """
    checkout = Path(__file__).resolve().parents[2]
    if (checkout / "pyproject.toml").is_file() and (checkout / "openapi.yaml").is_file():
        return checkout / "openapi.yaml"
    # Every installed copy is asked, not only the first on sys.path: an editable install's
    # record lists no data files, and may sit beside a wheel's on an odd path.
    for dist in metadata.distributions(name="certimatch"):
        for f in dist.files or []:
            if PurePosixPath(str(f)).parts[-3:] == SPEC_DATA_PATH:
                path = Path(str(f.locate())).resolve()
                if path.is_file():
                    return path
    return None


@cache
def _openapi_bytes(path: Path) -> bytes:
    return path.read_bytes()


@pages_bp.get("/v1/openapi.yaml")
def openapi() -> Response:
    path = openapi_path()
    if path is None:
        raise ServiceError("the OpenAPI document is missing from this installation of the "
                           "service")
    return Response(_openapi_bytes(path), content_type=f"{YAML_CONTENT_TYPE}; charset=utf-8")


# --- the page at / ----------------------------------------------------------------------

_PAGE = """<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>certimatch</title>
<style>
  body {{ font: 16px/1.55 system-ui, -apple-system, "Segoe UI", sans-serif; color: #1f2528;
         background: #fafaf7; max-width: 54rem; margin: 0 auto; padding: 1.5rem 1.2rem 3rem; }}
  h1 {{ font-size: 1.7rem; margin: 0 0 .2rem; }}
  h2 {{ font-size: 1.2rem; margin: 2rem 0 .5rem; border-bottom: 1px solid #d8dad2; }}
  h3 {{ font-size: 1rem; margin: 1.3rem 0 .4rem; }}
  .lead {{ color: #4a5358; margin-top: 0; }}
  nav a {{ margin-right: 1.1rem; }}
  a {{ color: #155e75; }}
  code, pre {{ font-family: ui-monospace, "Cascadia Mono", Menlo, Consolas, monospace; }}
  pre {{ background: #f0f1eb; border: 1px solid #d8dad2; border-radius: 4px;
         padding: .7rem .9rem; overflow-x: auto; font-size: .84rem; line-height: 1.4; }}
  table {{ border-collapse: collapse; margin: .4rem 0; }}
  th, td {{ text-align: left; padding: .25rem .9rem .25rem 0; border-bottom: 1px solid #e3e4de; }}
  td.n {{ text-align: right; font-variant-numeric: tabular-nums; }}
</style>
</head>
<body>
<header>
<h1>certimatch</h1>
<p class="lead">Least-cost allocation of supply to demand over HTTP. Every answer comes with
an optimality certificate (potentials and a cut) that anyone can check.</p>
<nav>{nav}</nav>
</header>

<h2>Endpoints</h2>
<p>Every route of this service. The POST routes take a JSON body: following their link
only shows the 405 answer that says so; the OpenAPI document describes their bodies.</p>
<table>
<tr><th>method</th><th>path</th><th>what it does</th></tr>
{routes}</table>

<h2>A worked example</h2>
<p>Two technicians take repair tickets. <b>north</b> has two slots, <b>south</b> one. The
cost of a pair is its travel time; south cannot repair washers (<code>null</code>). The
washer may wait at a penalty of 50; the fridge and the oven must be served.</p>

<h3>Send it</h3>
<pre id="solve-command"><code>{command}</code></pre>

<h3>The answer</h3>
<table>
<tr><th>from</th><th>to</th><th>units</th><th>cost</th></tr>
{rows}</table>
<p>{unmet} Objective: <b>{objective}</b>.</p>
<pre id="solve-answer"><code>{answer}</code></pre>
<p>The service ends every answer with a <code>decision</code> object (its id in the
decision log, the time, the digests of problem and answer), left out here.</p>

<h3>Why it is optimal</h3>
<p>The certificate gives every source and sink a potential &pi;. The reduced cost of an arc
i&rarr;j is <code>cost &minus; &pi;(i) + &pi;(j)</code>: arcs carrying work have reduced cost
zero or below, unused arcs zero or above, and the dual objective computed from the
potentials equals the objective ({dual}), which no allocation can beat. To check it
yourself, send the problem with the answer added as <code>"answer"</code> to
<code>POST /v1/verify</code>.</p>
</body>
</html>
"""


#: What each route does, in the order the page lists them; a route the app has and this
#: table lacks is still listed (tests/http/test_edges.py wants every one described).
_ROUTES = {
    "/v1/solve": "solve a problem and certify the answer",
    "/v1/verify": "check any answer against its problem",
    "/v1/report": "the audit report of an answer, as an HTML page or an SVG picture",
    "/v1/openapi.yaml": "the wire format (OpenAPI 3.1)",
    "/healthz": "liveness probe: the process answers",
    "/readyz": "readiness probe: the process has solved a 1 \u00d7 1 problem correctly",
    "/metrics": "Prometheus metrics",
    "/v1/log/checkpoint": "the decision log's latest signed checkpoint",
    "/v1/log/consistency": "a consistency proof between two sizes of the log (?from=M&to=N)",
    "/v1/decisions": "decisions in log order (?after=ID&limit=N&caller=NAME)",
    "/v1/decisions/{decision_id}": "one decision with its problem, answer and inclusion proof",
    "/v1/decisions/{decision_id}/verify": "re-check a stored decision",
    "/v1/decisions/{decision_id}/report": "the audit report of a stored decision, with the "
                                          "log's verdict on its record",
    "/audit": "the decision log for people: newest first, by caller and date, with reports",
    "/": "this page",
}
_NAV = {"/v1/openapi.yaml": "OpenAPI document", "/audit": "decision log"}


#: Routes that answer only with a query parameter the page cannot choose.
_NEEDS_QUERY = {"/v1/log/consistency"}


def _route_cell(path: str) -> str:
    """The path as a link, or as text when following it bare would be an error."""
    code = f"<code>{html.escape(path)}</code>"
    return code if "{" in path or path in _NEEDS_QUERY else f'<a href="{path}">{code}</a>'


def _routes() -> list[tuple[str, list[str]]]:
    """(path, methods) of every route of this app: the described ones in their order, then
    any other, so that a new route can never be missing from the page."""
    found: dict[str, set[str]] = {}
    for rule in current_app.url_map.iter_rules():
        if rule.endpoint != "static":
            # the path as openapi.yaml writes it: /v1/decisions/{decision_id}
            path = re.sub(r"<(?:[^:<>]+:)?([^<>]+)>", r"{\1}", rule.rule)
            found.setdefault(path, set()).update(rule.methods or ())
    order = list(_ROUTES)
    paths = sorted(found, key=lambda p: (order.index(p) if p in order else len(order), p))
    return [(p, sorted(found[p] - {"HEAD", "OPTIONS"})) for p in paths]


def _example_answer() -> dict[str, Any]:
    # Solved on first use and kept: the service is deterministic, so the page shows what
    # this very process answers to the command it prints.
    state = current_app.extensions
    if "certimatch.example" not in state:
        state["certimatch.example"] = solve_body(EXAMPLE, current_settings())
    answer: dict[str, Any] = state["certimatch.example"]
    return answer


def _layout(doc: Any, depth: int, indent: str = "") -> str:
    """JSON with the first ``depth`` levels of objects one member per line (and lists of
    objects one object per line), the rest on one line each: short enough to read without
    scrolling, still valid JSON to copy."""
    inner = indent + "  "
    if isinstance(doc, list) and depth > 0 and doc and all(isinstance(x, dict) for x in doc):
        return "[\n" + ",\n".join(inner + json.dumps(x) for x in doc) + "\n" + indent + "]"
    if not isinstance(doc, dict) or depth == 0 or not doc:
        return json.dumps(doc)
    members = ",\n".join(f"{inner}{json.dumps(k)}: {_layout(v, depth - 1, inner)}"
                          for k, v in doc.items())
    return "{\n" + members + "\n" + indent + "}"


@pages_bp.get("/")
def home() -> Response:
    answer = _example_answer()
    body = _layout(EXAMPLE, 1, "    ")
    command = (f"curl -s {shlex.quote(request.host_url + 'v1/solve')} "
               f"-H 'Content-Type: application/json' \\\n     -d {shlex.quote(body)}")
    rows = "".join(
        f"<tr><td>{html.escape(r['from'])}</td><td>{html.escape(r['to'])}</td>"
        f"<td class=\"n\">{r['flow']}</td><td class=\"n\">{r['cost']}</td></tr>\n"
        for r in answer["allocation"])
    unmet = " ".join(f"{html.escape(u['id'])} waits ({u['amount']} unit"
                     f"{'s' if u['amount'] != 1 else ''})." for u in answer["unmet"])
    routes = _routes()
    page = _PAGE.format(
        command=html.escape(command),
        answer=html.escape(_layout(answer, 2)),
        rows=rows, unmet=unmet, objective=answer["objective"],
        dual=answer["certificate"]["dual_objective"],
        nav="".join(f'<a href="{path}">{html.escape(_NAV.get(path, path))}</a>'
                    for path, methods in routes
                    if "GET" in methods and path != "/" and "{" not in path
                    and path not in _NEEDS_QUERY),
        routes="".join(f'<tr><td>{", ".join(methods)}</td><td>{_route_cell(path)}</td>'
                       f"<td>{html.escape(_ROUTES.get(path, ''))}</td></tr>\n"
                       for path, methods in routes))
    response = Response(page, content_type="text/html; charset=utf-8")
    # No script and nothing from elsewhere: the policy says so to the browser as well.
    response.headers["Content-Security-Policy"] = (
        "default-src 'none'; style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'")
    response.headers["X-Content-Type-Options"] = "nosniff"
    return response
