"""The audit report: its HTML and SVG, the HTTP route, and what Chromium makes of the page.

The browser tests render the page in Debian's headless ``chromium`` and read the
screenshot back with the small PNG decoder below (no imaging library). Where the browser
is missing, the session fixture installs it with apt-get, but only on a machine that is
ours to change: as root, and with ``CI`` set (a throwaway CI machine) or
``CERTIMATCH_INSTALL_BROWSER=1`` (a developer who asked for it). Anywhere else the browser
tests skip and say how to run them. Nothing here asserts on time.
"""

from __future__ import annotations

import copy
import random
import struct
import xml.etree.ElementTree as ET
import zlib
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import pytest
import yaml

from service.cli.demo import demo_problem
from service.http.reports import report_bp
from service.report import FORMATS, build_report
from service.report.style import DIAGRAM_MAX_PER_COLUMN, HEATMAP_MAX
from service.settings import Settings
from service.solve.pipeline import solve_body
from tests.report.chromium import screenshot

ROOT = Path(__file__).resolve().parents[2]
SVG_NS = "{http://www.w3.org/2000/svg}"
SETTINGS = Settings()


# --- problems and answers -----------------------------------------------------------------

def _solved(problem: dict[str, Any]) -> dict[str, Any]:
    return {**problem, "answer": solve_body(problem, SETTINGS)}


@pytest.fixture(scope="module")
def repair() -> dict[str, Any]:
    """8 technicians x 20 tickets, many pairs not allowed, two tickets left waiting."""
    return _solved(demo_problem("repair_tickets.json"))


@pytest.fixture(scope="module")
def parts() -> dict[str, Any]:
    """Warehouses -> depots -> vans: a network with nodes and capacities."""
    return _solved(demo_problem("parts_network.json"))


def _square(n: int, seed: int) -> dict[str, Any]:
    rng = random.Random(seed)
    return {"sources": [{"id": f"crew-{i:03d}"} for i in range(n)],
            "sinks": [{"id": f"job-{j:03d}"} for j in range(n)],
            "costs": [[rng.randint(1, 99) for _ in range(n)] for _ in range(n)]}


def _report(body: dict[str, Any], fmt: str = "html") -> str:
    text, _ = build_report(copy.deepcopy(body), SETTINGS, fmt)
    return text


# --- reading the page ---------------------------------------------------------------------

_VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source",
         "track", "wbr"}


class _Page(HTMLParser):
    """Every element with its attributes, the text, and whether tags nest properly."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.elements: list[tuple[str, dict[str, str]]] = []
        self.text: list[str] = []
        self.stack: list[str] = []
        self.errors: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.elements.append((tag, {k: v or "" for k, v in attrs}))
        if tag not in _VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.elements.append((tag, {k: v or "" for k, v in attrs}))

    def handle_endtag(self, tag: str) -> None:
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else ''}>")
            return
        self.stack.pop()

    def handle_data(self, data: str) -> None:
        self.text.append(data)

    def all(self, tag: str, cls: str | None = None) -> list[dict[str, str]]:
        return [a for t, a in self.elements
                if t == tag and (cls is None or cls in a.get("class", "").split())]


def _parse(page: str) -> _Page:
    parser = _Page()
    parser.feed(page)
    parser.close()
    assert not parser.errors, parser.errors[:5]
    assert not parser.stack, f"unclosed: {parser.stack}"
    return parser


def _verdict_word(page: _Page) -> str:
    words = [t.strip() for t in page.text if t.strip() in ("VALID", "NOT VALID")]
    assert len(words) == 1, words
    return words[0]


def _pairs(body: dict[str, Any]) -> set[tuple[str, str]]:
    return {(r["from"], r["to"]) for r in body["answer"]["allocation"]}


# --- the page -----------------------------------------------------------------------------

def test_page_is_well_formed_and_self_contained(repair):
    text = _report(repair)
    page = _parse(text)
    assert text.startswith("<!DOCTYPE html>")
    # No script, nothing fetched: the page must open offline and cannot report home.
    assert not page.all("script") and not page.all("link") and not page.all("img")
    assert "://" not in text
    assert "src=" not in text
    assert all(part.startswith("#") for part in text.split("url(")[1:])
    assert len(page.all("svg")) == 1 and len(page.all("style")) == 1


def test_heat_map_has_one_cell_per_pair(repair):
    page = _parse(_report(repair))
    cells = page.all("rect", "cell")
    problem = demo_problem("repair_tickets.json")
    rows, cols = len(problem["sources"]), len(problem["sinks"])
    assert len(cells) == rows * cols
    nulls = sum(c is None for row in problem["costs"] for c in row)
    assert len(page.all("rect", "forbidden")) == nulls
    seen = {(c["data-source"], c["data-sink"]) for c in cells}
    assert len(seen) == rows * cols


def test_chosen_pairs_are_marked_and_sit_at_reduced_cost_zero(repair):
    page = _parse(_report(repair))
    chosen = page.all("rect", "chosen")
    assert {(c["data-source"], c["data-sink"]) for c in chosen} == _pairs(repair)
    assert len(page.all("circle", "ring")) == len(chosen)
    # A valid certificate for a cost matrix: every allowed cell >= 0, chosen ones exactly 0.
    assert {c["data-rc"] for c in chosen} == {"0"}
    allowed = [c for c in page.all("rect", "cell") if "forbidden" not in c["class"]]
    assert all(float(c["data-rc"]) >= 0 for c in allowed)
    assert not page.all("path", "violation")


def test_cell_colour_value_is_the_reduced_cost_by_hand(repair):
    # cost - pi(source) + pi(sink), README "The certificate", for one unchosen allowed cell.
    problem, answer = repair, repair["answer"]
    pi = answer["certificate"]["potentials"]
    sources, sinks = problem["sources"], problem["sinks"]
    i, j = next((i, j) for i, row in enumerate(problem["costs"]) for j, c in enumerate(row)
                if c is not None and (sources[i]["id"], sinks[j]["id"]) not in _pairs(repair))
    expected = problem["costs"][i][j] - pi[sources[i]["id"]] + pi[sinks[j]["id"]]
    cell = next(c for c in _parse(_report(repair)).all("rect", "cell")
                if (c["data-source"], c["data-sink"]) == (sources[i]["id"], sinks[j]["id"]))
    assert float(cell["data-rc"]) == expected


def test_real_answer_says_valid(repair):
    text, valid = build_report(copy.deepcopy(repair), SETTINGS)
    assert valid is True
    page = _parse(text)
    assert _verdict_word(page) == "VALID"
    assert "NOT VALID" not in text
    assert not page.all("tr", "failed")


def test_tampered_objective_says_not_valid_and_names_the_check(repair):
    body = copy.deepcopy(repair)
    body["answer"]["objective"] += 1
    text, valid = build_report(body, SETTINGS)
    assert valid is False
    page = _parse(text)
    assert _verdict_word(page) == "NOT VALID"
    failed = page.all("tr", "failed")
    assert failed, "the failing check must be marked"
    assert "objective" in text.split('class="failed"')[1][:200]


def test_tampered_potential_is_crossed_out_where_slackness_breaks(repair):
    body = copy.deepcopy(repair)
    row = body["answer"]["allocation"][0]
    body["answer"]["certificate"]["potentials"][row["to"]] += 5
    text, valid = build_report(body, SETTINGS)
    assert valid is False
    page = _parse(text)
    cell = next(c for c in page.all("rect", "chosen")
                if (c["data-source"], c["data-sink"]) == (row["from"], row["to"]))
    assert cell["data-rc"] == "5"       # flow on an arc with positive reduced cost
    assert page.all("path", "violation")


def test_unmet_demand_and_unused_supply_are_shown(repair):
    text = _report(repair)
    page = _parse(text)
    answer = repair["answer"]
    assert len(page.all("rect", "short")) == len(answer["unmet"]) > 0
    assert len(page.all("rect", "spare")) == len(answer["unused"]) > 0
    for row in answer["unmet"] + answer["unused"]:
        assert row["id"] in text


def test_same_input_gives_the_same_bytes(repair):
    assert _report(repair) == _report(repair)
    assert _report(repair, "svg") == _report(repair, "svg")


def test_svg_format_is_a_standalone_svg_document(repair):
    text = _report(repair, "svg")
    root = ET.fromstring(text.encode())
    assert root.tag == SVG_NS + "svg"
    cells = [e for e in root.iter(SVG_NS + "rect") if "cell" in e.get("class", "").split()]
    assert len(cells) == 8 * 20
    caption = " ".join(t.text or "" for t in root.iter(SVG_NS + "text"))
    assert "VALID" in caption and "NOT VALID" not in caption


def test_hostile_ids_are_escaped_in_html_and_svg():
    problem = {"sources": [{"id": "<script>alert(1)</script>"}, {"id": "\ufffe-\ud7ff"}],
               "sinks": [{"id": 'q"uote&amp'}, {"id": "plain"}],
               "costs": [[1, 2], [3, None]]}
    body = _solved(problem)
    # A declared id cannot hold a control character (tests/http/test_ids.py); an answer
    # row can name anything, and the page lists the rows that name no arc.
    body["answer"]["allocation"].append({"from": "ctl\x01char", "to": "plain", "flow": 1})
    html_text = _report(body)
    assert "<script" not in html_text
    page = _parse(html_text)
    assert {c["data-source"] for c in page.all("rect", "cell")} == {
        "<script>alert(1)</script>", "\ufffd-\ud7ff"}
    assert "ctl\ufffdchar" in "".join(page.text)
    ET.fromstring(_report(body, "svg").encode())   # U+FFFE would break XML


def test_network_gets_a_diagram_with_one_line_per_flow(parts):
    page = _parse(_report(parts))
    assert not page.all("rect", "cell")
    flows = page.all("path", "flow")
    assert len(flows) == len(parts["answer"]["allocation"])
    assert len(page.all("g", "place")) == 3 + 3 + 8
    # van-08 is the soft sink left short; every warehouse keeps stock.
    assert len(page.all("g", "soft")) == 1 and not page.all("g", "hard")
    assert len(page.all("g", "spare")) == len(parts["answer"]["unused"]) == 3


def test_maximising_problem_is_drawn_in_the_min_form():
    problem = {"sources": [{"id": "crew-a"}, {"id": "crew-b"}],
               "sinks": [{"id": "job-1"}, {"id": "job-2"}],
               "costs": [[9, 4], [7, 1]], "objective": "max"}
    body = _solved(problem)
    assert body["answer"]["objective"] == 11    # 4 + 7 beats 9 + 1
    text = _report(body)
    page = _parse(text)
    chosen = page.all("rect", "chosen")
    assert {(c["data-source"], c["data-sink"]) for c in chosen} == {
        ("crew-a", "job-2"), ("crew-b", "job-1")}
    assert {c["data-rc"] for c in chosen} == {"0"}
    assert all(float(c["data-rc"]) >= 0 for c in page.all("rect", "cell"))
    assert "scores negated" in text


def test_arcs_from_sources_to_sinks_get_a_heat_map_with_negative_full_arcs():
    # depot-1 -> shop-1 is cheap but capped at 1: full, so its reduced cost may be < 0.
    problem = {"sources": [{"id": "depot-1", "supply": 2}, {"id": "depot-2", "supply": 2}],
               "sinks": [{"id": "shop-1", "demand": 2}, {"id": "shop-2"}],
               "arcs": [{"from": "depot-1", "to": "shop-1", "cost": 1, "capacity": 1},
                        {"from": "depot-2", "to": "shop-1", "cost": 8},
                        {"from": "depot-1", "to": "shop-2", "cost": 5}]}
    body = _solved(problem)
    page = _parse(_report(body))
    cells = page.all("rect", "cell")
    assert len(cells) == 4 and len(page.all("rect", "forbidden")) == 1
    rc = {(c["data-source"], c["data-sink"]): float(c["data-rc"]) for c in cells
          if "forbidden" not in c["class"]}
    assert rc[("depot-1", "shop-1")] < 0
    assert not page.all("path", "violation")


def test_beyond_the_heat_map_limit_only_the_allocation_is_drawn():
    n = HEATMAP_MAX + 1
    body = _solved(_square(n, seed=7))
    text = _report(body)
    page = _parse(text)
    assert not page.all("rect", "cell")
    assert len(page.all("path", "flow")) == n
    assert f"more than the {HEATMAP_MAX} \u00d7 {HEATMAP_MAX}" in text


def test_beyond_the_diagram_limit_the_page_says_so_and_summarises():
    n = DIAGRAM_MAX_PER_COLUMN + 1
    body = _solved(_square(n, seed=11))
    text = _report(body)
    page = _parse(text)
    assert not page.all("svg")
    assert "too many to draw" in text
    assert "Reduced costs at a glance" in text
    svg = ET.fromstring(_report(body, "svg").encode())
    assert "too many to draw" in " ".join(t.text or "" for t in svg.iter(SVG_NS + "text"))


# --- HTTP --------------------------------------------------------------------------------

@pytest.fixture
def report_client(app):
    # The lead registers the blueprint in create_app; until then (and independently of
    # it) the tests register it themselves.
    if "report" not in app.blueprints:
        app.register_blueprint(report_bp)
    return app.test_client()


def test_http_report_is_html_by_default(report_client, repair):
    r = report_client.post("/v1/report", json=repair)
    assert r.status_code == 200
    assert r.mimetype == "text/html"
    assert _verdict_word(_parse(r.get_data(as_text=True))) == "VALID"


def test_http_report_as_svg(report_client, repair):
    r = report_client.post("/v1/report?format=svg", json=repair)
    assert r.status_code == 200
    assert r.mimetype == "image/svg+xml"
    assert ET.fromstring(r.data).tag == SVG_NS + "svg"


def test_http_tampered_answer_is_a_200_that_says_not_valid(report_client, repair):
    body = copy.deepcopy(repair)
    del body["answer"]["allocation"][0]
    r = report_client.post("/v1/report", json=body)
    assert r.status_code == 200
    assert _verdict_word(_parse(r.get_data(as_text=True))) == "NOT VALID"


@pytest.mark.parametrize(("path", "body", "content_type", "status", "type_end"), [
    ("/v1/report?format=pdf", "{}", "application/json", 400, "about:blank"),
    ("/v1/report", '{"sources": [', "application/json", 400, "malformed-json"),
    ("/v1/report", "{}", "text/plain", 415, "unsupported-media-type"),
])
def test_http_errors_are_problem_documents(report_client, path, body, content_type, status,
                                           type_end):
    r = report_client.post(path, data=body, content_type=content_type)
    assert r.status_code == status
    assert r.mimetype == "application/problem+json"
    doc = r.get_json()
    assert doc["status"] == status and doc["type"].endswith(type_end)


def test_http_problem_without_answer_is_422_naming_it(report_client):
    problem = demo_problem("repair_tickets.json")
    r = report_client.post("/v1/report", json=problem)
    assert r.status_code == 422
    assert r.mimetype == "application/problem+json"
    assert any(e["pointer"] == "/answer" for e in r.get_json()["errors"])


def test_http_get_is_405(report_client):
    r = report_client.get("/v1/report")
    assert r.status_code == 405
    assert "POST" in r.headers["Allow"]


def test_openapi_documents_the_report_route():
    spec = yaml.safe_load((ROOT / "openapi.yaml").read_text(encoding="utf-8"))
    op = spec["paths"]["/v1/report"]["post"]
    (param,) = [p for p in op["parameters"] if p.get("name") == "format"]
    assert param["in"] == "query" and param["schema"]["enum"] == list(FORMATS)
    assert param["schema"]["default"] == "html"
    assert set(op["responses"]["200"]["content"]) == {"text/html", "image/svg+xml"}
    body = op["requestBody"]["content"]["application/json"]["schema"]["$ref"]
    assert body.endswith("/VerifyRequest")


# --- the page in a real browser -----------------------------------------------------------

def _shoot(browser: str, tmp_path: Path, html_text: str) -> Image:
    page, png = tmp_path / "report.html", tmp_path / "shot.png"
    page.write_text(html_text, encoding="utf-8")
    failure = screenshot(browser, page, png, tmp_path / "profile")
    assert not failure, failure
    return decode_png(png.read_bytes())


@dataclass(frozen=True)
class _Look:
    """What a screenshot holds, in the terms of the content assertions."""

    ink: float             # share of pixels that are not white or near it
    colours: int           # distinct colours, at 5 bits per channel
    counts: Counter[tuple[int, int, int]]

    def has(self, rgb: tuple[int, int, int], least: int, tolerance: int = 2) -> bool:
        """At least ``least`` pixels within ``tolerance`` of ``rgb`` on every channel."""
        return sum(n for c, n in self.counts.items()
                   if all(abs(a - b) <= tolerance for a, b in zip(c, rgb, strict=True))) >= least


def _look(image: Image) -> _Look:
    counts = Counter(image.pixels())
    total = image.width * image.height
    # The page background (#f6f7f9) and the white of cards and tables count as paper.
    ink = sum(n for c, n in counts.items() if min(c) < 255 - 24) / total
    colours = len({(r >> 3, g >> 3, b >> 3) for r, g, b in counts})
    return _Look(ink, colours, counts)


def _assert_has_content(look: _Look) -> None:
    assert look.ink >= 0.04, f"only {look.ink:.1%} of the screenshot is not white paper"
    assert look.colours >= 12, f"only {look.colours} distinct colours"


# Colours of report.py, each filling a large area: the banners (_CSS), the cells at
# reduced cost 0 (_RAMP), the badges of spare supply and of soft unmet demand.
VALID_GREEN = (0xE7, 0xF4, 0xEA)
INVALID_RED = (0xFB, 0xE9, 0xE9)
DARKEST_CELL = (18, 60, 105)
SPARE_BADGE = (0x5C, 0x7A, 0x99)
SOFT_BADGE = (0xE0, 0xA1, 0x00)
BANNER_PIXELS = 20_000                # the banner is about 1060 x 78 pixels


def test_browser_shows_the_heat_map_report(browser, tmp_path, repair):
    look = _look(_shoot(browser, tmp_path, _report(repair)))
    _assert_has_content(look)
    assert look.has(VALID_GREEN, BANNER_PIXELS) and not look.has(INVALID_RED, BANNER_PIXELS)
    assert look.has(DARKEST_CELL, 2000), "the heat map's cells at reduced cost 0 are missing"


def test_browser_shows_the_not_valid_banner(browser, tmp_path, repair):
    body = copy.deepcopy(repair)
    body["answer"]["objective"] += 1
    look = _look(_shoot(browser, tmp_path, _report(body)))
    _assert_has_content(look)
    assert look.has(INVALID_RED, BANNER_PIXELS) and not look.has(VALID_GREEN, BANNER_PIXELS)


def test_browser_shows_the_network_diagram(browser, tmp_path, parts):
    look = _look(_shoot(browser, tmp_path, _report(parts)))
    _assert_has_content(look)
    assert look.has(SPARE_BADGE, 1000), "the badges of spare supply are missing"
    assert look.has(SOFT_BADGE, 500), "the badge of the short soft sink is missing"


def test_content_check_fails_on_a_blank_page(browser, tmp_path):
    # Guards the assertions above: a page with nothing on it must not pass them.
    look = _look(_shoot(browser, tmp_path, "<!DOCTYPE html><html><body></body></html>"))
    with pytest.raises(AssertionError):
        _assert_has_content(look)


# --- a PNG decoder small enough to trust --------------------------------------------------

@dataclass(frozen=True)
class Image:
    """Decoded 8-bit pixels, row by row, as (r, g, b) tuples."""

    width: int
    height: int
    rows: list[list[tuple[int, int, int]]]

    def pixels(self) -> Iterator[tuple[int, int, int]]:
        for row in self.rows:
            yield from row


_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_CHANNELS = {0: 1, 2: 3, 4: 2, 6: 4}   # grey, RGB, grey + alpha, RGBA


def _paeth(a: int, b: int, c: int) -> int:
    p = a + b - c
    pa, pb, pc = abs(p - a), abs(p - b), abs(p - c)
    if pa <= pb and pa <= pc:
        return a
    return b if pb <= pc else c


def decode_png(data: bytes) -> Image:
    """A non-interlaced 8-bit PNG of colour type 0, 2, 4 or 6 (what Chromium writes).

    PNG specification (W3C, second edition): 5 chunks, 9 filtering, 10 zlib compression.
    Alpha is composited on white, as behind a page.
    """
    if not data.startswith(_SIGNATURE):
        raise ValueError("not a PNG file")
    pos, idat = len(_SIGNATURE), []
    width = height = depth = colour = interlace = -1
    while pos + 8 <= len(data):
        length, kind = struct.unpack(">I4s", data[pos:pos + 8])
        chunk = data[pos + 8:pos + 8 + length]
        if kind == b"IHDR":
            width, height, depth, colour, _, _, interlace = struct.unpack(">IIBBBBB", chunk)
        elif kind == b"IDAT":
            idat.append(chunk)
        elif kind == b"IEND":
            break
        pos += 12 + length
    if depth != 8 or colour not in _CHANNELS or interlace != 0:
        raise ValueError(f"unsupported PNG: depth {depth}, colour type {colour}, "
                         f"interlace {interlace}")
    bpp = _CHANNELS[colour]
    raw = zlib.decompress(b"".join(idat))
    stride = width * bpp
    if len(raw) != height * (stride + 1):
        raise ValueError(f"{len(raw)} bytes of pixel data, expected {height * (stride + 1)}")
    prev = bytearray(stride)
    rows = []
    for y in range(height):
        start = y * (stride + 1)
        kind, line = raw[start], bytearray(raw[start + 1:start + 1 + stride])
        if kind == 2:
            line = bytearray((v + b) & 0xFF for v, b in zip(line, prev, strict=True))
        elif kind in (1, 3, 4):
            for i in range(stride):
                a = line[i - bpp] if i >= bpp else 0
                if kind == 1:
                    line[i] = (line[i] + a) & 0xFF
                elif kind == 3:
                    line[i] = (line[i] + ((a + prev[i]) >> 1)) & 0xFF
                else:
                    c = prev[i - bpp] if i >= bpp else 0
                    line[i] = (line[i] + _paeth(a, prev[i], c)) & 0xFF
        elif kind != 0:
            raise ValueError(f"row {y}: unknown filter type {kind}")
        rows.append(_rgb(line, colour, width))
        prev = line
    return Image(width, height, rows)


def _rgb(line: bytearray, colour: int, width: int) -> list[tuple[int, int, int]]:
    bpp = _CHANNELS[colour]
    out = []
    for x in range(width):
        px = line[x * bpp:(x + 1) * bpp]
        r, g, b = (px[0], px[0], px[0]) if colour in (0, 4) else (px[0], px[1], px[2])
        if colour in (4, 6):
            alpha = px[-1]
            r, g, b = ((v * alpha + 255 * (255 - alpha)) // 255 for v in (r, g, b))
        out.append((r, g, b))
    return out


def _encode_png(rows: list[list[tuple[int, int, int]]], filters: list[int]) -> bytes:
    """An RGB PNG with the given filter type per row, to test the decoder against."""
    height, width = len(rows), len(rows[0])
    raw = bytearray()
    prev = [0] * (width * 3)
    for row, kind in zip(rows, filters, strict=True):
        line = [v for px in row for v in px]
        out = []
        for i, v in enumerate(line):
            a = line[i - 3] if i >= 3 else 0
            c = prev[i - 3] if i >= 3 else 0
            predicted = (0, a, prev[i], (a + prev[i]) >> 1, _paeth(a, prev[i], c))[kind]
            out.append((v - predicted) & 0xFF)
        raw += bytes([kind, *out])
        prev = line

    def chunk(kind: bytes, body: bytes) -> bytes:
        crc = zlib.crc32(kind + body) & 0xFFFFFFFF
        return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", crc)

    header = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0)
    return (_SIGNATURE + chunk(b"IHDR", header) + chunk(b"IDAT", zlib.compress(bytes(raw)))
            + chunk(b"IEND", b""))


def test_png_decoder_undoes_every_filter_type():
    rng = random.Random(3)
    rows = [[(rng.randrange(256), rng.randrange(256), rng.randrange(256)) for _ in range(7)]
            for _ in range(6)]
    filters = [0, 1, 2, 3, 4, 4]
    image = decode_png(_encode_png(rows, filters))
    assert (image.width, image.height) == (7, 6)
    assert image.rows == rows


def test_png_decoder_refuses_what_it_cannot_read():
    with pytest.raises(ValueError, match="not a PNG"):
        decode_png(b"GIF89a")
    png = bytearray(_encode_png([[(0, 0, 0)]], [0]))
    png[8 + 8 + 8] = 16       # IHDR bit depth 16
    with pytest.raises(ValueError, match="unsupported"):
        decode_png(bytes(png))
