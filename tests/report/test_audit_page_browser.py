"""The audit page in a real browser: a gunicorn serving certimatch with its default store
(a SQLite file in a temporary data folder), three decisions made over HTTP, then headless
Chromium loads GET /audit, which lists exactly those decisions, and follows the first
report link, whose page says VALID with an intact decision record. The DOM is the one
Chromium built (--dump-dom), read with the standard library's parser."""

from __future__ import annotations

from html.parser import HTMLParser
from pathlib import Path

import requests
from servers import Gunicorn

from tests.report.chromium import dump_dom

#: Made-up dispatches of an appliance-repair firm (minutes of travel).
DISPATCHES = [
    {"sources": [{"id": "tech-ana"}, {"id": "tech-ben"}],
     "sinks": [{"id": "fridge-12"}, {"id": "oven-7"}], "costs": [[12, 30], [25, 9]]},
    {"sources": [{"id": "tech-ana", "supply": 2}, {"id": "tech-ben"}],
     "sinks": [{"id": "washer-3"}, {"id": "dryer-5"}, {"id": "hob-1", "penalty": 40}],
     "costs": [[15, 22, 31], [18, None, 11]]},
    {"sources": [{"id": "tech-cy"}], "sinks": [{"id": "freezer-2"}], "costs": [[44]]},
]


class _Links(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.links: list[str] = []
        self.words: list[str] = []
        self._word = False

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        found = dict(attrs)
        if tag == "a" and (found.get("href") or "").endswith("/report"):
            self.links.append(found["href"] or "")
        self._word = tag == "p" and found.get("class") == "word"

    def handle_data(self, data: str) -> None:
        if self._word:
            self.words.append(data.strip())
            self._word = False


def _read(dom: str) -> _Links:
    parser = _Links()
    parser.feed(dom)
    return parser


def test_the_audit_page_lists_real_records_and_opens_a_valid_report(
        browser: str, tmp_path: Path) -> None:
    (tmp_path / "server").mkdir()
    with Gunicorn(tmp_path / "server", workers=1,
                  env={"CERTIMATCH_DATA_DIR": str(tmp_path / "data")}) as server:
        ids = []
        for body in DISPATCHES:
            r = requests.post(server.base + "/v1/solve", json=body, timeout=60)
            assert r.status_code == 200, r.text
            ids.append(r.json()["decision"]["id"])
        dom, failure = dump_dom(browser, server.base + "/audit", tmp_path / "profile")
        assert not failure, failure
        page = _read(dom)
        assert page.links == [f"/v1/decisions/{i}/report" for i in reversed(ids)]
        report, failure = dump_dom(browser, server.base + page.links[0],
                                   tmp_path / "profile")
        assert not failure, failure
    assert _read(report).words == ["VALID"]
    assert "Decision record: INTACT" in report and ids[-1] in report
