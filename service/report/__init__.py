"""The audit report: one self-contained page that shows an answer and what its certificate proves.

An auditor gets the problem, an answer and the verdict of the independent verifier
(:func:`service.solve.pipeline.verify_body`, run here, not taken on trust from the answer) and
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

from service.report.page import build_report, render, render_html, render_svg
from service.report.style import FORMATS, MEDIA_TYPES

__all__ = ["FORMATS", "MEDIA_TYPES", "build_report", "render", "render_html", "render_svg"]
