"""The benchmark's report: the machine, the tables, the bars of issue 15, the plot.

Everything here reads the result dicts that run.py builds (one per instance); nothing
measures. Keys of a result: ``median[k]`` and ``samples[k]`` for every measurement
(``e2e:<form>`` over HTTP, the in-process phases, ``script``, ``floor``...), ``paired``
for ratios taken within each round, ``forms`` (the wire forms sent over HTTP),
``floor_engine`` (the fastest bare engine), ``bars`` (which of issue 15's mid-size and
assignment bars the instance belongs to).
"""

from __future__ import annotations

import math
import os
import platform
import shutil
import subprocess
from pathlib import Path
from typing import Any

import numpy as np

PHASES = ("validate", "normalise", "solve", "certify", "answer", "self_verify")
ALL_PHASES = ("parse", *PHASES, "serialise")

#: Issue 15's bars, as (bar group, what is compared, limit). The groups are given per
#: instance by run.plan; "large" is every instance of 10^6 cells or 30k arcs and up.
BIG_RECORD, BIG_COLUMNAR, ASSIGN_LIMIT, MID_LIMIT = 1.0, 0.6, 0.7, 1.5
FLOOR_LIMIT, CHECK_SHARE, PEAK_LIMIT = 1.25, 0.30, 5.0


def machine() -> dict[str, Any]:
    from importlib.metadata import version

    cpu = "unknown"
    with open("/proc/cpuinfo") as f:
        for line in f:
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    mem = 0
    with open("/proc/meminfo") as f:
        for line in f:
            if line.startswith("MemTotal:"):
                mem = int(line.split()[1]) * 1024
    wrk_version = ""
    if shutil.which("wrk"):
        done = subprocess.run(["wrk", "-v"], capture_output=True, text=True, timeout=10,
                              check=False)
        wrk_version = (done.stdout or done.stderr).split("[")[0].strip()
    return {"cpu": cpu, "cores": os.cpu_count(), "memory_gib": round(mem / 2**30, 1),
            "os": platform.platform(), "python": platform.python_version(),
            **{name: version(name) for name in
               ("numpy", "scipy", "ortools", "pot", "lapjv", "networkx", "orjson", "flask",
                "gunicorn")},
            "wrk": wrk_version}


def ms(seconds: float | None) -> str:
    """Milliseconds to three significant figures."""
    if seconds is None or not math.isfinite(seconds):
        return "–"
    v = seconds * 1000
    if abs(v) >= 100:
        return f"{v:,.0f}"
    if abs(v) >= 10:
        return f"{v:.1f}"
    return f"{v:.2f}"


def ratio(a: float | None, b: float | None, digits: int = 2) -> str:
    if a is None or b is None or b == 0:
        return "–"
    return f"{a / b:.{digits}f}"


def peak(mem: dict[str, Any] | None, name: str) -> int | None:
    """The solve's own peak over the parsed body, or the two-process difference when the
    kernel would not reset the high-water mark; None when memory was not measured."""
    if not mem or name + "_over_baseline" not in mem:
        return None
    value: int = mem.get(name + "_peak", mem[name + "_over_baseline"])
    return value


def _mib(v: int | None) -> str:
    return f"{max(v, 0) / 2**20:,.0f}" if v is not None else "–"


def _forms(results: list[dict[str, Any]]) -> list[str]:
    seen: list[str] = []
    for r in results:
        for f in r.get("forms", ()):
            if f not in seen:
                seen.append(f)
    return seen


def _row(cells: list[str]) -> str:
    return "| " + " | ".join(cells) + " |"


def _head(cols: list[str]) -> list[str]:
    return [_row(cols), "|" + "---|" * len(cols)]


def side_by_side(results: list[dict[str, Any]]) -> str:
    """The service per wire form, the bare script and the best bare floor, and ratios."""
    forms = _forms(results)
    head = ["instance", "size", *(f"service HTTP, {f}" for f in forms), "bare script",
            "best floor", "floor engine",
            *(f"{f} / script" for f in forms), *(f"{f} / floor" for f in forms)]
    lines = _head(head)
    for r in results:
        if "median" not in r:
            lines.append(_row([r["key"], "error: " + "; ".join(r["errors"])]
                              + [""] * (len(head) - 2)))
            continue
        med, paired = r["median"], r["paired"]
        lines.append(_row([
            r["key"], f"{r['size']:,} {r['unit']}",
            *(ms(med.get(f"e2e:{f}")) for f in forms), ms(med["script"]), ms(med["floor"]),
            r["floor_engine"],
            *(_fmt(paired.get(f"script:{f}")) for f in forms),
            *(_fmt(paired.get(f"floor:{f}")) for f in forms)]))
    return "\n".join(lines)


def _fmt(v: float | None) -> str:
    return "–" if v is None else f"{v:.2f}"


def phase_table(results: list[dict[str, Any]]) -> str:
    head = ["instance", "e2e HTTP (record)", *ALL_PHASES, "HTTP & rest", "(cert+sv)/solve",
            "peak MiB", "peak/input"]
    lines = _head(head)
    for r in results:
        if "median" not in r:
            continue
        med, paired = r["median"], r["paired"]
        p = peak(r.get("memory"), "service")
        lines.append(_row([r["key"], ms(med["e2e:record"]), *(ms(med[k]) for k in ALL_PHASES),
                           ms(paired["rest"]), f"{paired['check_solve']:.2f}", _mib(p),
                           ratio(p, r["input_bytes"], 1) if p is not None else "–"]))
    return "\n".join(lines)


def _alt_cells(r: dict[str, Any], mode: str) -> tuple[str, str]:
    alt = r.get(mode)
    if alt is None:
        return "–", "–"
    if "median" in alt:
        return ms(alt["median"]), ratio(alt["median"], r["median"]["e2e:record"], 1)
    return ("skipped" if "skipped" in alt else "failed"), "–"


def detail_table(results: list[dict[str, Any]]) -> str:
    head = ["instance", "body MB", "bare parse", "bare arrays", "engine calls",
            "service solve / script call", "input arrays MiB", "peak over baseline MiB",
            "script peak MiB", "linprog", "linprog/e2e", "networkx", "networkx/e2e",
            "rounds", "objective", "checks"]
    lines = _head(head)
    for r in results:
        if "median" not in r:
            continue
        med, mem = r["median"], r.get("memory", {})
        calls = ", ".join(f"{k} {ms(med['call:' + k])}" for k in r["engines"])
        lp, lp_r = _alt_cells(r, "linprog")
        nx_, nx_r = _alt_cells(r, "networkx")
        checks = "; ".join(r["errors"]) or "objectives equal, answers identical"
        lines.append(_row([
            r["key"], f"{r['body_bytes'] / 1e6:.1f}", ms(med["bare_parse"]),
            ms(med["bare_arrays"]), calls, ratio(med["solve"], med["call:" + r["script"]]),
            f"{r['input_bytes'] / 2**20:,.1f}", _mib(mem.get("service_over_baseline")),
            _mib(peak(mem, "script")), lp, lp_r, nx_, nx_r, str(r["repeats"]),
            str(r["objective"]), checks]))
    return "\n".join(lines)


GROWTH_COLUMNS = ("e2e:record", *ALL_PHASES, "script", "floor")


def growth(results: list[dict[str, Any]]) -> dict[str, dict[str, float]]:
    """Slope of log(time) against log(size) per phase, over the A and D series."""
    out: dict[str, dict[str, float]] = {}
    for fam in ("A", "D"):
        pts = [r for r in results if r["family"] == fam and r["series"] and "median" in r]
        if len(pts) < 2:
            continue
        x = np.log([r["size"] for r in pts])
        out[fam] = {}
        for k in GROWTH_COLUMNS:
            y = np.log([max(r["median"][k], 1e-6) for r in pts])
            out[fam][k] = float(np.polyfit(x, y, 1)[0])
    return out


def growth_table(g: dict[str, dict[str, float]], results: list[dict[str, Any]]) -> str:
    fams = [f for f in ("A", "D") if f in g]
    if not fams:
        return "(growth needs at least two sizes of A or D)"

    def span(f: str) -> str:
        sizes = [r["size"] for r in results if r["family"] == f and r["series"]
                 and "median" in r]
        unit = "cells" if f == "A" else "arcs"
        return f"{f}: time ∝ {unit}^k ({min(sizes):,}–{max(sizes):,})"

    lines = _head(["phase", *(span(f) for f in fams)])
    for k in GROWTH_COLUMNS:
        lines.append(_row([k, *(f"{g[f][k]:.2f}" for f in fams)]))
    return "\n".join(lines)


def large(r: dict[str, Any]) -> bool:
    """Issue 15: every family from 1000 x 1000 or 30k arcs up."""
    return r["size"] >= (1_000_000 if r["unit"] == "cells" else 30_000)


def bar_rows(results: list[dict[str, Any]]) -> list[tuple[str, str, float, bool]]:
    """Issue 15's bars, instance by instance: (instance, bar, measured, met)."""
    rows: list[tuple[str, str, float, bool]] = []

    def add(r: dict[str, Any], bar: str, value: float | None, limit: float,
            at_most: bool = True) -> None:
        if value is not None:
            rows.append((r["key"], bar, value, value <= limit if at_most else value >= limit))

    for r in results:
        if "median" not in r:
            continue
        paired, groups = r["paired"], r.get("bars", ())
        if "big" in groups:
            add(r, f"record over HTTP / bare script ≤ {BIG_RECORD}",
                paired.get("script:record"), BIG_RECORD)
            add(r, f"columnar over HTTP / bare script ≤ {BIG_COLUMNAR}",
                paired.get("script:columnar"), BIG_COLUMNAR)
        if "assign" in groups:
            add(r, f"HTTP / bare scipy script ≤ {ASSIGN_LIMIT}", paired.get("script:record"),
                ASSIGN_LIMIT)
        if "mid" in groups:
            add(r, f"HTTP / bare script ≤ {MID_LIMIT}", paired.get("script:record"), MID_LIMIT)
        if large(r):
            add(r, f"HTTP / best floor ≤ {FLOOR_LIMIT}", paired.get("floor:record"),
                FLOOR_LIMIT)
            add(r, f"(certify + self-check) / solve ≤ {CHECK_SHARE}", paired["check_solve"],
                CHECK_SHARE)
        p = peak(r.get("memory"), "service")
        if r["family"] == "D" and p is not None:
            add(r, f"peak / input arrays ≤ {PEAK_LIMIT:g}", p / r["input_bytes"], PEAK_LIMIT)
    return rows


def bars(results: list[dict[str, Any]]) -> str:
    lines = _head(["instance", "bar", "measured", ""])
    lines += [_row([k, b, f"{v:.2f}", "met" if ok else "**not met**"])
              for k, b, v, ok in bar_rows(results)]
    return "\n".join(lines)


def _time_tick(seconds: float, _pos: int) -> str:
    """Log-axis ticks in plain units (10 ms, 1 s) instead of powers of ten."""
    if seconds >= 1:
        return f"{seconds:g} s"
    return f"{seconds * 1000:g} ms"


def plot(results: list[dict[str, Any]], path: Path) -> bool:
    try:
        import matplotlib
    except ImportError:
        return False
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.ticker import FuncFormatter, NullFormatter

    fams = [(f, t) for f, t in (("A", "A: dense n×n assignment"), ("D", "D: ticket routing"))
            if any(r["family"] == f and r["series"] and "median" in r for r in results)]
    if not fams:
        return False
    fig, axes = plt.subplots(1, len(fams), figsize=(6.2 * len(fams), 4.6), squeeze=False)
    for ax, (fam, title) in zip(axes[0], fams, strict=True):
        pts = sorted((r for r in results if r["family"] == fam and r["series"]
                      and "median" in r), key=lambda r: r["size"])
        x = np.array([r["size"] for r in pts], float)
        for form, style in zip(_forms(pts), ("o-", "v-", "P-"), strict=False):
            ax.loglog(x, [r["median"][f"e2e:{form}"] for r in pts], style,
                      label=f"service over HTTP, {form} form")
        ax.loglog(x, [r["median"]["script"] for r in pts], "s-", color="tab:green",
                  label="bare script (parse + arrays + scipy / OR-Tools)")
        ax.loglog(x, [r["median"]["floor"] for r in pts], "x--", color="tab:gray",
                  label="best bare floor (fastest engine)")
        ax.loglog(x, [r["median"]["solve"] for r in pts], "^:", color="tab:orange",
                  alpha=0.8, label="service: solve phase")
        ax.set_title(title)
        ax.set_xlabel("cells (n²)" if fam == "A" else "arcs")
        ax.set_ylabel("time (median)")
        ax.yaxis.set_major_formatter(FuncFormatter(_time_tick))
        ax.yaxis.set_minor_formatter(NullFormatter())
        ax.grid(True, which="both", alpha=0.3)
        ax.legend(fontsize=8, loc="upper left")
    fig.suptitle("certimatch: time against size (log-log)", fontsize=11)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return True


def throughput_text(tput: dict[str, Any] | None, wrk_rounds: int, small_runs: int) -> list[str]:
    if not (tput and "ratio" in tput):
        return [f"not measured: {(tput or {}).get('error', 'skipped')}"]
    parts = [f"wrk {tput['wrk']} on loopback, {wrk_rounds} alternating runs each "
             f"({len(tput['solve'])} and {len(tput['hello'])} succeeded), "
             f"median: solve **{tput['solve_rps']:,.0f} req/s**, hello world "
             f"**{tput['hello_rps']:,.0f} req/s**, ratio **{tput['ratio']:.2f}**."]
    phases = tput["phases"]
    parts += ["", f"The 10×10 solve in-process (median of {small_runs} runs, ms): "
              + ", ".join(f"{k} {phases[k] * 1000:.3f}" for k in ALL_PHASES)
              + f"; total {sum(phases.values()) * 1000:.2f} ms."]
    booted, start = tput["workers_booted"], tput["worker_start_s"]
    parts += ["", f"Workers booted during the wrk runs (max_requests recycling): solve "
              f"{booted['solve']}, hello world {booted['hello']}. A fresh interpreter "
              f"takes {start['solve']:.2f} s to import the service and create its app, "
              f"{start['hello']:.2f} s for the hello-world app."]
    bad = [r for k in ("solve", "hello") for r in tput[k] if r["non_2xx"] or r["socket_errors"]]
    if bad:
        parts.append(f"wrk reported errors: {bad}")
    if tput["errors"]:
        parts.append("Failed wrk runs (left out of the medians): " + "; ".join(tput["errors"]))
    return parts


def write_report(out: Path, doc: dict[str, Any], wrk_rounds: int, small_runs: int) -> str:
    m = doc["machine"]
    results = doc["instances"]
    parts = [
        "# certimatch benchmark results",
        "",
        f"Run {doc['date']} with `{doc['command']}` ({doc['wall_s'] / 60:.1f} min).",
        "",
        f"Machine: {m['cpu']}, {m['cores']} cores, {m['memory_gib']} GiB; {m['os']}; "
        f"Python {m['python']}, numpy {m['numpy']}, scipy {m['scipy']}, "
        f"OR-Tools {m['ortools']}, POT {m['pot']}, lapjv {m['lapjv']}, "
        f"networkx {m['networkx']}, orjson {m['orjson']}, Flask {m['flask']}, "
        f"gunicorn {m['gunicorn']}, {m['wrk'] or 'no wrk'}. Load average (1, 5, 15 min) at "
        "the start " + ", ".join(f"{v:.1f}" for v in doc["load_start"]) + ", at the end "
        + ", ".join(f"{v:.1f}" for v in doc["load_end"])
        + f": the machine is shared, so {m['cores']} cores may not all be ours.",
        "",
        "Times in milliseconds, medians of the rounds given below; ratios are medians of "
        "the ratios within each round. tests/perf/README.md explains every column.",
        "",
        "## Side by side: the service, the bare script, the best bare floor",
        "",
        side_by_side(results),
        "",
        "## The service's phases, in-process",
        "",
        phase_table(results),
        "",
        "## Bare parts, memory, alternatives and checks",
        "",
        detail_table(results),
        "",
        "## Issue 15's bars",
        "",
        bars(results),
        "",
        "## Throughput, 10×10 solve against hello world",
        "",
        *throughput_text(doc.get("throughput"), wrk_rounds, small_runs),
        "",
        "## Growth exponents",
        "",
        "Slope of log(median time) against log(size) over the A series (size = cells = n², "
        "so double it for n) and the scaled D series (size = arcs). 1 is linear; phases "
        "under a millisecond at the small sizes mostly fit noise.",
        "",
        growth_table(doc["growth"], results),
        "",
    ]
    if doc["notes"]:
        parts += ["## Notes", "", *(f"- {n}" for n in doc["notes"]), ""]
    if doc.get("plot"):
        parts += ["![time against size](scaling.png)", ""]
    text = "\n".join(parts)
    (out / "results.md").write_text(text)
    return text
