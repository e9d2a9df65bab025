"""Flow labels of the network diagram never overlap, measured in the rendered page.

Chromium lays the page out (with the fonts a reader would have: Debian's
fonts-dejavu-core) and a script added to a copy of the page reads the box of every flow
label with ``getBBox``; ``--dump-dom`` hands the boxes back. The report itself runs no
script; only the copy measured here does.
"""

from __future__ import annotations

import copy
import html
import json
import random
import re
import subprocess
from pathlib import Path
from typing import Any

import pytest

from service.cli.demo import demo_problem
from service.report import build_report
from service.report.labels import label_box, place_labels
from service.settings import Settings
from service.solve.pipeline import solve_body
from tests.report.chromium import SCREENSHOT_SECONDS

SETTINGS = Settings()
MEASURE = """<script>
const found = [];
for (const t of document.querySelectorAll('svg g.labels text')) {
  const b = t.getBBox();
  found.push({box: [b.x, b.y, b.x + b.width, b.y + b.height], text: t.textContent,
              x: +t.getAttribute('x'), y: +t.getAttribute('y')});
}
const pre = document.createElement('pre');
pre.id = 'label-boxes';
pre.textContent = JSON.stringify(found);
document.body.appendChild(pre);
</script>"""


def _solved(problem: dict[str, Any]) -> dict[str, Any]:
    return {**problem, "answer": solve_body(problem, SETTINGS)}


def _measured(browser: str, tmp_path: Path, body: dict[str, Any]) -> list[dict[str, Any]]:
    page, _ = build_report(copy.deepcopy(body), SETTINGS)
    assert 'class="labels"' in page, "no diagram with flow labels"
    path = tmp_path / "page.html"
    path.write_text(page.replace("</body>", MEASURE + "</body>"), encoding="utf-8")
    done = subprocess.run(
        [browser, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         f"--user-data-dir={tmp_path / 'profile'}", "--virtual-time-budget=5000",
         "--dump-dom", path.as_uri()],
        capture_output=True, text=True, timeout=SCREENSHOT_SECONDS, check=False)
    found = re.search(r'<pre id="label-boxes">(.*?)</pre>', done.stdout, re.DOTALL)
    assert found, f"exit {done.returncode}: {done.stderr[-1500:]}"
    boxes: list[dict[str, Any]] = json.loads(html.unescape(found.group(1)))
    return boxes


def _overlapping(boxes: list[dict[str, Any]]) -> list[tuple[str, str]]:
    pairs = []
    for i, a in enumerate(boxes):
        for b in boxes[i + 1:]:
            (a0, a1, a2, a3), (b0, b1, b2, b3) = a["box"], b["box"]
            if a0 < b2 and b0 < a2 and a1 < b3 and b1 < a3:
                pairs.append((a["text"], b["text"]))
    return pairs


def _flows_drawn(body: dict[str, Any]) -> int:
    return sum(1 for row in body["answer"]["allocation"] if row["flow"] > 0)


# --- the networks ------------------------------------------------------------------------------

def _parts() -> dict[str, Any]:
    """The demo's warehouses -> depots -> vans."""
    return _solved(demo_problem("parts_network.json"))


def _crowded(seed: int) -> dict[str, Any]:
    """Three warehouses through four depots to sixty vans of uneven demand: 60-odd lines
    fan out of four places and into sixty, with arcs between depots and backwards too."""
    rng = random.Random(seed)
    sources = [{"id": f"wh-{i}", "supply": 400} for i in range(3)]
    nodes = [{"id": f"depot-{d}"} for d in range(4)]
    sinks = [{"id": f"van-{v:02d}", "demand": rng.randint(1, 40)} for v in range(60)]
    arcs = [{"from": s["id"], "to": n["id"], "cost": rng.randint(1, 9),
             "capacity": rng.randint(60, 300)} for s in sources for n in nodes]
    arcs += [{"from": "depot-0", "to": "depot-1", "cost": 1, "capacity": 50},
             {"from": "depot-3", "to": "depot-2", "cost": 1, "capacity": 50}]
    arcs += [{"from": n["id"], "to": v["id"], "cost": rng.randint(1, 30)}
             for n in nodes for v in sinks]
    return _solved({"sources": sources, "nodes": nodes, "sinks": sinks, "arcs": arcs})


def _fan(n: int) -> dict[str, Any]:
    """One source feeding ``n`` sinks of demands 1..n: every label starts at one box."""
    sinks = [{"id": f"t{j}", "demand": j + 1} for j in range(n)]
    return _solved({"sources": [{"id": "hub", "supply": n * (n + 1) // 2}], "sinks": sinks,
                    "arcs": [{"from": "hub", "to": t["id"], "cost": 1} for t in sinks]
                    + [{"from": "hub", "to": "t0", "cost": 2}]})


CASES = {"parts network (demo)": _parts, "crowded depots": lambda: _crowded(5),
         "one source fanning out to 79 sinks": lambda: _fan(79)}


@pytest.mark.parametrize("case", sorted(CASES))
def test_flow_labels_do_not_overlap_in_the_rendered_page(browser, tmp_path, case):
    body = CASES[case]()
    boxes = _measured(browser, tmp_path, body)
    assert boxes, "no flow label was drawn"
    assert not _overlapping(boxes)
    # The estimate the placement works with covers what Chromium drew.
    for label in boxes:
        left, top, right, bottom = label_box(label["x"], label["y"], label["text"])
        x0, y0, x1, y1 = label["box"]
        assert left <= x0 and x1 <= right and top <= y0 and y1 <= bottom, label


def test_the_demo_network_keeps_every_label(browser, tmp_path):
    body = _parts()
    assert len(_measured(browser, tmp_path, body)) == _flows_drawn(body)


def test_the_overlap_check_sees_an_overlap(browser, tmp_path):
    # Control: the labels as they were placed before (each at one fixed point of its
    # line) overlap on the crowded network, so the measurement can fail.
    import service.report.labels as labels

    def fixed(curves, texts, preferred, weights, obstacles):
        return [(x, y + 0.36 * labels.LABEL_SIZE)
                for x, y in (labels._bezier(c, t) for c, t in zip(curves, preferred,
                                                                   strict=True))]

    with pytest.MonkeyPatch.context() as patch:
        patch.setattr("service.report.diagram.place_labels", fixed)
        boxes = _measured(browser, tmp_path, _crowded(5))
    assert _overlapping(boxes)


# --- the placement on its own ------------------------------------------------------------------

def test_placed_labels_never_overlap_and_most_are_kept():
    rng = random.Random(9)
    curves, texts = [], []
    for _ in range(80):           # 80 lines out of one point, a worst case for bunching
        y = rng.uniform(0, 900)
        curves.append(((100.0, 450.0), (225.0, 450.0), (225.0, y), (350.0, y)))
        texts.append(str(rng.randint(1, 999)))
    spots = place_labels(curves, texts, [0.72] * 80, [float(t) for t in texts], [])
    boxes = [label_box(x, b, t) for spot, t in zip(spots, texts, strict=True) if spot
             for x, b in [spot]]
    assert len(boxes) >= 40
    for i, a in enumerate(boxes):
        for b in boxes[i + 1:]:
            assert not (a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3])
    # the largest amounts are the ones kept
    kept = sorted((int(t) for spot, t in zip(spots, texts, strict=True) if spot), reverse=True)
    assert kept[0] == max(int(t) for t in texts)
