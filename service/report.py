"""The audit report: one self-contained page that shows an answer and what its certificate proves.

An auditor gets the problem, an answer and the verdict of the independent verifier
(:func:`service.pipeline.verify_body`, run here, not taken on trust from the answer) and
reads: the verdict, the checks, a picture of the allocation, unmet demand and unused supply,
and in plain words what a valid certificate proves.

The picture depends on the size and shape of the problem:

* bipartite (a cost matrix, or arcs from sources straight to sinks) up to
  ``HEATMAP_MAX`` × ``HEATMAP_MAX``: a heat map of reduced costs, one cell per source and
  sink, chosen pairs ringed, pairs that are not allowed hatched;
* otherwise, up to ``DIAGRAM_MAX_PER_COLUMN`` places per column: a layered diagram of the
  allocation, sources on the left, nodes in the middle, sinks on the right;
* beyond that: no picture, a summary of the reduced costs instead, and the page says so.

The page is HTML with inline CSS and inline SVG only: no script, no external font, image
or style sheet, so it opens offline, can be archived as one file and cannot phone home.
It holds no timestamp: the same input gives the same bytes.

Everything is read from the request as it came over the wire (openapi.yaml), never from
the service's internal network model, so the page explains the answer in the caller's
terms and does not change when the engines do.
"""

from __future__ import annotations

import html
import math
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from service import __version__
from service.pipeline import verify_body
from service.settings import Settings
from service.tables_io import format_number

FORMATS = ("html", "svg")
MEDIA_TYPES = {"html": "text/html; charset=utf-8", "svg": "image/svg+xml"}

#: Largest side of the heat map; beyond it cells get too small to read or to hover.
HEATMAP_MAX = 60
#: Most places in one column of the diagram, and most arcs with flow it draws.
DIAGRAM_MAX_PER_COLUMN = 100
DIAGRAM_MAX_FLOW_ARCS = 600
#: Arcs without flow are drawn faintly for context only while they do not bury the flows.
DIAGRAM_MAX_CONTEXT_ARCS = 300
#: Longest table in the page; the answer file holds every row.
TABLE_MAX_ROWS = 300
#: Longest id shown in a picture; the full id is in the tooltip and the tables.
LABEL_CHARS = 22

_FONT = "'DejaVu Sans', 'Liberation Sans', Arial, sans-serif"
_CHAR_W = 6.8            # average advance of an 11 px sans character, for layout only

# Sequential ramp for reduced costs >= 0: dark = 0 (as good as what was chosen), pale =
# far from worth using. Chosen for contrast with white rings and legibility in greyscale.
_RAMP = ((0.0, (18, 60, 105)), (0.25, (29, 111, 138)), (0.5, (63, 163, 146)),
         (0.75, (166, 212, 159)), (1.0, (243, 240, 215)))
_NEGATIVE = "#b5306b"    # negative reduced cost: allowed only on an arc at its capacity
_UNKNOWN = "#9aa0a6"     # no potential for one end: the reduced cost cannot be computed
_HARD = "#c62828"        # unmet hard demand
_SOFT = "#e0a100"        # unmet soft demand (a penalty is paid)
_SPARE = "#5c7a99"       # unused supply
_FLOW = "#1d6f8a"
_FULL = "#123c69"

_CHECK_GROUPS = (
    ("feasible", ("allocation_arcs", "allocation_costs", "capacity", "conservation", "supply",
                  "demand", "unused", "unmet", "flow_value")),
    ("shortfall", ("hard_shortfall", "shortfall_cut")),
    ("cost", ("sense", "objective", "potentials", "dual_feasibility",
              "complementary_slackness", "dual_objective")),
)

_XML_INVALID = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ud800-\udfff\ufffe\uffff]")


# --- text helpers -------------------------------------------------------------------------

def _esc(text: Any) -> str:
    """Text for HTML and for XML (the SVG format): escaped, XML-invalid characters replaced.

    Ids are whatever the caller sent; a control character would make the SVG unparsable and
    markup would run in the auditor's browser.
    """
    return html.escape(_XML_INVALID.sub("\ufffd", str(text)), quote=True)


def _short(text: str, limit: int = LABEL_CHARS) -> str:
    return text if len(text) <= limit else text[: limit - 1] + "\u2026"


def _num(x: Any) -> str:
    if isinstance(x, float) and math.isnan(x):
        return "?"
    return format_number(x)


def _plural(n: int, word: str, many: str | None = None) -> str:
    return f"{n} {word if n == 1 else (many or word + 's')}"


def _ramp(t: float) -> str:
    t = min(max(t, 0.0), 1.0)
    for (t0, c0), (t1, c1) in zip(_RAMP, _RAMP[1:], strict=False):
        if t <= t1:
            f = 0.0 if t1 == t0 else (t - t0) / (t1 - t0)
            rgb = [round(a + (b - a) * f) for a, b in zip(c0, c1, strict=True)]
            return "#{:02x}{:02x}{:02x}".format(*rgb)
    return "#{:02x}{:02x}{:02x}".format(*_RAMP[-1][1])


def _ids(items: Iterable[Mapping[str, Any]]) -> list[str]:
    return [str(item["id"]) for item in items]


def _count(value: Any) -> int:
    """A quantity as the wire format reads it: absent or null means 1."""
    return 1 if value is None else int(value)


# --- the model: the request and answer as arrays ------------------------------------------

@dataclass
class _Model:
    answer: dict[str, Any]
    verdict: dict[str, Any]
    sources: list[str]
    nodes: list[str]
    sinks: list[str]
    supply: list[int]
    demand: list[int]
    penalty: list[float | None]
    maximize: bool
    from_matrix: bool
    unmet_policy: str
    tail: np.ndarray          # per arc, index into places (sources, nodes, sinks)
    head: np.ndarray
    cost: np.ndarray          # as given (scores for max)
    cap: np.ndarray           # inf where unbounded
    flow: np.ndarray = field(init=False)
    rc: np.ndarray = field(init=False)
    violation: np.ndarray = field(init=False)
    stray: list[dict[str, Any]] = field(default_factory=list)
    unmet: dict[str, int] = field(default_factory=dict)
    unused: dict[str, int] = field(default_factory=dict)
    pi: np.ndarray = field(init=False)

    @property
    def places(self) -> list[str]:
        return self.sources + self.nodes + self.sinks

    @property
    def sink_offset(self) -> int:
        return len(self.sources) + len(self.nodes)

    @property
    def valid(self) -> bool:
        return self.verdict.get("valid") is True

    @property
    def bipartite(self) -> bool:
        """Every arc runs from a source to a sink, at most one per pair: a matrix."""
        if self.from_matrix:
            return True
        if self.nodes or not len(self.tail):
            return bool(not self.nodes and len(self.sources) and len(self.sinks))
        if (self.tail >= len(self.sources)).any() or (self.head < self.sink_offset).any():
            return False
        pairs = self.tail * len(self.sinks) + (self.head - self.sink_offset)
        return len(np.unique(pairs)) == len(pairs)


def _model(body: Mapping[str, Any], verdict: Mapping[str, Any]) -> _Model:
    answer = body["answer"]
    sources, nodes, sinks = _ids(body["sources"]), _ids(body.get("nodes") or []), _ids(
        body["sinks"])
    index = {pid: i for i, pid in enumerate(sources + nodes + sinks)}
    off = len(sources) + len(nodes)
    if "costs" in body and body["costs"] is not None:
        grid = np.array(body["costs"], dtype=np.float64).reshape(len(sources), len(sinks))
        rows, cols = np.nonzero(~np.isnan(grid))
        tail, head = rows.astype(np.int64), (cols + off).astype(np.int64)
        cost = grid[rows, cols]
        cap = np.full(len(cost), np.inf)
        from_matrix = True
    else:
        arcs = body.get("arcs") or []
        tail = np.array([index.get(a["from"], -1) for a in arcs], np.int64)
        head = np.array([index.get(a["to"], -1) for a in arcs], np.int64)
        cost = np.array([a["cost"] for a in arcs], np.float64)
        cap = np.array([np.inf if a.get("capacity") is None else a["capacity"] for a in arcs],
                       np.float64)
        from_matrix = False
    m = _Model(
        answer=dict(answer), verdict=dict(verdict), sources=sources, nodes=nodes, sinks=sinks,
        supply=[_count(s.get("supply")) for s in body["sources"]],
        demand=[_count(s.get("demand")) for s in body["sinks"]],
        penalty=[s.get("penalty") for s in body["sinks"]],
        maximize=body.get("objective", "min") == "max",
        from_matrix=from_matrix, unmet_policy=str(body.get("unmet_demand", "minimize")),
        tail=tail, head=head, cost=cost, cap=cap)
    m.unmet = _amounts(answer.get("unmet", []))
    m.unused = _amounts(answer.get("unused", []))
    m.flow = _flows(m, answer.get("allocation", []), index, len(sinks))
    potentials = answer.get("certificate", {}).get("potentials", {})
    m.pi = np.array([_float(potentials.get(p)) for p in m.places], np.float64)
    # The verifier's min form: scores negated for max, penalties not involved here.
    c = -cost if m.maximize else cost
    if len(tail):
        m.rc = c - m.pi[tail] + m.pi[head]
        eps = 1e-9 * (np.abs(c) + np.abs(m.pi[tail]) + np.abs(m.pi[head])) + 1e-9
        with np.errstate(invalid="ignore"):
            m.violation = ((m.flow > 0) & (m.rc > eps)) | ((m.rc < -eps) & (m.flow < cap))
    else:
        m.rc = np.zeros(0)
        m.violation = np.zeros(0, bool)
    return m


def _float(x: Any) -> float:
    return float(x) if isinstance(x, int | float) and not isinstance(x, bool) else math.nan


def _amounts(rows: Iterable[Mapping[str, Any]]) -> dict[str, int]:
    found: dict[str, int] = {}
    for row in rows:
        found[str(row["id"])] = found.get(str(row["id"]), 0) + int(row["amount"])
    return found


def _flows(m: _Model, rows: Sequence[Mapping[str, Any]], index: Mapping[str, int],
           n_sinks: int) -> np.ndarray:
    """Flow per arc from the allocation rows; rows that name no arc go to ``m.stray``."""
    flow = np.zeros(len(m.tail), np.int64)
    if m.from_matrix:
        # Arcs are the allowed cells in row-major order, so a cell's arc is found by
        # binary search on its flat index: no dictionary of up to 16 million cells.
        flat = m.tail * n_sinks + (m.head - (len(m.sources) + len(m.nodes)))
        pair_of: dict[tuple[int, int], int] = {}
    else:
        flat = np.zeros(0, np.int64)
        pair_of = {}
        for k, (t, h) in enumerate(zip(m.tail.tolist(), m.head.tolist(), strict=True)):
            pair_of.setdefault((t, h), k)
    for row in rows:
        t, h = index.get(str(row["from"]), -1), index.get(str(row["to"]), -1)
        k = -1
        if t >= 0 and h >= 0:
            arc = row.get("arc")
            if (not m.from_matrix and isinstance(arc, int) and 0 <= arc < len(m.tail)
                    and m.tail[arc] == t and m.head[arc] == h):
                k = arc
            elif m.from_matrix:
                sink = h - (len(m.sources) + len(m.nodes))
                if t < len(m.sources) and 0 <= sink < n_sinks:
                    pos = int(np.searchsorted(flat, t * n_sinks + sink))
                    if pos < len(flat) and flat[pos] == t * n_sinks + sink:
                        k = pos
            else:
                k = pair_of.get((t, h), -1)
        if k < 0:
            m.stray.append(dict(row))
        else:
            flow[k] += int(row["flow"])
    return flow


# --- the verdict in words ---------------------------------------------------------------

def _checks(m: _Model) -> list[dict[str, Any]]:
    return list(m.verdict.get("checks", []))


def _failed(m: _Model) -> list[dict[str, Any]]:
    return [c for c in _checks(m) if not c.get("passed")]


def _verdict_sentence(m: _Model) -> str:
    checks, failed = _checks(m), _failed(m)
    if m.valid:
        return (f"The independent verifier recomputed the answer from the problem alone and "
                f"all {len(checks)} checks passed: the allocation is proven optimal.")
    names = ", ".join(str(c.get("name")) for c in failed)
    return (f"{len(failed)} of {len(checks)} checks failed ({names}): this answer is not "
            "proven optimal. Do not act on it without solving again.")


def _group_passed(m: _Model, names: Sequence[str]) -> bool:
    return all(c.get("passed") for c in _checks(m) if c.get("name") in names)


def _proof_items(m: _Model) -> list[tuple[bool, str]]:
    """(holds, sentence) for each thing a valid certificate proves, with this answer's numbers."""
    cert = m.answer.get("certificate", {})
    short = int(cert.get("hard_shortfall", 0) or 0)
    cut = cert.get("cut", {}) or {}
    objective = _num(m.answer.get("objective"))
    dual = _num(cert.get("dual_objective"))
    hard_total = sum(d for d, p in zip(m.demand, m.penalty, strict=True) if p is None)
    groups = dict((name, _group_passed(m, names)) for name, names in _CHECK_GROUPS)
    items = [(groups["feasible"],
              "<b>The allocation is possible.</b> Every unit leaves a source within its supply, "
              "travels only on allowed arcs and within their capacities, passes through nodes "
              "without loss and arrives at a sink within its demand; the unmet demand, unused "
              "supply and objective are as reported.")]
    if short == 0:
        items.append((groups["shortfall"],
                      f"<b>All hard demand is met</b> ({_plural(hard_total, 'unit')} on sinks "
                      "without a penalty), so no cut is needed to justify a shortfall."))
    else:
        sinks = [str(s) for s in cut.get("sinks", [])]
        named = ", ".join(_esc(s) for s in sinks[:8]) + (
            f" and {len(sinks) - 8} more" if len(sinks) > 8 else "")
        items.append((groups["shortfall"],
                      f"<b>No allocation can leave less hard demand unmet than "
                      f"{_plural(short, 'unit')}.</b> The hard sinks behind the cut "
                      f"({named}) need {_num(cut.get('demand'))} units, but the sources and "
                      f"arcs that can reach them carry at most {_num(cut.get('capacity'))}. "
                      "That is the max-flow min-cut theorem: no routing gets more across "
                      "the cut than its capacity."))
    if m.maximize:
        claim = "scores more"
        bound = (f"no such allocation can score more (scores less penalties) than the dual "
                 f"objective, {dual}; this one scores {objective}.")
    else:
        claim = "costs less"
        bound = (f"no such allocation can cost less (costs plus penalties) than the dual "
                 f"objective, {dual}; this one costs {objective}.")
    items.append((groups["cost"],
                  f"<b>No allocation that leaves {_plural(short, 'unit')} of hard demand "
                  f"unmet {claim}.</b> Every source, node and sink "
                  "carries a potential \u03c0 and every arc i\u2192j a <i>reduced cost</i>, "
                  "cost \u2212 \u03c0(i) + \u03c0(j): what using the arc costs beyond what "
                  "the potentials already account for"
                  + (" (scores count as negative costs)" if m.maximize else "") + ". "
                  "<i>Complementary slackness</i> holds: no arc with a positive reduced cost "
                  "carries anything, every arc with a negative reduced cost is full, and no "
                  "unbounded arc has a negative reduced cost. From the potentials alone "
                  "follows, by linear programming duality, that " + bound))
    return items


# --- SVG pieces ---------------------------------------------------------------------------

def _svg_open(width: float, height: float, label: str, standalone: bool) -> str:
    ns = ' xmlns="http://www.w3.org/2000/svg"' if standalone else ""
    return (f'<svg{ns} class="figure" viewBox="0 0 {width:.0f} {height:.0f}" '
            f'width="{width:.0f}" height="{height:.0f}" role="img" '
            f'font-family="{_esc(_FONT)}" font-size="11"><title>{_esc(label)}</title>')


def _defs() -> str:
    return (
        "<defs>"
        '<pattern id="hatch" patternUnits="userSpaceOnUse" width="6" height="6" '
        'patternTransform="rotate(45)"><rect width="6" height="6" fill="#f1f1ef"/>'
        '<line x1="0" y1="0" x2="0" y2="6" stroke="#c9c9c4" stroke-width="2"/></pattern>'
        '<linearGradient id="ramp">'
        + "".join(f'<stop offset="{t:g}" stop-color="{_ramp(t)}"/>' for t, _ in _RAMP)
        + "</linearGradient>"
        + "".join(
            f'<marker id="arrow-{name}" viewBox="0 0 10 10" refX="9" refY="5" '
            'markerUnits="userSpaceOnUse" markerWidth="9" markerHeight="9" orient="auto">'
            f'<path d="M0,0 L10,5 L0,10 z" fill="{colour}"/></marker>'
            for name, colour in (("flow", _FLOW), ("full", _FULL), ("bad", _HARD)))
        + "</defs>")


def _text(x: float, y: float, text: str, *, anchor: str = "start", size: float | None = None,
          fill: str = "#1f2933", weight: str | None = None, extra: str = "") -> str:
    attrs = f' x="{x:.1f}" y="{y:.1f}" fill="{fill}"'
    if anchor != "start":
        attrs += f' text-anchor="{anchor}"'
    if size is not None:
        attrs += f' font-size="{size:g}"'
    if weight:
        attrs += f' font-weight="{weight}"'
    return f"<text{attrs}{extra}>{_esc(text)}</text>"


def _caption(m: _Model) -> str:
    """The verdict line of a standalone SVG, on a white ground for dark image viewers."""
    word = "VALID" if m.valid else "NOT VALID"
    colour = "#1b5e20" if m.valid else _HARD
    checks = _checks(m)
    passed = len(checks) - len(_failed(m))
    line = (f"objective {_num(m.answer.get('objective'))} \u00b7 {passed} of {len(checks)} "
            "checks passed \u00b7 certimatch audit")
    return ('<rect class="ground" width="100%" height="100%" fill="#ffffff"/>'
            + _text(16, 24, word, size=16, fill=colour, weight="bold")
            + _text(16 + len(word) * 11 + 12, 24, line, fill="#52606d"))


def _legend_ramp(x: float, y: float, top: float, maximize: bool) -> str:
    title = "reduced cost" + (" (scores negated)" if maximize else "")
    parts = [_text(x, y - 6, title, fill="#52606d"),
             f'<rect x="{x:.1f}" y="{y:.1f}" width="180" height="12" fill="url(#ramp)" '
             'stroke="#9aa5b1" stroke-width="0.5"/>']
    for frac in (0.0, 0.5, 1.0):
        parts.append(_text(x + 180 * frac, y + 25, _num(top * frac), anchor="middle",
                           size=10, fill="#52606d"))
    return "".join(parts)


def _legend_swatches(x: float, y: float, items: Sequence[tuple[str, str]]) -> str:
    parts = []
    for k, (swatch, label) in enumerate(items):
        cx = x + (k % 3) * 170
        cy = y + (k // 3) * 20
        parts.append(f'<g transform="translate({cx:.1f},{cy:.1f})">{swatch}'
                     + _text(20, 10, label, fill="#52606d") + "</g>")
    return "".join(parts)


def _ring(cx: float, cy: float, r: float, cls: str = "ring") -> str:
    # Dark under light: visible on the darkest and the palest cell alike.
    return (f'<circle class="{cls}" cx="{cx:.1f}" cy="{cy:.1f}" r="{r:.1f}" fill="none" '
            f'stroke="#0b0f14" stroke-width="3.5"/>'
            f'<circle cx="{cx:.1f}" cy="{cy:.1f}" r="{r:.1f}" fill="none" stroke="#ffffff" '
            'stroke-width="1.6"/>')


def _cross(x: float, y: float, s: float, cls: str = "violation") -> str:
    a, b = x + s * 0.18, x + s * 0.82
    c, d = y + s * 0.18, y + s * 0.82
    return (f'<path class="{cls}" d="M{a:.1f},{c:.1f} L{b:.1f},{d:.1f} M{b:.1f},{c:.1f} '
            f'L{a:.1f},{d:.1f}" stroke="{_HARD}" stroke-width="2.2" stroke-linecap="round"/>')


# --- the heat map -------------------------------------------------------------------------

def _heatmap(m: _Model, standalone: bool) -> str:
    n_rows, n_cols = len(m.sources), len(m.sinks)
    off = m.sink_offset
    cell_of = np.full((n_rows, n_cols), -1, np.int64)
    cell_of[m.tail, m.head - off] = np.arange(len(m.tail))
    s = float(min(max(int(640 / max(n_rows, n_cols, 1)), 12), 40))
    row_w = min(max((len(x) for x in m.sources), default=4), LABEL_CHARS) * _CHAR_W + 12
    col_len = min(max((len(x) for x in m.sinks), default=4), LABEL_CHARS) * _CHAR_W
    col_h = col_len * math.sin(math.radians(60)) + 16
    caption_h = 40.0 if standalone else 0.0
    left, top = 16 + row_w, caption_h + 12 + col_h
    gap = 10.0
    spare_w = max(s, 38.0)
    short_h = max(s, 20.0)
    grid_w, grid_h = n_cols * s, n_rows * s
    known = m.rc[~np.isnan(m.rc)] if len(m.rc) else np.zeros(0)
    top_rc = float(known.max()) if len(known) and known.max() > 0 else 1.0
    legend_y = top + grid_h + gap + short_h + 34
    # At least as wide as the legend: the ramp and three columns of swatches.
    width = max(left + grid_w + gap + spare_w + col_len * 0.5 + 24, 236 + 3 * 170.0)
    height = legend_y + 88
    label = (f"Reduced costs of {n_rows} sources \u00d7 {n_cols} sinks; chosen pairs ringed")
    out = [_svg_open(width, height, label, standalone), _defs()]
    if standalone:
        out.append(_caption(m))
    out.append('<g class="labels">')
    for i, sid in enumerate(m.sources):
        out.append(f'<text x="{left - 6:.1f}" y="{top + i * s + s / 2 + 4:.1f}" '
                   f'text-anchor="end" fill="#1f2933"><title>{_esc(sid)}</title>'
                   f'{_esc(_short(sid))}</text>')
    for j, sid in enumerate(m.sinks):
        x, y = left + j * s + s / 2 + 3, top - 6
        out.append(f'<text x="{x:.1f}" y="{y:.1f}" transform="rotate(-60 {x:.1f} {y:.1f})" '
                   f'fill="#1f2933"><title>{_esc(sid)}</title>{_esc(_short(sid))}</text>')
    out.append("</g><g class=\"cells\">")
    show_numbers = s >= 24
    marks: list[str] = []
    for i in range(n_rows):
        y = top + i * s
        for j in range(n_cols):
            x = left + j * s
            k = int(cell_of[i, j])
            where = f'data-source="{_esc(m.sources[i])}" data-sink="{_esc(m.sinks[j])}"'
            if k < 0:
                out.append(f'<rect class="cell forbidden" x="{x:.1f}" y="{y:.1f}" '
                           f'width="{s - 1:.1f}" height="{s - 1:.1f}" fill="url(#hatch)" '
                           f'{where}><title>{_esc(m.sources[i])} \u2192 {_esc(m.sinks[j])}: '
                           "not allowed</title></rect>")
                continue
            rc = float(m.rc[k])
            chosen = bool(m.flow[k] > 0)
            if math.isnan(rc):
                fill, dark = _UNKNOWN, True
            elif rc < 0:
                fill, dark = _NEGATIVE, True
            else:
                t = rc / top_rc
                fill, dark = _ramp(t), t < 0.55
            classes = "cell chosen" if chosen else "cell"
            tip = (f"{m.sources[i]} \u2192 {m.sinks[j]}: {'score' if m.maximize else 'cost'} "
                   f"{_num(float(m.cost[k]))}, reduced cost {_num(rc)}"
                   + (f", flow {int(m.flow[k])}" if chosen else ""))
            if m.violation[k]:
                tip += " \u2014 violates complementary slackness"
            out.append(f'<rect class="{classes}" x="{x:.1f}" y="{y:.1f}" width="{s - 1:.1f}" '
                       f'height="{s - 1:.1f}" fill="{fill}" {where} data-rc="{_num(rc)}">'
                       f"<title>{_esc(tip)}</title></rect>")
            text = _num(rc)
            if show_numbers and len(text) <= 4:
                marks.append(_text(x + (s - 1) / 2, y + s / 2 + 3.5, text, anchor="middle",
                                   size=9.5, fill="#ffffff" if dark else "#1f2933",
                                   extra=' pointer-events="none"'))
            if chosen:
                marks.append(_ring(x + (s - 1) / 2, y + (s - 1) / 2, (s - 1) * 0.34))
                if m.flow[k] > 1 and s >= 20:
                    # The amount, in the corner the ring leaves free, on a halo of its own.
                    marks.append(_text(x + s - 2.5, y + s - 3, f"\u00d7{int(m.flow[k])}",
                                       anchor="end", size=8.5, fill="#1f2933", weight="bold",
                                       extra=' stroke="#ffffff" stroke-width="2.5" '
                                             'paint-order="stroke"'))
            if m.violation[k]:
                marks.append(_cross(x, y, s - 1))
    out.append("</g><g class=\"marks\">" + "".join(marks) + "</g>")
    # Margins: spare supply right of each row, unmet demand under each column.
    mx = left + grid_w + gap
    out.append('<g class="margins">')
    if m.unused:
        out.append(_text(mx + spare_w / 2, top - 6, "spare", anchor="middle", fill="#52606d"))
    for i, sid in enumerate(m.sources):
        spare = m.unused.get(sid, 0)
        if spare:
            y = top + i * s
            out.append(f'<rect class="spare" x="{mx:.1f}" y="{y:.1f}" width="{spare_w - 1:.1f}" '
                       f'height="{s - 1:.1f}" fill="{_SPARE}" rx="2"><title>{_esc(sid)}: '
                       f"{spare} unused</title></rect>"
                       + _text(mx + spare_w / 2, y + s / 2 + 3.5, str(spare), anchor="middle",
                               size=10, fill="#ffffff"))
    my = top + grid_h + gap
    if m.unmet:
        out.append(_text(left - 6, my + short_h / 2 + 4, "short", anchor="end",
                         fill="#52606d"))
    for j, sid in enumerate(m.sinks):
        short = m.unmet.get(sid, 0)
        if short:
            x = left + j * s
            hard = m.penalty[j] is None
            out.append(f'<rect class="short {"hard" if hard else "soft"}" x="{x:.1f}" '
                       f'y="{my:.1f}" width="{s - 1:.1f}" height="{short_h:.1f}" '
                       f'fill="{_HARD if hard else _SOFT}" rx="2"><title>{_esc(sid)}: {short} '
                       f"unmet ({'hard' if hard else 'soft, penalty ' + _num(m.penalty[j])})"
                       "</title></rect>"
                       + _text(x + (s - 1) / 2, my + short_h / 2 + 3.5, str(short),
                               anchor="middle", size=9.5, fill="#ffffff" if hard else "#1f2933"))
    out.append("</g>")
    out.append(_legend_ramp(16, legend_y, top_rc, m.maximize))
    box = '<rect width="14" height="14" rx="1" '
    out.append(_legend_swatches(236, legend_y - 10, [
        (box + 'fill="url(#hatch)" stroke="#c9c9c4"/>', "not allowed"),
        (box + f'fill="{_ramp(0)}"/>' + _ring(7, 7, 5, "key"), "chosen (carries flow)"),
        (box + f'fill="{_NEGATIVE}"/>', "negative reduced cost"),
        (box + f'fill="{_SPARE}"/>', "spare supply"),
        (box + f'fill="{_HARD}"/>', "hard demand unmet"),
        (box + f'fill="{_SOFT}"/>', "soft demand unmet"),
        (box + 'fill="#ffffff" stroke="#c9c9c4"/>' + _cross(0, 0, 14, "key"),
         "breaks slackness"),
        (box + f'fill="{_UNKNOWN}"/>', "no potential given"),
    ]))
    out.append("</svg>")
    return "".join(out)


# --- the layered diagram ------------------------------------------------------------------

def _diagram(m: _Model, standalone: bool) -> str:
    columns = [("sources", m.sources, 0), ("nodes", m.nodes, len(m.sources)),
               ("sinks", m.sinks, m.sink_offset)]
    columns = [c for c in columns if c[1]]
    tallest = max(len(c[1]) for c in columns)
    row_h = 24.0 if tallest <= 30 else 15.0
    font = 11.0 if tallest <= 30 else 9.0
    box_w = min(max((len(p) for p in m.places), default=4), LABEL_CHARS) * _CHAR_W * (
        font / 11) + 14
    col_gap = 250.0
    caption_h = 40.0 if standalone else 0.0
    top = caption_h + 40
    badge_w = 78.0
    x0 = 16 + badge_w
    pos: dict[int, tuple[float, float]] = {}     # place -> (left x, centre y)
    out_boxes: list[str] = []
    for c, (title, ids, first) in enumerate(columns):
        x = x0 + c * (box_w + col_gap)
        column_h = len(ids) * row_h
        y0 = top + (tallest * row_h - column_h) / 2
        out_boxes.append(_text(x + box_w / 2, top - 14, title, anchor="middle",
                               fill="#52606d", weight="bold"))
        fill = {"sources": "#e3eef7", "nodes": "#efe9f7", "sinks": "#e8f3e8"}[title]
        for r, pid in enumerate(ids):
            y = y0 + r * row_h
            pos[first + r] = (x, y + (row_h - 4) / 2)
            out_boxes.append(
                f'<g class="place {title[:-1]}"><rect x="{x:.1f}" y="{y:.1f}" '
                f'width="{box_w:.1f}" height="{row_h - 4:.1f}" rx="4" fill="{fill}" '
                f'stroke="#8a9bb0" stroke-width="0.8"/><title>{_esc(pid)}</title>'
                + _text(x + 7, y + (row_h - 4) / 2 + font * 0.36, _short(pid), size=font)
                + "</g>")
    width = x0 + len(columns) * box_w + (len(columns) - 1) * col_gap + badge_w + 24
    legend_y = top + tallest * row_h + 30
    height = legend_y + 40
    label = (f"Allocation of {len(m.sources)} sources to {len(m.sinks)} sinks"
             + (f" through {len(m.nodes)} nodes" if m.nodes else "")
             + "; line width is the flow")
    out = [_svg_open(width, height, label, standalone), _defs()]
    if standalone:
        out.append(_caption(m))

    def curve(k: int) -> tuple[tuple[float, float], ...]:
        """The four control points of the arc's cubic Bezier curve."""
        (xt, yt), (xh, yh) = pos[int(m.tail[k])], pos[int(m.head[k])]
        if xh > xt:
            a, b = xt + box_w, xh
            dx = (b - a) / 2
            return (a, yt), (a + dx, yt), (b - dx, yh), (b, yh)
        if xh == xt:           # within one column (depot to depot): bulge out to the right
            a = xt + box_w
            return (a, yt), (a + 70, yt), (a + 70, yh), (a, yh)
        a, b = xt, xh + box_w  # backwards: leave on the left, arrive on the right
        dx = (a - b) / 2
        return (a, yt), (a - dx, yt), (b + dx, yh), (b, yh)

    def path(k: int) -> str:
        p0, p1, p2, p3 = curve(k)
        return (f"M{p0[0]:.1f},{p0[1]:.1f} C{p1[0]:.1f},{p1[1]:.1f} "
                f"{p2[0]:.1f},{p2[1]:.1f} {p3[0]:.1f},{p3[1]:.1f}")

    valid_arc = (m.tail >= 0) & (m.head >= 0)
    if len(m.tail) <= DIAGRAM_MAX_CONTEXT_ARCS:
        out.append('<g class="context">')
        for k in np.flatnonzero(valid_arc & (m.flow == 0)).tolist():
            out.append(f'<path d="{path(k)}" fill="none" stroke="#cfd6de" stroke-width="1">'
                       f"<title>{_esc(_arc_tip(m, k))}</title></path>")
        out.append("</g>")
    used = np.flatnonzero(valid_arc & (m.flow > 0))
    top_flow = float(m.flow[used].max()) if len(used) else 1.0
    # Width shows amounts; a line no wider than a third of a row keeps neighbours apart.
    # When every line carries the same amount (an assignment) width and labels say nothing.
    widest = min(7.5, row_h * 0.33)
    uneven = bool(len(used)) and int(m.flow[used].min()) != int(m.flow[used].max())
    fan_out = np.bincount(m.tail[used], minlength=len(m.places))
    fan_in = np.bincount(m.head[used], minlength=len(m.places))
    out.append('<g class="flows">')
    labels: list[str] = []
    for k in used.tolist():
        full = bool(np.isfinite(m.cap[k]) and m.flow[k] >= m.cap[k])
        kind = "bad" if m.violation[k] else ("full" if full else "flow")
        colour = {"bad": _HARD, "full": _FULL, "flow": _FLOW}[kind]
        w = 1.2 + (widest - 1.2) * float(m.flow[k]) / top_flow if uneven else 2.0
        d = path(k)
        out.append(f'<path class="flow {kind}" d="{d}" fill="none" stroke="{colour}" '
                   f'stroke-width="{w:.2f}" stroke-opacity="0.85" '
                   f'marker-end="url(#arrow-{kind})"><title>{_esc(_arc_tip(m, k))}</title>'
                   "</path>")
        if uneven and len(used) <= 80:
            # Fan-outs bunch their labels near the shared tail, fan-ins near the shared
            # head; a label goes to the end of the line where it has more room.
            t = 0.72 if fan_out[int(m.tail[k])] >= fan_in[int(m.head[k])] else 0.28
            x, y = _bezier(curve(k), t)
            labels.append(_text(x, y + 3.5, str(int(m.flow[k])), anchor="middle",
                                size=9.5, fill=colour, weight="bold",
                                extra=' stroke="#ffffff" stroke-width="3" '
                                      'paint-order="stroke"'))
    out.append("</g>")
    out.extend(out_boxes)
    out.append('<g class="labels">' + "".join(labels) + "</g>")
    out.append('<g class="badges">')
    for i, sid in enumerate(m.sources):
        if m.unused.get(sid):
            x, y = pos[i]
            out.append(_badge(x - badge_w - 6, y, f"spare {m.unused[sid]}", _SPARE, "spare",
                              f"{sid}: {m.unused[sid]} unused"))
    for j, sid in enumerate(m.sinks):
        if m.unmet.get(sid):
            x, y = pos[m.sink_offset + j]
            hard = m.penalty[j] is None
            out.append(_badge(x + box_w + 6, y, f"short {m.unmet[sid]}",
                              _HARD if hard else _SOFT, "short hard" if hard else "short soft",
                              f"{sid}: {m.unmet[sid]} unmet, "
                              + ("hard demand" if hard else f"penalty {_num(m.penalty[j])}")))
    out.append("</g>")
    sw = '<rect width="14" height="14" rx="2" '
    out.append(_legend_swatches(16, legend_y, [
        (f'<path d="M0,7 L14,7" stroke="{_FLOW}" stroke-width="4"/>', "flow (width = units)"),
        (f'<path d="M0,7 L14,7" stroke="{_FULL}" stroke-width="4"/>', "flow at capacity"),
        ('<path d="M0,7 L14,7" stroke="#cfd6de" stroke-width="1.5"/>', "allowed, unused"),
        (f'<path d="M0,7 L14,7" stroke="{_HARD}" stroke-width="4"/>', "breaks slackness"),
        (sw + f'fill="{_HARD}"/>', "hard demand unmet"),
        (sw + f'fill="{_SOFT}"/>', "soft demand unmet"),
    ]))
    out.append("</svg>")
    return "".join(out)


def _bezier(points: Sequence[tuple[float, float]], t: float) -> tuple[float, float]:
    (x0, y0), (x1, y1), (x2, y2), (x3, y3) = points
    u = 1 - t
    w = (u * u * u, 3 * u * u * t, 3 * u * t * t, t * t * t)
    return (w[0] * x0 + w[1] * x1 + w[2] * x2 + w[3] * x3,
            w[0] * y0 + w[1] * y1 + w[2] * y2 + w[3] * y3)


def _badge(x: float, y: float, text: str, colour: str, cls: str, tip: str) -> str:
    dark_text = colour == _SOFT
    return (f'<g class="{cls}"><rect x="{x:.1f}" y="{y - 8:.1f}" width="72" height="16" '
            f'rx="8" fill="{colour}"/><title>{_esc(tip)}</title>'
            + _text(x + 36, y + 3.5, text, anchor="middle", size=10,
                    fill="#1f2933" if dark_text else "#ffffff", weight="bold") + "</g>")


def _arc_tip(m: _Model, k: int) -> str:
    places = m.places
    cap = m.cap[k]
    return (f"{places[int(m.tail[k])]} \u2192 {places[int(m.head[k])]}: "
            f"{'score' if m.maximize else 'cost'} {_num(float(m.cost[k]))}"
            + (f", capacity {_num(int(cap))}" if np.isfinite(cap) else "")
            + f", flow {int(m.flow[k])}, reduced cost {_num(float(m.rc[k]))}"
            + (" \u2014 violates complementary slackness" if m.violation[k] else ""))


# --- choosing the picture -----------------------------------------------------------------

def _picture(m: _Model, standalone: bool) -> tuple[str | None, str]:
    """(SVG or None, a sentence saying what is drawn and why)."""
    rows, cols = len(m.sources), len(m.sinks)
    if m.bipartite and rows <= HEATMAP_MAX and cols <= HEATMAP_MAX:
        meaning = ("how much score per unit using that pair would give up (scores negated)"
                   if m.maximize else
                   "how much more per unit using that pair would cost than the potentials "
                   "allow for")
        return _heatmap(m, standalone), (
            "Each cell is a pair of a source (row) and a sink (column), coloured by the "
            f"reduced cost of its arc: {meaning}. Chosen pairs are ringed and sit at 0; an "
            "unchosen cell at "
            "0 is an equally good alternative, pale cells are far from worth using, hatched "
            "pairs are not allowed. Spare supply is on the right, unmet demand at the bottom. "
            "Hover a cell for its numbers.")
    why = ""
    if m.bipartite:
        why = (f"The problem has {rows} sources and {cols} sinks, more than the "
               f"{HEATMAP_MAX} \u00d7 {HEATMAP_MAX} a readable heat map holds, so ")
    columns = max(rows, cols, len(m.nodes))
    flows = int((m.flow > 0).sum())
    if columns <= DIAGRAM_MAX_PER_COLUMN and flows <= DIAGRAM_MAX_FLOW_ARCS:
        lead = why + ("only the allocation is drawn" if why else "The allocation is drawn")
        return _diagram(m, standalone), (
            f"{lead}: sources on the left, "
            + ("nodes in the middle, " if m.nodes else "")
            + "sinks on the right; line width is the flow, dark lines are arcs at their "
            "capacity" + (", thin grey lines allowed arcs that carry nothing"
                          if len(m.tail) <= DIAGRAM_MAX_CONTEXT_ARCS else "")
            + ". Hover a line for its numbers.")
    return None, (
        f"The problem has {rows} sources, {len(m.nodes)} nodes, {cols} sinks and "
        f"{flows} arcs with flow: too many to draw legibly (a heat map is drawn up to "
        f"{HEATMAP_MAX} \u00d7 {HEATMAP_MAX}, a diagram up to {DIAGRAM_MAX_PER_COLUMN} places "
        f"per column and {DIAGRAM_MAX_FLOW_ARCS} arcs with flow). The table of reduced costs "
        "below summarises every arc instead.")


def _too_large_svg(m: _Model, note: str) -> str:
    words = note.split()
    lines, line = [], ""
    for w in words:
        if len(line) + len(w) + 1 > 90:
            lines.append(line)
            line = w
        else:
            line = f"{line} {w}".strip()
    lines.append(line)
    height = 60 + 18 * len(lines)
    out = [_svg_open(680, height, "Too large to draw", True), _caption(m)]
    out += [_text(16, 56 + 18 * i, text, fill="#1f2933") for i, text in enumerate(lines)]
    return "".join(out) + "</svg>"


# --- the page -----------------------------------------------------------------------------

_CSS = """
:root { color-scheme: light; }
* { box-sizing: border-box; }
body { margin: 0; background: #f6f7f9; color: #1f2933;
  font: 15px/1.5 'DejaVu Sans', 'Liberation Sans', Arial, sans-serif; }
main { max-width: 1120px; margin: 0 auto; padding: 24px 28px 40px; }
header { display: flex; align-items: baseline; gap: 16px; flex-wrap: wrap; }
h1 { font-size: 24px; margin: 0; letter-spacing: .2px; }
.sub { color: #52606d; margin: 0; }
h2 { font-size: 18px; margin: 28px 0 10px; padding-bottom: 4px; border-bottom: 1px solid #d9dee4; }
section.verdict { margin: 18px 0 8px; padding: 16px 20px; border-radius: 8px; display: flex;
  gap: 20px; align-items: center; border: 1px solid; }
.verdict.valid { background: #e7f4ea; border-color: #8cc79a; }
.verdict.invalid { background: #fbe9e9; border-color: #e59a9a; }
.verdict .word { font-size: 30px; font-weight: bold; margin: 0; white-space: nowrap; }
.valid .word { color: #1b5e20; } .invalid .word { color: #b71c1c; }
.verdict p { margin: 0; }
.cards { display: grid; grid-template-columns: repeat(auto-fit, minmax(320px, 1fr)); gap: 14px;
  margin-top: 14px; }
.card { background: #fff; border: 1px solid #d9dee4; border-radius: 8px; padding: 12px 16px; }
.card h3 { margin: 0 0 6px; font-size: 15px; color: #52606d; text-transform: uppercase;
  letter-spacing: .6px; }
dl { display: grid; grid-template-columns: max-content 1fr; gap: 2px 14px; margin: 0; }
dt { color: #52606d; } dd { margin: 0; font-variant-numeric: tabular-nums; }
figure { margin: 0; background: #fff; border: 1px solid #d9dee4; border-radius: 8px;
  padding: 12px; overflow-x: auto; }
figcaption { color: #52606d; font-size: 14px; margin-top: 6px; }
.note { background: #fff8e1; border: 1px solid #f0d48a; border-radius: 6px; padding: 10px 14px; }
ol.proof { padding-left: 0; list-style: none; margin: 0; }
ol.proof li { background: #fff; border: 1px solid #d9dee4; border-left-width: 5px;
  border-radius: 6px; padding: 10px 14px; margin-bottom: 8px; }
ol.proof li.holds { border-left-color: #2e7d32; } ol.proof li.fails { border-left-color: #c62828; }
.mark { font-weight: bold; margin-right: 6px; }
.holds .mark { color: #2e7d32; } .fails .mark { color: #c62828; }
table { border-collapse: collapse; width: 100%; background: #fff; font-size: 14px;
  border: 1px solid #d9dee4; }
th, td { text-align: left; padding: 4px 10px; border-bottom: 1px solid #eceff2;
  vertical-align: top; }
th { background: #eef1f4; font-weight: 600; }
td.n, th.n { text-align: right; font-variant-numeric: tabular-nums; }
tr.failed td { background: #fdecec; }
.pass { color: #2e7d32; font-weight: bold; } .fail { color: #c62828; font-weight: bold; }
.pill { display: inline-block; border-radius: 9px; padding: 0 8px; font-size: 12px;
  font-weight: bold; color: #fff; }
.pill.hard { background: #c62828; } .pill.soft { background: #e0a100; color: #1f2933; }
.more { color: #52606d; font-style: italic; }
.two { display: grid; grid-template-columns: repeat(auto-fit, minmax(320px, 1fr)); gap: 14px; }
footer { margin-top: 32px; color: #7b8794; font-size: 13px; }
@media print { body { background: #fff; } figure, .card, table { break-inside: avoid; } }
"""


def _dl(items: Sequence[tuple[str, str]]) -> str:
    return "<dl>" + "".join(f"<dt>{_esc(k)}</dt><dd>{v}</dd>" for k, v in items) + "</dl>"


def _table(head: Sequence[str], rows: Sequence[Sequence[str]], numeric: set[int],
           total: int | None = None, row_classes: Sequence[str] | None = None) -> str:
    th = "".join(f'<th{" class=n" if i in numeric else ""}>{_esc(h)}</th>'
                 for i, h in enumerate(head))
    body = []
    for r, row in enumerate(rows[:TABLE_MAX_ROWS]):
        cls = f' class="{row_classes[r]}"' if row_classes and row_classes[r] else ""
        body.append(f"<tr{cls}>" + "".join(
            f'<td{" class=n" if i in numeric else ""}>{cell}</td>'
            for i, cell in enumerate(row)) + "</tr>")
    count = len(rows) if total is None else total
    if count > TABLE_MAX_ROWS:
        body.append(f'<tr><td class="more" colspan="{len(head)}">\u2026 and '
                    f"{count - TABLE_MAX_ROWS} more rows (every row is in the answer)</td></tr>")
    return f"<table><thead><tr>{th}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _problem_facts(m: _Model) -> list[tuple[str, str]]:
    hard = [d for d, p in zip(m.demand, m.penalty, strict=True) if p is None]
    soft = len(m.sinks) - len(hard)
    if m.from_matrix:
        cells = len(m.sources) * len(m.sinks)
        data = (f"cost matrix {len(m.sources)} \u00d7 {len(m.sinks)}, "
                f"{len(m.tail)} of {cells} pairs allowed")
    else:
        capped = int(np.isfinite(m.cap).sum())
        data = f"{_plural(len(m.tail), 'arc')}, {capped} with a capacity"
    return [
        ("sources", f"{len(m.sources)} (supply {sum(m.supply)})"),
        ("sinks", f"{len(m.sinks)} (demand {sum(m.demand)}: {len(hard)} hard, {soft} soft)"),
        *([("nodes", str(len(m.nodes)))] if m.nodes else []),
        ("costs", _esc(data)),
        ("objective", "max: greatest total score less penalties" if m.maximize
         else "min: least total cost plus penalties"),
        ("unmet demand", "reject if hard demand cannot be met" if m.unmet_policy == "reject"
         else "meet as much hard demand as possible, then least cost"),
    ]


def _answer_facts(m: _Model) -> list[tuple[str, str]]:
    a = m.answer
    cert = a.get("certificate", {})
    hard_unmet = sum(v for k, v in m.unmet.items() if _is_hard(m, k))
    items = [
        ("objective", _esc(_num(a.get("objective")))),
        ("dual objective", _esc(_num(cert.get("dual_objective")))),
        ("units routed", _esc(_num(a.get("flow_value", int(m.flow.sum()))))),
        ("arcs with flow", str(len(a.get("allocation", [])))),
        ("unmet demand", f"{sum(m.unmet.values())} ({hard_unmet} hard)"),
        ("unused supply", str(sum(m.unused.values()))),
        ("hard shortfall", _esc(_num(cert.get("hard_shortfall")))),
    ]
    if a.get("shape") or a.get("solver"):
        items.append(("solved as", _esc(f"{a.get('shape', '?')} by {a.get('solver', '?')}")))
    return items


def _is_hard(m: _Model, sink: str) -> bool:
    try:
        return m.penalty[m.sinks.index(sink)] is None
    except ValueError:
        return False


def _rc_summary(m: _Model) -> list[tuple[str, str]]:
    known = ~np.isnan(m.rc)
    used = m.flow > 0
    rows = [("allowed arcs", str(len(m.tail))),
            ("arcs with flow", str(int(used.sum())))]
    if known.any():
        rows.append(("reduced cost, lowest / highest",
                     f"{_num(float(m.rc[known].min()))} / {_num(float(m.rc[known].max()))}"))
        rows.append(("highest reduced cost of an arc with flow",
                     _num(float(m.rc[known & used].max())) if (known & used).any() else "-"))
    if (~known).any():
        rows.append(("arcs whose reduced cost cannot be computed (a potential is missing)",
                     str(int((~known).sum()))))
    rows.append(("arcs that break complementary slackness", str(int(m.violation.sum()))))
    return rows


def _sink_rows(m: _Model) -> tuple[list[list[str]], int]:
    rows = []
    for j, sid in enumerate(m.sinks):
        amount = m.unmet.get(sid, 0)
        if not amount:
            continue
        p = m.penalty[j]
        kind = ('<span class="pill hard">hard</span>' if p is None else
                f'<span class="pill soft">soft</span> penalty {_esc(_num(p))} per unit')
        rows.append([_esc(sid), str(m.demand[j]), str(amount), kind])
    return rows, len(rows)


def _potentials(m: _Model) -> str:
    """The potentials, so that any reduced cost can be recomputed by hand."""
    cert = m.answer.get("certificate", {})
    virtual = cert.get("virtual_potentials", {}) or {}
    pi = m.pi
    received = np.bincount(m.head[m.head >= 0], weights=m.flow[m.head >= 0],
                           minlength=len(m.places))
    sources = [[_esc(sid), str(m.supply[i]), str(m.unused.get(sid, 0)), _esc(_num(pi[i]))]
               for i, sid in enumerate(m.sources)]
    off = m.sink_offset
    sinks = [[_esc(sid), str(m.demand[j]), _esc(_num(int(received[off + j]))),
              _esc("hard" if m.penalty[j] is None else _num(m.penalty[j])),
              _esc(_num(pi[off + j]))] for j, sid in enumerate(m.sinks)]
    out = ["<h2>Potentials</h2><p>The reduced cost of an arc i\u2192j is cost "
           "\u2212 \u03c0(i) + \u03c0(j)" + (" with the score negated" if m.maximize else "")
           + ". Virtual places of the extended network: super-source "
           f"{_esc(_num(virtual.get('super_source')))}, super-sink "
           f"{_esc(_num(virtual.get('super_sink')))}, hard pool "
           f"{_esc(_num(virtual.get('hard_pool')))}.</p>", '<div class="two"><div>',
           _table(["source", "supply", "unused", "\u03c0"], sources, {1, 2, 3}),
           "</div><div>",
           _table(["sink", "demand", "received", "penalty", "\u03c0"], sinks, {1, 2, 3, 4}),
           "</div></div>"]
    if m.nodes:
        nodes = [[_esc(nid), _esc(_num(pi[len(m.sources) + i]))]
                 for i, nid in enumerate(m.nodes)]
        out.append(_table(["node", "\u03c0"], nodes, {1}))
    return "".join(out)


def _allocation_rows(m: _Model) -> list[list[str]]:
    rows = []
    places = m.places
    used = np.flatnonzero(m.flow > 0)
    for k in used[:TABLE_MAX_ROWS].tolist():
        rows.append([_esc(places[int(m.tail[k])]), _esc(places[int(m.head[k])]),
                     str(int(m.flow[k])), _esc(_num(float(m.flow[k] * m.cost[k]))),
                     _esc(_num(float(m.rc[k])))
                     + (' <span class="fail">breaks slackness</span>' if m.violation[k]
                        else "")])
    return rows


def render_svg(body: Mapping[str, Any], verdict: Mapping[str, Any]) -> str:
    """Only the picture, as a standalone SVG document with the verdict in its caption."""
    m = _model(body, verdict)
    svg, note = _picture(m, standalone=True)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + (svg or _too_large_svg(m, note)) + "\n"


def render_html(body: Mapping[str, Any], verdict: Mapping[str, Any],
                source: str | None = None) -> str:
    """The whole audit report as one HTML page; ``source`` names the input for the header."""
    m = _model(body, verdict)
    word = "VALID" if m.valid else "NOT VALID"
    svg, note = _picture(m, standalone=False)
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>Audit report \u2014 {word}</title><style>{_CSS}</style></head><body><main>",
        "<header><h1>Audit report</h1>",
        '<p class="sub">least-cost allocation and its certificate of optimality'
        + (f" \u00b7 input {_esc(source)}" if source else "") + "</p></header>",
        f'<section class="verdict {"valid" if m.valid else "invalid"}">'
        f'<p class="word">{word}</p><p>{_esc(_verdict_sentence(m))}</p></section>',
        '<div class="cards"><div class="card"><h3>Problem</h3>'
        + _dl(_problem_facts(m)) + '</div><div class="card"><h3>Answer</h3>'
        + _dl(_answer_facts(m)) + "</div></div>",
        "<h2>Allocation and reduced costs</h2>",
    ]
    if svg is not None:
        parts.append(f"<figure>{svg}<figcaption>{_esc(note)}</figcaption></figure>")
    else:
        parts.append(f'<p class="note">{_esc(note)}</p>')
    heading = ("What the certificate proves" if m.valid else
               "What a valid certificate would prove (this one does not: see the checks)")
    parts.append(f"<h2>{_esc(heading)}</h2><ol class=\"proof\">")
    for holds, sentence in _proof_items(m):
        mark = "\u2713 holds" if holds else "\u2717 not shown"
        parts.append(f'<li class="{"holds" if holds else "fails"}"><span class="mark">'
                     f"{mark}</span>{sentence}</li>")
    parts.append("</ol>")
    checks = _checks(m)
    parts.append(f"<h2>Checks of the independent verifier ({len(checks) - len(_failed(m))} "
                 f"of {len(checks)} passed)</h2>")
    parts.append(_table(
        ["check", "result", "what was found"],
        [[_esc(c.get("name")), '<span class="pass">pass</span>' if c.get("passed")
          else '<span class="fail">FAIL</span>', _esc(c.get("detail", ""))] for c in checks],
        set(), row_classes=["" if c.get("passed") else "failed" for c in checks]))
    unmet_rows, _ = _sink_rows(m)
    spare_rows = [[_esc(sid), str(m.supply[i]), str(m.unused[sid])]
                  for i, sid in enumerate(m.sources) if m.unused.get(sid)]
    parts.append('<div class="two"><div><h2>Unmet demand</h2>')
    parts.append(_table(["sink", "demand", "unmet", "kind"], unmet_rows, {1, 2})
                 if unmet_rows else "<p>None: every sink gets its whole demand.</p>")
    parts.append("</div><div><h2>Unused supply</h2>")
    parts.append(_table(["source", "supply", "unused"], spare_rows, {1, 2})
                 if spare_rows else "<p>None: every source sends its whole supply.</p>")
    parts.append("</div></div>")
    parts.append("<h2>Reduced costs at a glance</h2>" + _table(
        ["", "value"], [[_esc(k), _esc(v)] for k, v in _rc_summary(m)], {1}))
    parts.append(_potentials(m))
    parts.append("<h2>Allocation</h2>")
    used = int((m.flow > 0).sum())
    parts.append(_table(["from", "to", "flow", "cost" if not m.maximize else "score",
                         "reduced cost"], _allocation_rows(m), {2, 3, 4}, total=used))
    if m.stray:
        parts.append(f'<p class="note">{_plural(len(m.stray), "row")} of the allocation '
                     "name no allowed arc and are not drawn: "
                     + _esc(", ".join(f"{r.get('from')} \u2192 {r.get('to')}"
                                      for r in m.stray[:10]))
                     + ("\u2026" if len(m.stray) > 10 else "") + "</p>")
    parts.append(
        f"<footer>certimatch {_esc(__version__)}. The verdict comes from the independent "
        "verifier, run on the problem and the answer alone; nothing in the answer is taken "
        "on trust. Reduced costs are shown in the min form"
        + (" (scores negated)" if m.maximize else "")
        + ". This page runs no script and loads nothing; the same input gives the same page."
        "</footer></main></body></html>\n")
    return "\n".join(parts)


def render(body: Mapping[str, Any], verdict: Mapping[str, Any], fmt: str = "html",
           source: str | None = None) -> str:
    if fmt == "svg":
        return render_svg(body, verdict)
    if fmt == "html":
        return render_html(body, verdict, source)
    raise ValueError(f"format must be one of {', '.join(FORMATS)}, not {fmt!r}")


def build_report(body: Any, settings: Settings, fmt: str = "html",
                 source: str | None = None) -> tuple[str, bool]:
    """(document, valid) for a /v1/verify body; ServiceError when the body is not one.

    The verdict is computed here by the independent verifier, never read from the body.
    """
    verdict = verify_body(body, settings)
    return render(body, verdict, fmt, source), verdict.get("valid") is True
