"""The auditor's pages: ``GET /audit`` (the decision log, newest first, filtered by caller
and date) and ``GET /v1/decisions/{id}/report`` (the audit report of one stored decision,
with the log's verdict on its record).

The same bearer-token rules as the API apply (service/http/auth.py guards every route
but the probes). Both pages are HTML with inline CSS only, no script and nothing loaded
from elsewhere, and say so to the browser in their Content-Security-Policy.
"""

from __future__ import annotations

import html
from datetime import date, timedelta
from typing import Any
from urllib.parse import quote, urlencode

import orjson
from flask import Blueprint, Response, request

from service.errors import BadParameter, ServiceError
from service.http.body import current_recorder, current_settings
from service.http.decisions import MAX_ID, UnknownDecision
from service.records.audit import verify_decision
from service.records.model import Decision
from service.report import build_report
from service.report.page import render_record_only

audit_bp = Blueprint("audit", __name__)

#: Decisions per page of /audit.
PAGE_ROWS = 50
_DASH = "\u2014"
_POLICY = "default-src 'none'; style-src 'unsafe-inline'; base-uri 'none'; form-action 'self'"

_CSS = """
body { margin: 0; background: #f6f7f9; color: #1f2933;
  font: 14px/1.5 'DejaVu Sans', 'Liberation Sans', Arial, sans-serif; }
main { max-width: 1400px; margin: 0 auto; padding: 20px 24px 40px; }
h1 { font-size: 22px; margin: 0 0 6px; }
.sub { color: #52606d; margin: 0 0 14px; }
form { display: flex; gap: 14px; align-items: end; flex-wrap: wrap; margin: 10px 0 16px; }
label { display: flex; flex-direction: column; font-size: 13px; color: #52606d; }
input { font: inherit; padding: 3px 6px; }
table { border-collapse: collapse; width: 100%; background: #fff; border: 1px solid #d9dee4; }
th, td { text-align: left; padding: 4px 8px; border-bottom: 1px solid #eceff2;
  vertical-align: top; }
th { background: #eef1f4; } td.n { text-align: right; font-variant-numeric: tabular-nums; }
code { font-size: 12px; word-break: break-all; }
.card { background: #fff; border: 1px solid #d9dee4; border-radius: 8px; padding: 10px 14px; }
.more { margin-top: 12px; }
"""


def _page(title: str, body: str) -> Response:
    document = (f'<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">'
                '<meta name="viewport" content="width=device-width, initial-scale=1">'
                f"<title>{html.escape(title)}</title><style>{_CSS}</style></head><body><main>"
                f"{body}</main></body></html>\n")
    return _html(document)


def _html(document: str) -> Response:
    response = Response(document, content_type="text/html; charset=utf-8")
    response.headers["Content-Security-Policy"] = _POLICY
    response.headers["X-Content-Type-Options"] = "nosniff"
    return response


def _day(name: str) -> date | None:
    text = request.args.get(name, "").strip()
    if not text:
        return None
    try:
        return date.fromisoformat(text)
    except ValueError:
        raise BadParameter(name, f"must be a date written 2026-12-01, not {text[:40]!r}"
                           ) from None


def _filters() -> tuple[str | None, date | None, date | None, int | None]:
    unknown = sorted(set(request.args) - {"caller", "from", "to", "before"})
    if unknown:
        raise BadParameter(unknown[0], "is not a parameter of this page (it takes caller, "
                           "from, to and before)")
    caller = request.args.get("caller", "").strip() or None
    since, until = _day("from"), _day("to")
    before = request.args.get("before", "").strip()
    if before and not (before.isascii() and before.isdigit() and len(before) <= 18):
        raise BadParameter("before", f"must be a log index (a whole number), not "
                           f"{before[:40]!r}")
    return caller, since, until, int(before) if before else None


def _summary(answer: bytes | None) -> tuple[str, str]:
    """(shape, objective) of a stored answer; dashes when it is not kept or not JSON."""
    if answer is None:
        return _DASH, _DASH
    try:
        doc = orjson.loads(answer)
    except orjson.JSONDecodeError:
        return "?", "?"
    if not isinstance(doc, dict):
        return "?", "?"
    return str(doc.get("shape", "?")), str(doc.get("objective", "?"))


def _row(decision: Decision, answer: bytes | None) -> str:
    shape, objective = _summary(answer)
    link = f"/v1/decisions/{quote(decision.id or '', safe='')}/report"
    cells = [f'<td class="n">{decision.log_index}</td>',
             f"<td>{html.escape(decision.recorded_at)}</td>",
             f"<td>{html.escape(decision.caller or _DASH)}</td>",
             f"<td>{html.escape(shape)}</td>", f'<td class="n">{html.escape(objective)}</td>',
             f"<td><code>{decision.input_sha256}</code></td>",
             f"<td><code>{decision.answer_sha256}</code></td>",
             f'<td><a href="{html.escape(link)}">report</a></td>']
    return "<tr>" + "".join(cells) + "</tr>"


@audit_bp.get("/audit")
def audit() -> Response:
    caller, since, until, before = _filters()
    store, signer = current_recorder().reader()
    checkpoint = store.checkpoint(signer)
    rows = store.newest(before, PAGE_ROWS, caller,
                        since.isoformat() + "T00:00:00.000000Z" if since else None,
                        (until + timedelta(days=1)).isoformat() + "T00:00:00.000000Z"
                        if until else None)
    value = {"caller": caller or "", "from": since.isoformat() if since else "",
             "to": until.isoformat() if until else ""}
    form = ('<form method="get" action="/audit">'
            + "".join(f'<label>{label}<input name="{name}" type="{kind}" '
                      f'value="{html.escape(value[name])}"></label>'
                      for name, label, kind in (("caller", "caller", "text"),
                                                ("from", "from (UTC date)", "date"),
                                                ("to", "to (UTC date, inclusive)", "date")))
            + '<button type="submit">filter</button> <a href="/audit">all</a></form>')
    head = "".join(f"<th>{h}</th>" for h in ("log index", "recorded (UTC)", "caller", "shape",
                                             "objective", "input_sha256", "answer_sha256",
                                             ""))
    table = (f"<table><thead><tr>{head}</tr></thead><tbody>"
             + "".join(_row(d, a) for d, a in rows) + "</tbody></table>"
             if rows else "<p>No decision matches.</p>")
    more = ""
    if len(rows) == PAGE_ROWS:
        query = {k: v for k, v in value.items() if v}
        query["before"] = str(rows[-1][0].log_index)
        more = (f'<p class="more"><a href="/audit?{html.escape(urlencode(query))}">'
                "older decisions</a></p>")
    body = ("<h1>Decision log</h1>"
            f'<p class="sub">{checkpoint.size} decisions recorded; newest first. Each '
            "report re-checks the stored answer with the independent verifier and the "
            "record against the signed log.</p>"
            f'<div class="card">latest signed checkpoint: size <b>{checkpoint.size}</b>, '
            f"root <code>{checkpoint.root_sha256}</code>, key id "
            f"<code>{checkpoint.key_id}</code>, public key "
            f"<code>{html.escape(checkpoint.public_key)}</code></div>"
            + form + table + more)
    return _page("Decision log", body)


@audit_bp.get("/v1/decisions/<decision_id>/report")
def decision_report(decision_id: str) -> Response:
    store, signer = current_recorder().reader()
    record = store.get(decision_id) if len(decision_id) <= MAX_ID else None
    log = None if record is None else verify_decision(store, signer, decision_id)
    if record is None or log is None:
        raise UnknownDecision(f"no decision of the log has the id {decision_id[:MAX_ID]!r}")
    seen: dict[str, Any] = {"decision": record.decision.to_dict(), "checks": log["checks"]}
    if record.problem is None or record.answer is None:
        why = ("removed by retention on " + record.pruned_at if record.pruned_at
               else "not kept: the service records digests only" if record.mode == "digest"
               else "missing although the record was kept in full")
        return _html(render_record_only(seen, f"The problem and answer are {why}."))
    try:
        body = {**orjson.loads(record.problem), "answer": orjson.loads(record.answer)}
        document, _ = build_report(body, current_settings(), "html",
                                   f"decision {decision_id}", seen)
    except (orjson.JSONDecodeError, TypeError, ServiceError) as e:
        detail = getattr(e, "detail", None) or "they are not JSON objects"
        return _html(render_record_only(
            seen, f"The stored problem and answer cannot be checked: {detail}."))
    return _html(document)
