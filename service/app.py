"""The Flask application factory: ``gunicorn 'service.app:create_app()'``.

The composition root: the settings, the token set, the decision store and its signer
(``service.http.recording.Recorder``) and the blueprints are put together here and
nowhere else.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping
from typing import Any

from flask import Flask
from werkzeug.exceptions import HTTPException

from service.errors import PROBLEM_CONTENT_TYPE, ServiceError, problem_document
from service.http import auth, encoding, observe
from service.http.api import api_bp
from service.http.audit_page import audit_bp
from service.http.body import json_response
from service.http.decisions import decisions_bp
from service.http.pages import pages_bp
from service.http.recording import Recorder
from service.http.reports import report_bp
from service.records.config import RecordSettings
from service.settings import load_settings

log = logging.getLogger(__name__)


def create_app(config: Mapping[str, Any] | None = None) -> Flask:
    """Build the app; ``config`` overrides settings (``MAX_ARCS``...) and Flask options.

    Raises ValueError naming the setting when one is invalid (see service.settings), and
    refuses to build on a decision store whose schema is behind (SchemaNotCurrent, saying
    to run ``certimatch db upgrade``) or that cannot be reached (StoreUnavailable), unless
    recording is off. An empty database gets the schema created here.
    """
    app = Flask(__name__)
    # openapi.yaml lists every method a route answers; OPTIONS is not one of them (405)
    app.config["PROVIDE_AUTOMATIC_OPTIONS"] = False
    settings = load_settings(config)
    app.config["MAX_CONTENT_LENGTH"] = settings.max_body_bytes
    if config:
        app.config.update({k: v for k, v in config.items() if k.isupper()})
    app.extensions["certimatch.settings"] = settings
    auth.init_app(app, settings)
    app.extensions["certimatch.recorder"] = Recorder(RecordSettings.of(settings))
    app.register_blueprint(api_bp)
    app.register_blueprint(pages_bp)
    app.register_blueprint(report_bp)
    app.register_blueprint(decisions_bp)
    app.register_blueprint(audit_bp)
    # Request ids, the request log line and metrics wrap every view, errors included.
    observe.init_app(app, settings.metrics_enabled)
    encoding.init_app(app)

    @app.errorhandler(ServiceError)
    def _service_error(e: ServiceError) -> Any:
        if e.status >= 500 and e.status != 503:
            log.error("%s: %s", e.title, e.detail)
        response = json_response(e.problem(), e.status, PROBLEM_CONTENT_TYPE)
        response.headers.update(e.headers)
        return response

    @app.errorhandler(HTTPException)
    def _http_error(e: HTTPException) -> Any:
        status = e.code or 500
        detail = e.description or e.name
        if status == 413 and not isinstance(e, encoding.InflatedTooLarge):
            detail = (f"the body is larger than {settings.max_body_bytes} bytes "
                      "(setting MAX_BODY_BYTES)")
        doc = problem_document(status, e.name, detail)
        response = json_response(doc, status, PROBLEM_CONTENT_TYPE)
        if status == 405 and e.get_response().headers.get("Allow"):
            response.headers["Allow"] = e.get_response().headers["Allow"]
        return response

    @app.errorhandler(Exception)
    def _unexpected(e: Exception) -> Any:
        log.exception("unexpected error")
        doc = problem_document(500, "Internal error", "the service failed unexpectedly; "
                               "the error is logged", "internal-error")
        return json_response(doc, 500, PROBLEM_CONTENT_TYPE)

    return app
