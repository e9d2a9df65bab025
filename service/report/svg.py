"""Pieces of SVG shared by the pictures: the document, text, legends, rings and crosses."""

from __future__ import annotations

from collections.abc import Sequence

from service.report.model import _Model
from service.report.proof import _checks, _failed
from service.report.style import _FLOW, _FONT, _FULL, _HARD, _RAMP, _esc, _num, _ramp

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
    line = (f"{'objective' if m.valid else 'reported objective'} "
            f"{_num(m.answer.get('objective'))} \u00b7 {passed} of {len(checks)} "
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
