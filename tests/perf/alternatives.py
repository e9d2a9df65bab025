"""certimatch benchmark of ranked alternatives: k next-best plans against the solve alone.

    .venv/bin/python tests/perf/alternatives.py [--k 20] [--repeats 3] [--out DIR]

Two instances of the benchmark's families (generators.py): family A's 300 x 300 dense
assignment and family D's 300 agents x 5,000 tickets (150k arcs). For each, in-process
through ``solve_body`` with the server's time limit raised out of the way, phase by phase:
the request without ``alternatives`` (validate, normalise, solve, certify, answer,
self-check), then with ``"alternatives": k`` (the same phases, plus ``alternatives``: the
partition search, and the self-check, which now also checks the partition). Reports the
median wall time per phase over ``--repeats`` rounds, the CPU time of the whole request,
the answer's size in JSON and the partition's size (split plans, frontier cells). Writes
``alternatives.md`` and ``alternatives.json`` to the output folder.
"""

from __future__ import annotations

import argparse
import datetime
import json
import statistics
import sys
import time
import types
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
for _p in (str(HERE), str(HERE.parents[1])):
    if _p not in sys.path:
        sys.path.insert(0, _p)

import generators as gen  # noqa: E402
import orjson  # noqa: E402

from service.settings import Settings  # noqa: E402
from service.solve import pipeline  # noqa: E402
from service.solve.pipeline import solve_body  # noqa: E402

INSTANCES = {
    "A 300x300 assignment": lambda: gen.dense_assignment(300),
    "D 300 agents x 5000 tickets (150k arcs)": lambda: gen.ticket_routing(5000, 300),
}


def _round(body: dict[str, Any], settings: Settings) -> dict[str, Any]:
    timings: dict[str, float] = {}
    cpu, wall = time.process_time(), time.perf_counter()
    answer = solve_body(body, settings, timings)
    timings["cpu_total"] = time.process_time() - cpu
    timings["wall_total"] = time.perf_counter() - wall
    timings["answer_bytes"] = len(orjson.dumps(answer))
    part = answer.get("partition")
    if part is not None:
        timings["alternatives"] = timings.get("alternatives", 0.0)
        timings["found"] = len(answer["alternatives"])
        timings["split_plans"] = sum(b is not None for b in part["branches"])
        timings["frontier_cells"] = len(part["frontier"])
    return timings


def _cpu_phases(body: dict[str, Any], settings: Settings) -> dict[str, float]:
    """One more round with the pipeline's phase clock reading this process's CPU time
    (the engine's own child is not in it): what each phase costs when the machine is busy."""
    real = pipeline.time
    pipeline.time = types.SimpleNamespace(perf_counter=time.process_time)  # type: ignore
    try:
        timings: dict[str, float] = {}
        solve_body(body, settings, timings)
    finally:
        pipeline.time = real
    return timings


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--k", type=int, default=20)
    p.add_argument("--repeats", type=int, default=3)
    p.add_argument("--out", default=str(HERE / "results"))
    args = p.parse_args()
    settings = Settings(max_time_limit_s=3600, max_cells=10**7, max_arcs=10**7)
    results: dict[str, Any] = {
        "date": datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%d %H:%M UTC"),
        "command": "tests/perf/alternatives.py " + " ".join(sys.argv[1:]), "k": args.k,
        "instances": {}}
    lines = [f"# Ranked alternatives, k = {args.k} ({results['date']})", "",
             "| instance | request | validate+normalise | solve+certify | alternatives | "
             "self-check | total wall | total CPU | answer | partition |",
             "|---|---|---|---|---|---|---|---|---|---|"]
    cpu_lines = ["", "CPU time of this process per phase (one more round each):", "",
                 "| instance | request | alternatives | self-check |", "|---|---|---|---|"]
    for name, make in INSTANCES.items():
        problem = make()
        rows = {}
        for label, body in (("solve", problem), (f"k = {args.k}",
                                                 {**problem, "alternatives": args.k})):
            rounds = [_round(body, settings) for _ in range(args.repeats)]
            med = {key: statistics.median(r[key] for r in rounds) for key in rounds[0]}
            cpu = _cpu_phases(body, settings)
            rows[label] = {"median": med, "rounds": rounds, "cpu_phases": cpu}
            print(f"{name} / {label}: {json.dumps(med)}", file=sys.stderr, flush=True)
            part = (f"{int(med['found'])} found, {int(med['split_plans'])} split, "
                    f"{int(med['frontier_cells'])} frontier cells" if "found" in med else "")
            lines.append(
                f"| {name} | {label} | {med['validate'] + med['normalise']:.3f} s | "
                f"{med['solve'] + med['certify']:.3f} s | "
                f"{med.get('alternatives', 0.0):.3f} s | {med['self_verify']:.3f} s | "
                f"{med['wall_total']:.3f} s | {med['cpu_total']:.3f} s | "
                f"{med['answer_bytes'] / 1e6:.2f} MB | {part} |")
            cpu_lines.append(f"| {name} | {label} | {cpu.get('alternatives', 0.0):.3f} s | "
                             f"{cpu['self_verify']:.3f} s |")
        results["instances"][name] = rows
    lines += cpu_lines
    lines += ["", f"Command: `.venv/bin/python {results['command']}`; medians of "
              f"{args.repeats} rounds, in-process (no HTTP), on a shared machine."]
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    (out / "alternatives.md").write_text("\n".join(lines) + "\n")
    (out / "alternatives.json").write_text(json.dumps(results, indent=1))
    print("\n".join(lines))


if __name__ == "__main__":
    main()
