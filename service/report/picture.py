"""Which picture a problem gets (heat map, diagram or none), and why, in one sentence."""

from __future__ import annotations

from service.report.diagram import _diagram
from service.report.heatmap import _heatmap
from service.report.model import _Model
from service.report.style import (
    DIAGRAM_MAX_CONTEXT_ARCS,
    DIAGRAM_MAX_FLOW_ARCS,
    DIAGRAM_MAX_PER_COLUMN,
    HEATMAP_MAX,
)
from service.report.svg import _caption, _svg_open, _text

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
        f"per column and {DIAGRAM_MAX_FLOW_ARCS} arcs with flow). "
        # the SVG alone has no table: it says where the summary is
        + ("The HTML report (format=html) summarises the reduced costs of every arc in a "
           "table instead." if standalone else
           "The table of reduced costs below summarises every arc instead."))


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
