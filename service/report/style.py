"""How the report looks: sizes, colours and text helpers shared by its pictures and page."""

from __future__ import annotations

import html
import math
import re
from collections.abc import Iterable, Mapping
from typing import Any

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




def format_number(x: Any) -> str:
    """A number as a person writes it: 589 rather than 589.0, at most 6 decimals.

    Six decimals is the grid the service computes on (README, "Numbers"), so rounding to it
    drops only float noise such as 0.30000000000000004.
    """
    if isinstance(x, bool) or not isinstance(x, int | float):
        return str(x)
    if isinstance(x, int):
        return str(x)
    if not math.isfinite(x):
        return str(x)
    text = f"{x:.6f}".rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text
