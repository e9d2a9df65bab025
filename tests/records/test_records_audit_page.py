"""GET /audit and GET /v1/decisions/{id}/report on SQLite and PostgreSQL: the same token
rules as the API, decisions newest first with their fields, filters by caller and date,
pages, and reports whose verdict includes the log's (a record changed in the database
is NOT VALID and names the failed check). The HTML is read with the standard library's
parser; the expected rows come from the decisions the service answered with."""

from __future__ import annotations

import re
from datetime import datetime, timedelta
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import pytest
from audit_helpers import problem
from sqlalchemy import text

import service.http.audit_page

TOKEN_A, TOKEN_B = "tok-desk-north-0123456789", "tok-desk-south-9876543210"


class _Rows(HTMLParser):
    """The cells of every table row and the href of every link."""

    def __init__(self) -> None:
        super().__init__()
        self.rows: list[list[str]] = []
        self.links: list[str] = []
        self._cell: list[str] | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag == "tr":
            self.rows.append([])
        elif tag == "td":
            self._cell = []
        elif tag == "a":
            self.links.append(dict(attrs).get("href") or "")

    def handle_endtag(self, tag: str) -> None:
        if tag == "td" and self._cell is not None:
            self.rows[-1].append("".join(self._cell).strip())
            self._cell = None

    def handle_data(self, data: str) -> None:
        if self._cell is not None:
            self._cell.append(data)


def _rows(page: str) -> tuple[list[list[str]], list[str]]:
    parser = _Rows()
    parser.feed(page)
    return [r for r in parser.rows if r], parser.links


@pytest.fixture
def app(make_app: Any, tmp_path: Path) -> Any:
    tokens = tmp_path / "tokens"
    tokens.write_text(f"{TOKEN_A} north-desk\n{TOKEN_B} south-desk\n")
    tokens.chmod(0o600)
    return make_app(TOKENS_FILE=str(tokens))


def _get(client: Any, path: str, token: str | None = TOKEN_A) -> Any:
    headers = {"Authorization": f"Bearer {token}"} if token else {}
    return client.get(path, headers=headers)


@pytest.fixture
def decisions(app: Any) -> list[dict[str, Any]]:
    client = app.test_client()
    made = []
    for seed in range(5):
        token = TOKEN_A if seed % 2 == 0 else TOKEN_B
        r = client.post("/v1/solve", json=problem(seed),
                        headers={"Authorization": f"Bearer {token}"})
        assert r.status_code == 200
        made.append(r.get_json())
    return made


def test_the_page_follows_the_token_rules(app: Any, decisions: list[dict[str, Any]]) -> None:
    client = app.test_client()
    first = decisions[0]["decision"]["id"]
    for path in ("/audit", f"/v1/decisions/{first}/report"):
        r = _get(client, path, token=None)
        assert r.status_code == 401 and r.content_type == "application/problem+json"
        assert _get(client, path, token="not-a-token-of-this-service").status_code == 401
        ok = _get(client, path)
        assert ok.status_code == 200 and ok.content_type == "text/html; charset=utf-8"
        assert "script-src" not in ok.headers["Content-Security-Policy"]
        assert "<script" not in ok.get_data(as_text=True)


def test_decisions_are_listed_newest_first_with_their_fields(
        app: Any, decisions: list[dict[str, Any]]) -> None:
    page = _get(app.test_client(), "/audit").get_data(as_text=True)
    rows, links = _rows(page)
    expected = [a for a in reversed(decisions)]
    assert len(rows) == len(expected)
    for row, answer in zip(rows, expected, strict=True):
        d = answer["decision"]
        assert row[:7] == [str(d["log_index"]), d["recorded_at"], d["caller"],
                           answer["shape"], str(answer["objective"]), d["input_sha256"],
                           d["answer_sha256"]]
    reports = [link for link in links if link.endswith("/report")]
    assert reports == [f"/v1/decisions/{a['decision']['id']}/report" for a in expected]


def test_filters_by_caller_and_date(app: Any, decisions: list[dict[str, Any]]) -> None:
    client = app.test_client()

    def listed(query: str) -> list[str]:
        r = _get(client, "/audit?" + query)
        assert r.status_code == 200, r.get_data(as_text=True)
        return [row[0] for row in _rows(r.get_data(as_text=True))[0]]

    north = [str(a["decision"]["log_index"]) for a in reversed(decisions)
             if a["decision"]["caller"] == "north-desk"]
    assert listed("caller=north-desk") == north and len(north) == 3
    day = datetime.fromisoformat(decisions[0]["decision"]["recorded_at"]).date()
    before, after = day - timedelta(days=1), day + timedelta(days=1)
    assert listed(f"from={day}&to={day}") == ["4", "3", "2", "1", "0"]
    assert listed(f"from={after}") == [] and listed(f"to={before}") == []
    assert listed(f"caller=south-desk&from={before}&to={after}") == ["3", "1"]
    for bad in ("from=yesterday", "to=2026-13-01", "before=x", "before=\u00b2", "page=2"):
        r = _get(client, "/audit?" + bad)
        assert r.status_code == 400 and r.content_type == "application/problem+json"
        assert r.get_json()["parameter"] == bad.split("=")[0]


def test_older_decisions_are_a_link_away(app: Any, decisions: list[dict[str, Any]],
                                         monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(service.http.audit_page, "PAGE_ROWS", 2)
    client = app.test_client()
    seen, path = [], "/audit?caller=north-desk"
    while path:
        rows, links = _rows(_get(client, path).get_data(as_text=True))
        seen += [row[0] for row in rows]
        older = [link for link in links if "before=" in link]
        path = older[0].replace("&amp;", "&") if older else ""
    assert seen == ["4", "2", "0"]


def test_a_report_says_valid_for_an_intact_record(app: Any,
                                                  decisions: list[dict[str, Any]]) -> None:
    d = decisions[2]["decision"]
    page = _get(app.test_client(), f"/v1/decisions/{d['id']}/report").get_data(as_text=True)
    assert re.findall(r'<p class="word">([^<]*)</p>', page) == ["VALID"]
    assert "Decision record: INTACT" in page and d["answer_sha256"] in page
    missing = _get(app.test_client(), "/v1/decisions/no-such-id/report")
    assert missing.status_code == 404
    assert missing.get_json()["type"].endswith(":unknown-decision")


def _sql(app: Any, statement: str, **params: Any) -> None:
    store, _ = app.extensions["certimatch.recorder"].open()
    with store.engine.begin() as conn:
        conn.execute(text(statement), params)


@pytest.mark.parametrize(("column", "check"), [("answer", "answer_digest"),
                                                ("problem", "problem_digest"),
                                                ("caller", "leaf")])
def test_a_record_changed_in_the_database_is_not_valid(
        app: Any, decisions: list[dict[str, Any]], column: str, check: str) -> None:
    d = decisions[1]["decision"]
    if column == "caller":
        _sql(app, "UPDATE decision_records SET caller = 'north-desk' WHERE log_index = 1")
    else:
        store, _ = app.extensions["certimatch.recorder"].open()
        body = store.get(d["id"]).__getattribute__(column)
        changed = body.replace(b'"tech-0"', b'"tech-9"')      # a byte of an id
        assert changed != body
        _sql(app, f"UPDATE decision_records SET {column} = :b WHERE log_index = 1",
             b=changed)
    page = _get(app.test_client(), f"/v1/decisions/{d['id']}/report").get_data(as_text=True)
    assert re.findall(r'<p class="word">([^<]*)</p>', page) == ["NOT VALID"]
    assert "Decision record: DAMAGED" in page
    assert f"fails the log&#x27;s checks ({check}" in page


def test_a_digest_only_record_is_never_called_valid(make_app: Any) -> None:
    client = make_app(RECORD="digest").test_client()
    d = client.post("/v1/solve", json=problem(3)).get_json()["decision"]
    rows, _ = _rows(client.get("/audit").get_data(as_text=True))
    assert rows[0][3:5] == ["\u2014", "\u2014"]                   # shape, objective unknown
    page = client.get(f"/v1/decisions/{d['id']}/report").get_data(as_text=True)
    assert re.findall(r'<p class="word">([^<]*)</p>', page) == ["NOT CHECKED"]
    assert "not kept: the service records digests only" in page


def test_the_checkpoint_is_on_the_page(app: Any, decisions: list[dict[str, Any]]) -> None:
    store, signer = app.extensions["certimatch.recorder"].open()
    page = _get(app.test_client(), "/audit").get_data(as_text=True)
    checkpoint = store.checkpoint(signer)
    assert checkpoint.size == len(decisions)
    for value in (checkpoint.root_sha256, checkpoint.public_key, checkpoint.key_id):
        assert value in page
