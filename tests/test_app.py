"""The application factory and the two probes a load balancer or orchestrator polls."""

from __future__ import annotations

from dataclasses import fields

import pytest

from service import api
from service.app import create_app
from service.settings import ENV_PREFIX, Settings

SETTING_NAMES = [f.name.upper() for f in fields(Settings)]


@pytest.fixture(autouse=True)
def clean_env(monkeypatch: pytest.MonkeyPatch) -> None:
    # The factory reads the process environment; tests set exactly what they need.
    for name in SETTING_NAMES:
        monkeypatch.delenv(ENV_PREFIX + name, raising=False)


def settings_of(app) -> Settings:
    return app.extensions["certimatch.settings"]


def test_no_config_gives_the_documented_defaults():
    app = create_app()
    assert settings_of(app) == Settings()
    assert app.config["MAX_CONTENT_LENGTH"] == Settings().max_body_bytes
    assert not app.testing


def test_config_mapping_sets_limits_and_flask_options():
    app = create_app({"TESTING": True, "MAX_ARCS": 7, "MAX_CELLS": 9, "MAX_NODES": 11,
                      "MAX_ID_LENGTH": 13, "MAX_BODY_BYTES": 1000})
    s = settings_of(app)
    assert (s.max_arcs, s.max_cells, s.max_nodes, s.max_id_length, s.max_body_bytes) == (
        7, 9, 11, 13, 1000)
    assert app.testing
    # The body limit must reach Flask too, or large bodies would be read before any check.
    assert app.config["MAX_CONTENT_LENGTH"] == 1000


@pytest.mark.parametrize("name", SETTING_NAMES)
def test_each_setting_is_read_from_its_environment_variable(monkeypatch, name):
    monkeypatch.setenv(ENV_PREFIX + name, "4242")
    assert getattr(settings_of(create_app()), name.lower()) == 4242


def test_the_config_mapping_wins_over_the_environment(monkeypatch):
    monkeypatch.setenv("CERTIMATCH_MAX_ARCS", "5")
    assert settings_of(create_app({"MAX_ARCS": 8})).max_arcs == 8


def test_a_limit_from_the_environment_is_enforced(monkeypatch):
    monkeypatch.setenv("CERTIMATCH_MAX_BODY_BYTES", "200")
    client = create_app({"TESTING": True}).test_client()
    body = b'{"sources": [{"id": "' + b"s" * 300 + b'"}]}'
    resp = client.post("/v1/solve", data=body, content_type="application/json")
    assert resp.status_code == 413


@pytest.mark.parametrize(("value", "message"), [
    ("lots", "MAX_ARCS must be a whole number, got 'lots'"),
    (0, "MAX_ARCS must be a whole number of at least 1, got 0"),
    (-3, "MAX_ARCS must be a whole number of at least 1, got -3"),
    (True, "MAX_ARCS must be a whole number of at least 1, got True"),
    ([5], "MAX_ARCS must be a whole number, got [5]"),
])
def test_a_bad_setting_in_the_mapping_raises_naming_it(value, message):
    with pytest.raises(ValueError) as info:
        create_app({"MAX_ARCS": value})
    assert str(info.value) == message


def test_a_fractional_setting_raises():
    with pytest.raises(ValueError, match="MAX_ARCS must be a whole number"):
        create_app({"MAX_ARCS": 2.5})


@pytest.mark.parametrize(("raw", "message"), [
    ("ten", "CERTIMATCH_MAX_CELLS must be a whole number, got 'ten'"),
    ("1e6", "CERTIMATCH_MAX_CELLS must be a whole number, got '1e6'"),
    ("0", "CERTIMATCH_MAX_CELLS must be a whole number of at least 1, got '0'"),
    ("", "CERTIMATCH_MAX_CELLS must be a whole number, got ''"),
])
def test_a_bad_setting_in_the_environment_raises_naming_the_variable(monkeypatch, raw, message):
    monkeypatch.setenv("CERTIMATCH_MAX_CELLS", raw)
    with pytest.raises(ValueError) as info:
        create_app()
    assert str(info.value) == message


def test_healthz_answers_ok(client):
    resp = client.get("/healthz")
    assert resp.status_code == 200
    assert resp.mimetype == "application/json"
    assert resp.get_json() == {"status": "ok"}


def test_readyz_solves_its_probe_and_says_ready(client):
    resp = client.get("/readyz")
    assert resp.status_code == 200
    assert resp.mimetype == "application/json"
    assert resp.get_json() == {"status": "ready"}


def test_readyz_says_not_ready_when_the_probe_answer_is_wrong(client, monkeypatch):
    # The probe's 1 x 1 problem costs 1; any other objective means the solver stack is broken.
    monkeypatch.setattr(api, "solve_body", lambda body, settings: {"objective": 2})
    resp = client.get("/readyz")
    assert resp.status_code == 503
    assert resp.mimetype == "application/problem+json"
    assert resp.get_json()["type"] == "urn:certimatch:problem:not-ready"


def test_readyz_remembers_a_good_probe(client, monkeypatch):
    assert client.get("/readyz").status_code == 200
    # Once ready, the probe is not re-run on every poll.
    monkeypatch.setattr(api, "solve_body", lambda body, settings: {"objective": 2})
    assert client.get("/readyz").status_code == 200


@pytest.mark.parametrize("path", ["/healthz", "/readyz"])
def test_probes_refuse_post_with_a_problem_document(client, path):
    resp = client.post(path)
    assert resp.status_code == 405
    assert resp.mimetype == "application/problem+json"
    assert "GET" in resp.headers["Allow"]
