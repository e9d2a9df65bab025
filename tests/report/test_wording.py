"""What the report says about an answer that is NOT VALID, and what the SVG alone says.

A page for an answer that failed a check must not state anything that check was needed
for, and must not say that the answer costs (or scores) the figure it reports; only a
VALID page may. The checks of a verdict are forged one by one here (render takes the
verdict as given), and real tampered answers are run through the verifier too.
"""

from __future__ import annotations

import copy
import re
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from typing import Any

import pytest

from service.cli.demo import demo_problem
from service.report import build_report, render
from service.report.style import DIAGRAM_MAX_PER_COLUMN
from service.settings import Settings
from service.solve.pipeline import solve_body, verify_body

SETTINGS = Settings()
SVG_NS = "{http://www.w3.org/2000/svg}"

#: For each check, words of the statements that rest on it: a page on which the check
#: failed may not hold them as shown.
RESTS_ON = {
    "allocation_arcs": ["only on allowed arcs"],
    "capacity": ["within their capacities"],
    "conservation": ["without loss"],
    "supply": ["within its supply"],
    "demand": ["within its demand"],
    "allocation_costs": ["figures reported are this allocation"],
    "unused": ["figures reported are this allocation"],
    "unmet": ["figures reported are this allocation"],
    "flow_value": ["figures reported are this allocation"],
    "objective": ["figures reported are this allocation"],
    "hard_shortfall": ["hard demand is met", "less hard demand unmet"],
    "shortfall_cut": ["hard demand is met", "less hard demand unmet"],
    "unmet_demand_policy": ["hard demand is met", "less hard demand unmet"],
    "sense": ["than the dual objective"],
    "potentials": ["than the dual objective"],
    "dual_feasibility": ["than the dual objective"],
    "dual_objective": ["than the dual objective"],
    "complementary_slackness": ["slackness holds", "reaches the bound"],
    "unmet_reasons": ["waits for the reason given"],
}


class _Items(HTMLParser):
    """The text of each item of the proof list, with whether it is marked as holding."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.items: list[tuple[bool, str]] = []
        self._in: bool | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        cls = dict(attrs).get("class") or ""
        if tag == "li" and cls in ("holds", "fails"):
            self._in = cls == "holds"
            self.items.append((self._in, ""))

    def handle_endtag(self, tag: str) -> None:
        if tag == "li":
            self._in = None

    def handle_data(self, data: str) -> None:
        if self._in is not None:
            holds, text = self.items[-1]
            self.items[-1] = (holds, text + data)


def _items(page: str) -> list[tuple[bool, str]]:
    parser = _Items()
    parser.feed(page)
    return parser.items


def _text(page: str) -> str:
    return " ".join(re.sub(r"<[^>]+>", " ", page).split())


@pytest.fixture(scope="module")
def solved() -> dict[str, Any]:
    problem = demo_problem("parts_network.json")   # soft sinks, nodes, capacities
    return {**problem, "answer": solve_body(problem, SETTINGS)}


@pytest.fixture(scope="module")
def verdict(solved) -> dict[str, Any]:
    return verify_body(copy.deepcopy(solved), SETTINGS)


def _forged(verdict: dict[str, Any], *failed: str) -> dict[str, Any]:
    checks = [{**c, "passed": c["name"] not in failed,
               "detail": "forged by the test" if c["name"] in failed else c["detail"]}
              for c in verdict["checks"]]
    return {"valid": not failed, "checks": checks}


def _never_says_it_costs_its_figure(page: str, body: dict[str, Any]) -> None:
    # The table of checks quotes the verifier's own findings (what it recomputed); the
    # rest of the page is the report's own word.
    start = page.index("<h2>Checks of the independent verifier")
    text = _text(page[:start] + page[page.index("<h2>", start + 4):])
    figure = re.escape(str(body["answer"]["objective"]))
    assert not re.search(rf"\b(costs?|scores?)\s+{figure}\b", text), figure
    assert "optimal:" not in text and "it is optimal" not in text


def test_the_checks_named_here_are_the_verifiers(verdict):
    assert {c["name"] for c in verdict["checks"]} == set(RESTS_ON)


def test_a_valid_page_says_what_the_answer_costs(solved, verdict):
    page = render(solved, verdict)
    assert all(holds for holds, _ in _items(page))
    assert f"this one costs {solved['answer']['objective']}" in _text(page)


@pytest.mark.parametrize("failed", list(RESTS_ON))
def test_a_failed_check_is_never_said_to_hold(solved, verdict, failed):
    page = render(solved, _forged(verdict, failed))
    assert "NOT VALID" in page
    items = _items(page)
    for holds, text in items:
        if holds:
            for words in RESTS_ON[failed]:
                assert words not in text, (failed, text)
    assert any(not holds and failed in text for holds, text in items), failed
    _never_says_it_costs_its_figure(page, solved)


def test_a_check_the_page_does_not_know_undermines_every_statement(solved, verdict):
    forged = _forged(verdict)
    forged["valid"] = False
    forged["checks"].append({"name": "a_future_check", "passed": False, "detail": "new"})
    items = _items(render(solved, forged))
    assert items and not any(holds for holds, _ in items)


@pytest.mark.parametrize("tamper", ["objective", "potential", "row", "capacity"])
def test_tampered_answers_say_no_more_than_their_checks_allow(solved, tamper):
    body = copy.deepcopy(solved)
    answer = body["answer"]
    if tamper == "objective":
        answer["objective"] += 7
    elif tamper == "potential":
        answer["certificate"]["potentials"][answer["allocation"][0]["to"]] += 5
    elif tamper == "row":
        del answer["allocation"][0]
    else:
        answer["allocation"][0]["flow"] += 1000
    page, valid = build_report(copy.deepcopy(body), SETTINGS)
    assert valid is False
    failed = [c["name"] for c in verify_body(copy.deepcopy(body), SETTINGS)["checks"]
              if not c["passed"]]
    assert failed
    for holds, text in _items(page):
        if holds:
            assert not any(words in text for name in failed for words in RESTS_ON[name])
    _never_says_it_costs_its_figure(page, body)
    svg = _text(render(body, verify_body(copy.deepcopy(body), SETTINGS), "svg"))
    assert "reported objective" in svg


# --- the SVG alone ----------------------------------------------------------------------------

def test_the_svg_alone_does_not_point_to_a_table_it_lacks():
    n = DIAGRAM_MAX_PER_COLUMN + 1
    problem = {"sources": [{"id": f"crew-{i}"} for i in range(n)],
               "sinks": [{"id": f"job-{j}"} for j in range(n)],
               "costs": [[(i * 7 + j * 3) % 50 + 1 for j in range(n)] for i in range(n)]}
    body = {**problem, "answer": solve_body(problem, SETTINGS)}
    svg, _ = build_report(copy.deepcopy(body), SETTINGS, "svg")
    words = " ".join(t.text or "" for t in ET.fromstring(svg.encode()).iter(SVG_NS + "text"))
    assert "too many to draw" in words
    assert "below" not in words and "table of" not in words
    assert "format=html" in words          # it says where the summary is instead
    page, _ = build_report(copy.deepcopy(body), SETTINGS, "html")
    assert "The table of reduced costs below" in page and "<table" in page


def test_the_page_shows_the_threshold_and_why_each_sink_waits():
    # worked by hand: bottleneck pairs a-y and b-x (60 each); z is reachable only over 90,
    # above the threshold, and c is its only server: it waits for capacity within 60
    problem = {"sources": [{"id": "a"}, {"id": "b"}, {"id": "c"}],
               "sinks": [{"id": "x"}, {"id": "y"}, {"id": "z", "penalty": 500},
                         {"id": "w", "penalty": 5}],
               "costs": [[1, 60, None, None], [60, 100, None, None], [None, None, 90, None]],
               "objective": "bottleneck"}
    body = {**problem, "answer": solve_body(problem, SETTINGS)}
    page = _text(render(body, verify_body(copy.deepcopy(body), SETTINGS)))
    assert "longest trip (bottleneck threshold) 60" in page
    assert "capacity: whoever could serve it is full" in page
    assert "no eligible source: nothing can reach it" in page
    assert any(holds and "waits for the reason given" in text
               for holds, text in _items(render(body, verify_body(copy.deepcopy(body),
                                                                  SETTINGS))))
