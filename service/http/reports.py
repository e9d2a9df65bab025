"""POST /v1/report: the audit report for a problem and an answer, as HTML or SVG.

The body is the /v1/verify body; the verdict in the page comes from the independent
verifier run on it here. Errors are the same RFC 9457 documents as on every route: the
body is read by the same function as /v1/solve and /v1/verify, and failures are raised
as exceptions that the app's handlers turn into problem documents.
"""

from __future__ import annotations

from flask import Blueprint, Response, request
from werkzeug.exceptions import BadRequest

from service.http.body import current_settings, json_body
from service.http.limits import time_limits_told_apart
from service.report import FORMATS, MEDIA_TYPES, build_report
from service.solve.deadline import counted_from_arrival

report_bp = Blueprint("report", __name__)


@report_bp.post("/v1/report")
def report() -> Response:
    fmt = request.args.get("format", "html")
    if fmt not in FORMATS:
        # A query parameter is not part of the problem, so not an invalid-problem (whose
        # pointers point into the body): a plain 400, as HTTP means it.
        raise BadRequest(f"format must be one of {', '.join(FORMATS)}, not {fmt!r}")
    with counted_from_arrival():            # the limit counts reading and parsing the body
        body = json_body()
        settings = current_settings()
        with time_limits_told_apart(body, settings):
            document, _ = build_report(body, settings, fmt)
    # The verdict is in the page: a NOT VALID answer is a successfully written report.
    return Response(document, status=200, content_type=MEDIA_TYPES[fmt])
