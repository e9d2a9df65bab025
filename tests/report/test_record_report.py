"""The audit report of a decision read from the log: the record's fields and the log's
checks are shown, and the page says VALID only when the verifier and every log check
agree (the verdict words are the report's own; common practice, no source)."""

from __future__ import annotations

from typing import Any

from service.report import build_report
from service.report.page import render_record_only
from service.settings import Settings
from service.solve.pipeline import solve_body

# scipy.optimize.linear_sum_assignment docstring example; its optimum is 5
PROBLEM = {"sources": [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}],
           "sinks": [{"id": "c0"}, {"id": "c1"}, {"id": "c2"}],
           "costs": [[4, 1, 3], [2, 0, 5], [3, 2, 2]]}
DECISION = {"id": "0b6f3c1e-6f1a-4d2b-9a57-1d2f5e8c9a10", "recorded_at":
            "2026-12-03T09:30:00.000001Z", "input_sha256": "a" * 64,
            "answer_sha256": "b" * 64, "log_index": 4, "service_version": "0.1.0",
            "caller": "dispatch-desk"}
NAMES = ("leaf", "problem_digest", "answer_digest", "checkpoint", "inclusion")


def _record(failed: str | None = None) -> dict[str, Any]:
    return {"decision": DECISION,
            "checks": [{"name": n, "passed": n != failed,
                        "detail": f"{n} found wanting" if n == failed else f"{n} holds"}
                       for n in NAMES]}


def _page(record: dict[str, Any]) -> tuple[str, bool]:
    answer = solve_body(PROBLEM, Settings())
    assert answer["objective"] == 5
    return build_report({**PROBLEM, "answer": answer}, Settings(), "html", "decision x",
                        record)


def test_an_intact_record_with_a_valid_answer_says_valid() -> None:
    page, valid = _page(_record())
    assert valid
    assert '<p class="word">VALID</p>' in page
    assert "Decision record: INTACT" in page
    for value in DECISION.values():
        assert str(value) in page
    assert page.count('<span class="pass">pass</span>') >= len(NAMES)


def test_a_damaged_record_makes_the_page_not_valid_and_names_the_check() -> None:
    page, valid = _page(_record("inclusion"))
    assert not valid
    assert '<p class="word">NOT VALID</p>' in page
    assert "fails the log&#x27;s checks (inclusion)" in page
    assert "Decision record: DAMAGED" in page and "inclusion found wanting" in page


def test_a_record_without_bodies_is_never_called_valid() -> None:
    page = render_record_only(_record(), "The problem and answer are not kept.")
    assert '<p class="word">NOT CHECKED</p>' in page and "VALID</p>" not in page
    assert "Decision record: INTACT" in page and "not kept" in page
    page = render_record_only(_record("leaf"), "The problem and answer are not kept.")
    assert '<p class="word">NOT VALID</p>' in page and "Decision record: DAMAGED" in page
