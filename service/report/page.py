"""The audit report page (HTML) and the standalone SVG, and the entry point that verifies."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from service import __version__
from service.report import replan
from service.report.model import _Model, _model
from service.report.picture import _picture, _too_large_svg
from service.report.proof import _checks, _failed, _proof_items, _verdict_sentence
from service.report.ranked import alternatives_section
from service.report.record import record_failed, record_section
from service.report.style import FORMATS, TABLE_MAX_ROWS, _esc, _num, _plural
from service.settings import Settings
from service.solve.pipeline import verify_body

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
        *replan.problem_facts(m.body),
    ]


def _answer_facts(m: _Model) -> list[tuple[str, str]]:
    a = m.answer
    cert = a.get("certificate", {})
    hard_unmet = sum(v for k, v in m.unmet.items() if _is_hard(m, k))
    # An answer that is not valid only reports its figures: the page does not vouch for them.
    said = "" if m.valid else ", as reported"
    items = [
        ("objective" + said, _esc(_num(a.get("objective")))),
        ("dual objective" + said, _esc(_num(cert.get("dual_objective")))),
        ("units routed", _esc(_num(a.get("flow_value", int(m.flow.sum()))))),
        ("arcs with flow", str(len(a.get("allocation", [])))),
        ("unmet demand", f"{sum(m.unmet.values())} ({hard_unmet} hard)"),
        ("unused supply", str(sum(m.unused.values()))),
        ("hard shortfall", _esc(_num(cert.get("hard_shortfall")))),
    ]
    bottleneck = cert.get("bottleneck")
    if isinstance(bottleneck, dict):
        theta = bottleneck.get("threshold")
        items.append(("longest trip (bottleneck threshold)" + said,
                      "none: no pair is needed" if theta is None else _esc(_num(theta))))
    items += replan.answer_facts(a, said)
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


def _why(m: _Model, sid: str) -> str:
    """Why a sink waits, in words (README, "Why a sink waits")."""
    if sid not in m.reasons:
        return "-"
    reason, reduced = m.reasons[sid]
    if reason == "no-eligible-source":
        return "no eligible source: nothing can reach it"
    if reason == "capacity":
        return "capacity: whoever could serve it is full"
    return (f"penalty: serving it costs at least {_esc(_num(reduced))} more than waiting"
            if reduced is not None else "penalty: cheaper to wait")


def _sink_rows(m: _Model) -> tuple[list[list[str]], int]:
    rows = []
    for j, sid in enumerate(m.sinks):
        amount = m.unmet.get(sid, 0)
        if not amount:
            continue
        p = m.penalty[j]
        kind = ('<span class="pill hard">hard</span>' if p is None else
                f'<span class="pill soft">soft</span> penalty {_esc(_num(p))} per unit')
        rows.append([_esc(sid), str(m.demand[j]), str(amount), kind, _why(m, sid)])
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
                     + (" (pinned)" if m.pinned[k] else "")
                     + (' <span class="fail">breaks slackness</span>' if m.violation[k]
                        else "")])
    return rows


def render_svg(body: Mapping[str, Any], verdict: Mapping[str, Any]) -> str:
    """Only the picture, as a standalone SVG document with the verdict in its caption."""
    m = _model(body, verdict)
    svg, note = _picture(m, standalone=True)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + (svg or _too_large_svg(m, note)) + "\n"


def render_html(body: Mapping[str, Any], verdict: Mapping[str, Any],
                source: str | None = None, record: Mapping[str, Any] | None = None) -> str:
    """The whole audit report as one HTML page; ``source`` names the input for the header.

    ``record`` (a decision read from the log: ``{"decision", "checks"}``) adds the log's
    verdict; the page then says VALID only when the verifier and every log check agree.
    """
    m = _model(body, verdict)
    damaged = record_failed(record) if record is not None else []
    whole = m.valid and not damaged
    word = "VALID" if whole else "NOT VALID"
    sentence = _verdict_sentence(m)
    if damaged:
        sentence = (f"The decision record fails the log's checks ({', '.join(damaged)}): "
                    f"it is not the record the service wrote. {sentence}")
    svg, note = _picture(m, standalone=False)
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>Audit report \u2014 {word}</title><style>{_CSS}</style></head><body><main>",
        "<header><h1>Audit report</h1>",
        '<p class="sub">least-cost allocation and its certificate of optimality'
        + (f" \u00b7 input {_esc(source)}" if source else "") + "</p></header>",
        f'<section class="verdict {"valid" if whole else "invalid"}">'
        f'<p class="word">{word}</p><p>{_esc(sentence)}</p></section>',
        record_section(record) if record is not None else "",
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
    parts.append(_table(["sink", "demand", "unmet", "kind", "why it waits"], unmet_rows, {1, 2})
                 if unmet_rows else "<p>None: every sink gets its whole demand.</p>")
    parts.append("</div><div><h2>Unused supply</h2>")
    parts.append(_table(["source", "supply", "unused"], spare_rows, {1, 2})
                 if spare_rows else "<p>None: every source sends its whole supply.</p>")
    parts.append("</div></div>")
    pins = replan.pins_rows(m, m.body)
    if pins:
        parts.append("<h2>Pins</h2><p>Each pinned pair carries exactly its pin: an arc at "
                     "both bounds, so any reduced cost is consistent with it.</p>"
                     + _table(["from", "to", "pinned", "carried"], pins, {2, 3}))
    parts.append("<h2>Reduced costs at a glance</h2>" + _table(
        ["", "value"], [[_esc(k), _esc(v)] for k, v in _rc_summary(m)], {1}))
    parts.append(_potentials(m))
    parts.append("<h2>Allocation</h2>")
    used = int((m.flow > 0).sum())
    parts.append(_table(["from", "to", "flow", "cost" if not m.maximize else "score",
                         "reduced cost"], _allocation_rows(m), {2, 3, 4}, total=used))
    answer = body.get("answer")
    if isinstance(answer, Mapping):
        parts.append(alternatives_section(answer, checks, m.maximize, _table))
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


def render_record_only(record: Mapping[str, Any], note: str) -> str:
    """The page of a logged decision whose problem and answer cannot be shown (``note``
    says why): its record and the log's checks, and no verdict on the answer."""
    damaged = record_failed(record)
    word = "NOT VALID" if damaged else "NOT CHECKED"
    sentence = (f"The decision record fails the log's checks ({', '.join(damaged)}): it is "
                "not the record the service wrote. " if damaged else
                "The decision record passes the log's checks, but its answer cannot be "
                "re-checked here. ") + note
    return "\n".join([
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>Audit report \u2014 {word}</title><style>{_CSS}</style></head><body><main>",
        "<header><h1>Audit report</h1></header>",
        f'<section class="verdict invalid"><p class="word">{word}</p>'
        f"<p>{_esc(sentence)}</p></section>",
        record_section(record),
        f"<footer>certimatch {_esc(__version__)}.</footer></main></body></html>\n"])


def render(body: Mapping[str, Any], verdict: Mapping[str, Any], fmt: str = "html",
           source: str | None = None, record: Mapping[str, Any] | None = None) -> str:
    if fmt == "svg":
        return render_svg(body, verdict)
    if fmt == "html":
        return render_html(body, verdict, source, record)
    raise ValueError(f"format must be one of {', '.join(FORMATS)}, not {fmt!r}")


def build_report(body: Any, settings: Settings, fmt: str = "html",
                 source: str | None = None, record: Mapping[str, Any] | None = None
                 ) -> tuple[str, bool]:
    """(document, valid) for a /v1/verify body; ServiceError when the body is not one.

    The verdict is computed here by the independent verifier, never read from the body;
    with ``record`` (see :func:`render_html`) valid means the log's checks hold too.
    """
    verdict = verify_body(body, settings)
    valid = verdict.get("valid") is True and not (record and record_failed(record))
    return render(body, verdict, fmt, source, record), valid
