"""The edges of the HTTP surface: the page at / links every route, the probes' answers end
with a newline, and X-Request-ID is kept exactly when the README says it is."""

from __future__ import annotations

import re
from html.parser import HTMLParser
from typing import Any

import pytest

from service.http import api, pages
from tests.servers import ROOT, clean_app

HEX_ID = re.compile(r"[0-9a-f]{32}")


class _Links(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.hrefs: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag == "a":
            self.hrefs.extend(v or "" for k, v in attrs if k == "href")


def _routes(app: Any) -> set[str]:
    """The app's routes as openapi.yaml writes them (``/v1/decisions/{decision_id}``)."""
    return {re.sub(r"<(?:[^:<>]+:)?([^<>]+)>", r"{\1}", r.rule)
            for r in app.url_map.iter_rules() if r.endpoint != "static"}


def _linkable(routes: set[str]) -> set[str]:
    """Routes that answer when followed bare: no path variable, no required parameter."""
    return {r for r in routes if "{" not in r and r not in pages._NEEDS_QUERY}


# --- the page at / -----------------------------------------------------------------------------

@pytest.mark.parametrize("metrics", ["true", "false"])
def test_the_home_page_links_every_route(metrics):
    app = clean_app({"METRICS_ENABLED": metrics})
    links = _Links()
    page = app.test_client().get("/").get_data(as_text=True)
    links.feed(page)
    routes = _routes(app)
    assert "/v1/report" in routes and ("/metrics" in routes) == (metrics == "true")
    assert _linkable(routes) <= set(links.hrefs)
    assert set(links.hrefs) <= _linkable(routes)   # and nothing that is not one
    # the others are listed without a link (following them bare is an error)
    for route in routes - _linkable(routes):
        assert f"<code>{route}</code>" in page, route


def test_every_route_is_described_on_the_page():
    assert _routes(clean_app()) == set(pages._ROUTES)


def test_a_new_route_would_be_listed_too():
    app = clean_app()
    app.add_url_rule("/v1/extra", "extra", lambda: "", methods=["GET"])
    links = _Links()
    links.feed(app.test_client().get("/").get_data(as_text=True))
    assert "/v1/extra" in links.hrefs


# --- probes ------------------------------------------------------------------------------------

@pytest.mark.parametrize(("path", "doc"), [("/healthz", {"status": "ok"}),
                                           ("/readyz", {"status": "ready"})])
def test_probe_answers_end_with_a_newline(client, path, doc):
    response = client.get(path)
    assert response.status_code == 200
    assert response.data.endswith(b"}\n") and response.data.count(b"\n") == 1
    assert response.get_json() == doc


def test_the_not_ready_answer_ends_with_a_newline_too(client, monkeypatch):
    monkeypatch.setattr(api, "solve_body", lambda body, settings: {"objective": 2})
    response = client.get("/readyz")
    assert response.status_code == 503
    assert response.data.endswith(b"}\n")
    assert response.get_json()["type"] == "urn:certimatch:problem:not-ready"


def test_other_answers_are_unchanged(client):
    # the answers of the API are byte for byte what the benchmark compares: no newline
    assert not client.post("/v1/solve", json={"sources": [{"id": "s"}], "sinks": [{"id": "t"}],
                                              "costs": [[1]]}).data.endswith(b"\n")


# --- X-Request-ID, exactly as the README says ---------------------------------------------------

def _echo(client: Any, sent: str) -> str:
    got: str = client.get("/healthz", headers={"X-Request-ID": sent}).headers["X-Request-ID"]
    return got


def _kept(client: Any, sent: str) -> bool:
    got = _echo(client, sent)
    if got == sent:
        return True
    assert HEX_ID.fullmatch(got), got       # replaced: by a fresh id, never trimmed or cut
    return False


def test_the_readme_states_the_rule_tested_here():
    readme = " ".join((ROOT / "README.md").read_text(encoding="utf-8").split())
    assert ("kept exactly when it is 1 to 128 characters, each a space or a visible ASCII "
            "character (U+0020 to U+007E), the first and the last not a space") in readme


@pytest.mark.parametrize("code", range(0x00, 0x100))
def test_each_character_alone_inside_and_at_the_ends(client, code):
    char = chr(code)
    if char in "\r\n":
        pytest.skip("no HTTP header can carry CR or LF (werkzeug refuses to send them)")
    visible = 0x21 <= code <= 0x7E
    assert _kept(client, char) == visible
    assert _kept(client, f"a{char}b") == (visible or code == 0x20)
    assert _kept(client, f"{char}ab") == visible
    assert _kept(client, f"ab{char}") == visible


@pytest.mark.parametrize("char", ["\u0100", "\u00e9", "\u20ac", "\U0001f600"])
def test_anything_beyond_ascii_is_replaced(client, char):
    # werkzeug sends header values as latin-1; past U+00FF a client cannot send it at all
    try:
        assert not _kept(client, f"id-{char}")
    except UnicodeEncodeError:
        pytest.skip("cannot be sent as a header value")


@pytest.mark.parametrize(("length", "kept"), [(0, False), (1, True), (127, True), (128, True),
                                              (129, False), (4000, False)])
def test_the_length_bounds(client, length, kept):
    assert _kept(client, "r" * length) is kept
