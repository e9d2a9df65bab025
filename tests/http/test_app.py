"""The application factory, its settings, the two probes a load balancer or orchestrator
polls, and what the service says about itself (its OpenAPI document and the page at /)."""

from __future__ import annotations

import dataclasses
import gc
import html
import json
import os
import re
import shlex
import shutil
import subprocess
import sys
import tomllib
import weakref
from dataclasses import fields
from pathlib import Path
from typing import Any

import pytest
from servers import DATA_DIR_ENV

from service.app import create_app
from service.http import api, pages
from service.settings import (
    ENV_PREFIX,
    SETTINGS,
    ServerSettings,
    Settings,
    load_server_settings,
)

ROOT = Path(__file__).resolve().parents[2]

#: The limits: whole-number settings of the app (the other settings have other parsers).
SETTING_NAMES = [f.name.upper() for f in fields(Settings) if f.type == "int"]


@pytest.fixture(autouse=True)
def clean_env(monkeypatch: pytest.MonkeyPatch) -> None:
    # The factory reads the process environment; tests set exactly what they need.
    for setting in SETTINGS:
        if setting.env != DATA_DIR_ENV:          # the session's temporary store
            monkeypatch.delenv(setting.env, raising=False)


def settings_of(app) -> Settings:
    return app.extensions["certimatch.settings"]


def test_no_config_gives_the_documented_defaults():
    app = create_app()
    # all but where the store lives: the session's temporary folder (tests/conftest.py)
    assert settings_of(app) == dataclasses.replace(Settings(),
                                                   data_dir=os.environ[DATA_DIR_ENV])
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


# --- the settings table ---------------------------------------------------------------------


def test_the_table_is_the_settings_classes():
    app_names = {f.name.upper() for f in fields(Settings)}
    server_names = {f.name.upper() for f in fields(ServerSettings)}
    assert {s.name for s in SETTINGS if s.scope == "app"} == app_names
    assert {s.name for s in SETTINGS if s.scope == "server"} == server_names
    assert len({s.name for s in SETTINGS}) == len(SETTINGS)
    for s in SETTINGS:
        cls = Settings if s.scope == "app" else ServerSettings
        assert getattr(cls(), s.name.lower()) == s.default, s.name
        assert s.env == ENV_PREFIX + s.name
        assert s.help and s.help[0].islower(), f"{s.name}: help is a lower-case phrase"


def test_limits_are_all_whole_number_settings():
    # Guards the parametrisation above: it must not silently lose the limits.
    assert SETTING_NAMES == ["MAX_BODY_BYTES", "MAX_CELLS", "MAX_ARCS", "MAX_NODES",
                             "MAX_ID_LENGTH", "MAX_PRICES_WORK", "MAX_TIME_LIMIT_S"]


@pytest.mark.parametrize(("raw", "expected"), [("true", True), ("FALSE", False),
                                               (" false ", False), (False, False)])
def test_metrics_switch_spellings(raw, expected):
    assert settings_of(create_app({"METRICS_ENABLED": raw})).metrics_enabled is expected


def test_server_settings_are_not_read_by_the_app(monkeypatch):
    # A gunicorn-only value is gunicorn's to check; the app (and certimatch solve --local)
    # must start whatever it says.
    monkeypatch.setenv("CERTIMATCH_WORKERS", "many")
    create_app()
    with pytest.raises(ValueError, match="CERTIMATCH_WORKERS must be a whole number"):
        load_server_settings()


def _readme_settings() -> dict[str, str]:
    """NAME -> default cell of the README's settings table."""
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("\n## Settings", 1)[1].split("\n## ", 1)[0]
    rows = re.findall(r"^\|\s*`([A-Z_]+)`\s*\|\s*([^|]*?)\s*\|", section, re.MULTILINE)
    return {name: default.strip("`") for name, default in rows}


def test_every_setting_is_in_the_readme_table_with_its_default():
    documented = _readme_settings()
    missing = [s.name for s in SETTINGS if s.name not in documented]
    assert not missing, f"README settings table lacks {missing}"
    wrong = {s.name: (documented[s.name], s.shown_default) for s in SETTINGS
             if documented[s.name] != s.shown_default}
    assert not wrong, f"README default differs (README, code): {wrong}"
    assert set(documented) <= {s.name for s in SETTINGS}, "README lists an unknown setting"


# --- GET /v1/openapi.yaml -------------------------------------------------------------------


def test_openapi_document_is_served_byte_for_byte(client):
    response = client.get("/v1/openapi.yaml")
    assert response.status_code == 200
    assert response.mimetype == "application/yaml"
    assert response.data == (ROOT / "openapi.yaml").read_bytes()


def test_a_checkout_reads_the_spec_at_the_top_of_the_repository():
    # This is the editable install (`pip install -e .`) and a plain checkout: the file
    # served is the one in the working tree, never a stale copy.
    assert pages.openapi_path() == ROOT / "openapi.yaml"


def test_the_wheel_carries_the_spec_as_a_data_file():
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    data_files = config["tool"]["setuptools"]["data-files"]
    target = "/".join(pages.SPEC_DATA_PATH[:-1])
    assert data_files[target] == ["openapi.yaml"]


def test_an_installed_copy_finds_the_spec_through_its_record(tmp_path):
    # What pip makes of the wheel: the packages in site-packages, the spec under
    # <prefix>/share/certimatch, and a RECORD naming it relative to site-packages. Run in a
    # child interpreter whose `service` is that copy, away from the checkout.
    prefix = tmp_path / "prefix"
    site = prefix / "lib" / "site-packages"
    for package in ("service", "schemas"):
        shutil.copytree(ROOT / package, site / package,
                        ignore=shutil.ignore_patterns("__pycache__"))
    data = prefix.joinpath(*pages.SPEC_DATA_PATH)
    data.parent.mkdir(parents=True)
    shutil.copyfile(ROOT / "openapi.yaml", data)
    info = site / "certimatch-0.1.0.dist-info"
    info.mkdir()
    (info / "METADATA").write_text("Metadata-Version: 2.1\nName: certimatch\nVersion: 0.1.0\n")
    (info / "RECORD").write_text("../../share/certimatch/openapi.yaml,,\n"
                                 "service/http/pages.py,,\ncertimatch-0.1.0.dist-info/RECORD,,\n")
    code = ("import json, service.http.pages as a\n"
            "from service.app import create_app\n"
            "r = create_app({'TESTING': True}).test_client().get('/v1/openapi.yaml')\n"
            "print(json.dumps([a.__file__, str(a.openapi_path()), r.status_code,"
            " len(r.data)]))\n")
    env = {"PYTHONPATH": str(site), "PATH": "/usr/bin:/bin"}
    done = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, env=env,
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    module, found, status, size = json.loads(done.stdout)
    assert Path(module).is_relative_to(site), "the child imported the checkout, not the copy"
    assert Path(found) == data.resolve()
    assert (status, size) == (200, data.stat().st_size)


def test_a_missing_spec_is_a_500_problem(client, monkeypatch):
    monkeypatch.setattr(pages, "openapi_path", lambda: None)
    response = client.get("/v1/openapi.yaml")
    assert response.status_code == 500
    assert response.get_json()["type"] == "urn:certimatch:problem:internal-error"


# --- the page at / --------------------------------------------------------------------------


def _block(page: str, block_id: str) -> str:
    match = re.search(rf'<pre id="{block_id}"><code>(.*?)</code></pre>', page, re.DOTALL)
    assert match, f"no {block_id} on the page"
    return html.unescape(match.group(1))


def test_home_page_is_plain_html_with_nothing_from_elsewhere(client):
    response = client.get("/")
    assert response.status_code == 200
    assert response.mimetype == "text/html"
    page = response.get_data(as_text=True)
    assert '<a href="/v1/openapi.yaml">' in page
    assert "<script" not in page.lower() and "src=" not in page.lower()
    assert not re.search(r"@import|url\(", page), "the style loads something"
    # Every link stays on this server.
    assert all(href.startswith("/") for href in re.findall(r'href="([^"]*)"', page))
    assert "default-src 'none'" in response.headers["Content-Security-Policy"]
    for href in re.findall(r'href="([^"]*)"', page):
        got = client.get(href)
        # a POST route's link shows the 405 that names the method to use
        assert got.status_code == 200 or (got.status_code == 405
                                          and got.headers["Allow"] == "POST"), href


def test_home_page_command_gets_the_answer_it_shows(client):
    page = client.get("/", base_url="http://solver.internal:8080").get_data(as_text=True)
    words = shlex.split(_block(page, "solve-command"))
    assert words[:3] == ["curl", "-s", "http://solver.internal:8080/v1/solve"]
    assert words[words.index("-H") + 1] == "Content-Type: application/json"
    body = words[words.index("-d") + 1]
    assert json.loads(body) == pages.EXAMPLE
    # Run the command's request against the app: the page shows exactly that answer.
    answer = client.post("/v1/solve", data=body, content_type="application/json").get_json()
    # the page leaves out the decision object, and says so
    assert "decision" in answer and "<code>decision</code>" in page
    del answer["decision"]
    assert json.loads(_block(page, "solve-answer")) == answer
    # The README explains the certificate of this same example with its total of 95.
    assert answer["objective"] == 95
    assert "<b>95</b>" in page


def test_home_page_never_echoes_markup_from_the_host_header(client):
    # The command shows the URL the caller used, so the Host header reaches the page;
    # markup in it must not (werkzeug drops an invalid host, and the page escapes the rest).
    response = client.get("/", headers={"Host": "x<i>'y"})
    assert response.status_code == 200
    assert "<i>" not in response.get_data(as_text=True)


class _Body(dict):
    """A parsed body that can be watched with a weak reference (a plain dict cannot)."""


@pytest.mark.parametrize("path", ["/v1/solve", "/v1/verify"])
def test_the_parsed_body_and_the_collector_wait_until_the_answer_is_sent(client, monkeypatch,
                                                                          path):
    from service.http import api

    problem = {"sources": [{"id": "a"}], "sinks": [{"id": "b"}], "costs": [[3]]}
    body = problem
    if path == "/v1/verify":
        body = {**problem, "answer": client.post("/v1/solve", json=problem).get_json()}
    watched: list[weakref.ref] = []
    real = api.json_body

    def watched_body() -> Any:
        parsed = _Body(real())
        watched.append(weakref.ref(parsed))
        return parsed

    monkeypatch.setattr(api, "json_body", watched_body)
    assert gc.isenabled()
    response = client.post(path, json=body, buffered=False)
    assert response.status_code == 200
    assert watched[0]() is not None      # still held while the answer is being sent,
    assert not gc.isenabled()            # with the collector still off
    response.close()
    assert watched[0]() is None          # and let go when the server closes the answer,
    assert gc.isenabled()                # the collector back on


def test_a_failed_request_lets_the_body_and_the_collector_go_at_once(client):
    # An error answer is not held: the collector is back on before it is sent.
    assert gc.isenabled()
    response = client.post("/v1/solve", json={"sources": "none"}, buffered=False)
    assert response.status_code == 422
    assert gc.isenabled()
    response.close()
