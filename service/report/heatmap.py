"""The heat map of reduced costs: one cell per source and sink, chosen pairs ringed."""

from __future__ import annotations

import math

import numpy as np

from service.report.model import _Model
from service.report.style import (
    _CHAR_W,
    _HARD,
    _NEGATIVE,
    _SOFT,
    _SPARE,
    _UNKNOWN,
    LABEL_CHARS,
    _esc,
    _num,
    _ramp,
    _short,
)
from service.report.svg import (
    _caption,
    _cross,
    _defs,
    _legend_ramp,
    _legend_swatches,
    _ring,
    _svg_open,
    _text,
)

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
    label = (f"Reduced costs of {n_rows} sources \u00d7 {n_cols} sinks; chosen pairs ringed"
             + ("; numbers: the extra cost of forcing a pair, or in a ring of forbidding it"
                if m.prices is not None else ""))
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
                   + (f", flow {int(m.flow[k])}" if chosen else "")
                   + _price_tip(m, k, chosen))
            if m.violation[k]:
                tip += " \u2014 violates complementary slackness"
            out.append(f'<rect class="{classes}" x="{x:.1f}" y="{y:.1f}" width="{s - 1:.1f}" '
                       f'height="{s - 1:.1f}" fill="{fill}" {where} data-rc="{_num(rc)}">'
                       f"<title>{_esc(tip)}</title></rect>")
            text = _num(rc) if m.prices is None else _price_text(m, k, chosen)
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
        *([(box + 'fill="#ffffff" stroke="#c9c9c4"/>' + _text(7, 11, "+", anchor="middle",
                                                            size=10, fill="#1f2933"),
            "number: override price")]
          if m.prices is not None else []),
    ]))
    out.append("</svg>")
    return "".join(out)


def _price_text(m: _Model, k: int, chosen: bool) -> str:
    """The cell's number with prices: forbidding a chosen pair, else forcing it."""
    assert m.prices is not None
    value = float(m.prices[1][k] if chosen else m.prices[0][k])
    return "\u2014" if math.isnan(value) else _num(value)


def _price_tip(m: _Model, k: int, chosen: bool) -> str:
    if m.prices is None:
        return ""
    word = "score lost" if m.maximize else "extra cost"
    value = float(m.prices[1][k] if chosen else m.prices[0][k])
    shown = "no plan serves the same hard demand" if math.isnan(value) else _num(value)
    return f"; {word} to {'forbid' if chosen else 'force'} it: {shown}"
