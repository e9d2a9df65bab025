"""Where the flow labels of the diagram go: on their own line, never over one another.

Each label is the flow of one arc, drawn on its curve. Lines that share a place bunch
their labels together, so each label tries points along its curve, nearest to the one it
prefers first, and takes the first whose box meets no label placed before it (and, when
one exists, no box of a place or badge either). A label with no such point is left out:
its line still shows the amount by its width and in its tooltip. Labels are placed
largest flow first, so the amounts that matter most are the ones that stay.

The boxes are estimated from the metrics of the font the page names first (DejaVu Sans
Bold) and rounded up, so that a label drawn is never larger than its box;
tests/report/test_labels.py measures the rendered labels in Chromium.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

#: Size of a flow label in px.
LABEL_SIZE = 9.5
#: DejaVu Sans Bold: digits advance 0.696 em, the ascent is 0.928 em and the descent
#: 0.236 em (the font's own metrics); rounded up, plus a pixel of air on each side.
_ADVANCE_EM = 0.76
_ASCENT_EM = 0.95
_DESCENT_EM = 0.26
_AIR = 1.0
#: Points tried along a curve (as its Bezier parameter), in steps of this.
_STEP = 0.04
_POINTS = np.round(np.arange(0.08, 0.93, _STEP), 2)

Box = tuple[float, float, float, float]          # left, top, right, bottom


def label_box(x: float, baseline: float, text: str, size: float = LABEL_SIZE) -> Box:
    """The box a label centred on ``x`` with this ``baseline`` covers, at most."""
    half = len(text) * _ADVANCE_EM * size / 2 + _AIR
    return (x - half, baseline - _ASCENT_EM * size - _AIR, x + half,
            baseline + _DESCENT_EM * size + _AIR)


def place_labels(curves: Sequence[Sequence[tuple[float, float]]], texts: Sequence[str],
                 preferred: Sequence[float], weights: Sequence[float],
                 obstacles: Sequence[Box]) -> list[tuple[float, float] | None]:
    """(x, baseline) of each label on its cubic Bezier ``curves[i]``, or None.

    ``preferred`` is the parameter each label would like, ``weights`` orders them (largest
    first, then in the order given); no two placed boxes overlap.
    """
    placed = np.zeros((0, 4))
    walls = np.array(obstacles, float).reshape(-1, 4)
    found: list[tuple[float, float] | None] = [None] * len(texts)
    order = sorted(range(len(texts)), key=lambda i: (-weights[i], i))
    for i in order:
        ts = sorted(_POINTS.tolist(), key=lambda t: (abs(t - preferred[i]), t))
        points = [_bezier(curves[i], t) for t in ts]
        candidates = [(x, y + 0.36 * LABEL_SIZE) for x, y in points]  # text centred on y
        boxes = np.array([label_box(x, b, texts[i]) for x, b in candidates])
        free = ~_meets(boxes, placed)
        clear = free & ~_meets(boxes, walls)
        pick = np.flatnonzero(clear) if clear.any() else np.flatnonzero(free)
        if len(pick):
            k = int(pick[0])
            found[i] = candidates[k]
            placed = np.vstack([placed, boxes[k]])
    return found


def _meets(boxes: np.ndarray, others: np.ndarray) -> np.ndarray:
    """For each of ``boxes``, whether it overlaps any of ``others`` (touching is fine)."""
    if not len(others):
        return np.zeros(len(boxes), bool)
    a, b = boxes[:, None, :], others[None, :, :]
    hit = ((a[..., 0] < b[..., 2]) & (b[..., 0] < a[..., 2])
           & (a[..., 1] < b[..., 3]) & (b[..., 1] < a[..., 3]))
    return np.asarray(hit.any(axis=1))


def _bezier(points: Sequence[tuple[float, float]], t: float) -> tuple[float, float]:
    (x0, y0), (x1, y1), (x2, y2), (x3, y3) = points
    u = 1 - t
    w = (u * u * u, 3 * u * u * t, 3 * u * t * t, t * t * t)
    return (w[0] * x0 + w[1] * x1 + w[2] * x2 + w[3] * x3,
            w[0] * y0 + w[1] * y1 + w[2] * y2 + w[3] * y3)
