"""The layered diagram of an allocation: sources left, nodes in the middle, sinks right."""

from __future__ import annotations

import numpy as np

from service.report.labels import LABEL_SIZE, place_labels
from service.report.model import _Model
from service.report.style import (
    _CHAR_W,
    _FLOW,
    _FULL,
    _HARD,
    _SOFT,
    _SPARE,
    DIAGRAM_MAX_CONTEXT_ARCS,
    LABEL_CHARS,
    _esc,
    _num,
    _short,
)
from service.report.svg import _caption, _defs, _legend_swatches, _svg_open, _text

# --- the layered diagram ------------------------------------------------------------------

def _diagram(m: _Model, standalone: bool) -> str:
    columns = [("sources", m.sources, 0), ("nodes", m.nodes, len(m.sources)),
               ("sinks", m.sinks, m.sink_offset)]
    columns = [c for c in columns if c[1]]
    tallest = max((len(c[1]) for c in columns), default=0)     # an empty day has no places
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
    wanted: list[tuple[int, str, float]] = []      # (arc, colour, preferred parameter)
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
            wanted.append((k, colour, t))
    out.append("</g>")
    out.extend(out_boxes)
    walls = [(x, y - (row_h - 4) / 2, x + box_w, y + (row_h - 4) / 2) for x, y in pos.values()]
    walls += [(pos[i][0] - badge_w - 6, pos[i][1] - 8, pos[i][0] - 6, pos[i][1] + 8)
              for i, sid in enumerate(m.sources) if m.unused.get(sid)]
    walls += [(pos[p][0] + box_w + 6, pos[p][1] - 8, pos[p][0] + box_w + 78, pos[p][1] + 8)
              for p in (m.sink_offset + j for j, sid in enumerate(m.sinks)
                        if m.unmet.get(sid))]
    texts = [str(int(m.flow[k])) for k, _, _ in wanted]
    spots = place_labels([curve(k) for k, _, _ in wanted], texts, [t for _, _, t in wanted],
                         [float(m.flow[k]) for k, _, _ in wanted], walls)
    labels = [_text(spot[0], spot[1], text, anchor="middle", size=LABEL_SIZE, fill=colour,
                    weight="bold", extra=' stroke="#ffffff" stroke-width="3" '
                                         'paint-order="stroke"')
              for (_, colour, _), text, spot in zip(wanted, texts, spots, strict=True)
              if spot is not None]
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
