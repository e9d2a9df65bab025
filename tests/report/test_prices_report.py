"""The heat map marks each cell with its force_delta and each chosen pair with its
forbid_delta, once the verifier proved them; a forged price is not drawn."""

from __future__ import annotations

import copy
import re

from service.report import build_report
from service.settings import Settings
from service.solve.pipeline import solve_body

# README's example: three tickets, two technicians; prices worked by hand in README
# ("Override prices"): forcing north->oven costs 10 more, forbidding north->fridge 20.
PROBLEM = {"sources": [{"id": "north", "supply": 2}, {"id": "south", "supply": 1}],
           "sinks": [{"id": "fridge"}, {"id": "oven"}, {"id": "washer", "penalty": 50}],
           "costs": [[20, 35, 60], [30, 25, None]]}


def _cells(svg: str) -> dict[tuple[str, str], str]:
    return dict(((a, b), t) for a, b, t in re.findall(
        r'data-source="([^"]+)" data-sink="([^"]+)"[^>]*><title>([^<]*)</title>', svg))


def test_cells_carry_the_prices():
    answer = solve_body({**PROBLEM, "prices": True}, Settings())
    svg, valid = build_report({**PROBLEM, "answer": answer}, Settings(), "svg")
    assert valid
    cells = _cells(svg)
    assert cells[("north", "oven")].endswith("extra cost to force it: 10")
    assert cells[("north", "fridge")].endswith("extra cost to forbid it: 20")
    assert cells[("south", "oven")].endswith("extra cost to forbid it: 10")
    assert "number: override price" in svg
    html, _ = build_report({**PROBLEM, "answer": answer}, Settings(), "html")
    assert "Every override price is exact." in html


def test_a_forged_price_is_not_drawn():
    answer = solve_body({**PROBLEM, "prices": True}, Settings())
    forged = copy.deepcopy(answer)
    forged["prices"][1]["force_delta"] = 3
    svg, valid = build_report({**PROBLEM, "answer": forged}, Settings(), "svg")
    assert not valid
    assert "to force it" not in svg and "override price" not in svg
    html, _ = build_report({**PROBLEM, "answer": forged}, Settings(), "html")
    assert "Not shown: that the override prices are exact" in html
