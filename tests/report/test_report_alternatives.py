"""The report's section on next-best plans: listed with what each costs more, called
certified only when every check of the partition passes."""

from __future__ import annotations

import copy

from service.report.page import build_report
from service.settings import Settings
from service.solve.pipeline import solve_body

#: The scipy.optimize.linear_sum_assignment docstring example: plans cost 5, 6, 6, 7, 9, 11
#: (the six permutations, worked by hand).
GOOD = {"sources": [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}],
        "sinks": [{"id": "c0"}, {"id": "c1"}, {"id": "c2"}],
        "costs": [[4, 1, 3], [2, 0, 5], [3, 2, 2]], "alternatives": 3}


def _page(answer):
    return build_report({**GOOD, "answer": answer}, Settings())


def test_the_report_lists_the_alternatives():
    answer = solve_body(GOOD, Settings())
    page, valid = _page(answer)
    assert valid
    section = page[page.index("<h2>Next-best plans</h2>"):]
    assert "certified k-best" in section
    assert section.count("<td>#") == 3
    assert "+1" in section and "+2" in section
    assert "+ r0 \u2192 c0" in section          # the first runner-up takes r0 to c0


def test_a_forged_partition_is_not_called_certified():
    answer = solve_body(GOOD, Settings())
    forged = copy.deepcopy(answer)
    forged["partition"]["frontier"].pop()
    page, valid = _page(forged)
    assert not valid
    section = page[page.index("<h2>Next-best plans</h2>"):]
    assert "certified" not in section and "nothing about their rank is shown" in section


def test_no_section_without_alternatives():
    problem = {k: v for k, v in GOOD.items() if k != "alternatives"}
    answer = solve_body(problem, Settings())
    page, _ = build_report({**problem, "answer": answer}, Settings())
    assert "Next-best plans" not in page
