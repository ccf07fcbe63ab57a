"""Side-by-side benchmark for tolerance studies: Monte Carlo draws per second on 2 cores.

Run:  python benchmarks/bench_tolerance.py [--draws 400] [--rounds 1]

The study is the example's (examples/strain_front_end_study.toml: a second-order
front end from five toleranced parts, on the 50 ms bending-rig recording of 1,000
samples, invented data): every draw builds H(s) from its values, runs the
recording through it and measures it. Timed in one process run, on:

1. the in-process engine (``--jobs 1``),
2. a local process pool of two workers (``--jobs 2``),

each with a fresh output folder and ``force`` (nothing reused), counting only the
engine's time for the draws (the study's own clock: ``run-info.json``), then the
whole ``run_study`` call (summary, records and plots included). Prints draws per
second for each, the 2-worker / 1-worker ratio, and the split of one draw's time
between building H(s), simulating and measuring. ``os.getloadavg()`` is printed
before and after: other work on the shared machine lowers the numbers.
"""

from __future__ import annotations

import argparse
import os
import shutil
import tempfile
import time

from simwave.batch.engines import InlineEngine, PoolEngine
from simwave.tolerance import load_study, run_study
from simwave.tolerance import builds as B

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
STUDY = os.path.join(ROOT, "examples", "strain_front_end_study.toml")


def one_round(draws: int, engine_name: str) -> tuple[float, float, int]:
    out = tempfile.mkdtemp(prefix=f"bench-tol-{engine_name}-")
    try:
        study = load_study(STUDY, output_dir=out, draws=draws)
        study.plots = False
        engine = InlineEngine() if engine_name == "jobs 1" else PoolEngine(2)
        t0 = time.perf_counter()
        result = run_study(study, engine=engine, force=True)
        whole = time.perf_counter() - t0
        return result.run.elapsed_s, whole, result.run.ran
    finally:
        shutil.rmtree(out, ignore_errors=True)


def split_one_draw(repeats: int = 30) -> dict[str, float]:
    """Mean time of the three steps of one draw, in this process."""
    from simwave.measure import measure
    from simwave.run import simulate
    from simwave.tolerance.worker import _input

    study = load_study(STUDY)
    values = B.random_values(study.parameters, repeats, seed=1)
    wf = _input(study.inputs[0])
    t = {"build H(s)": 0.0, "simulate": 0.0, "measure": 0.0}
    for v in values:
        a = time.perf_counter()
        system = study.template.build(v)
        b = time.perf_counter()
        y = simulate(system, wf)
        c = time.perf_counter()
        measure(y, reference=wf, system=system, **study.measure_options)
        d = time.perf_counter()
        t["build H(s)"] += b - a
        t["simulate"] += c - b
        t["measure"] += d - c
    return {k: v / repeats for k, v in t.items()}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=400)
    ap.add_argument("--rounds", type=int, default=1)
    args = ap.parse_args()
    print(f"load average before: {os.getloadavg()}")
    print(f"study: {os.path.relpath(STUDY, ROOT)}, {args.draws} draws (+ nominal and 10 "
          "sensitivity steps), 1 input of 1,000 samples")
    best: dict[str, tuple[float, float, int]] = {}
    for _ in range(args.rounds):
        for name in ("jobs 1", "jobs 2"):
            r = one_round(args.draws, name)
            if name not in best or r[0] < best[name][0]:
                best[name] = r
    rates = {}
    for name, (engine_s, whole_s, ran) in best.items():
        rates[name] = ran / engine_s
        print(f"{name}: {ran} builds in {engine_s:.2f} s on the engine = {rates[name]:.1f} "
              f"draws/s; whole study call {whole_s:.2f} s ({ran / whole_s:.1f} draws/s)")
    print(f"jobs 2 / jobs 1 throughput: {rates['jobs 2'] / rates['jobs 1']:.2f}x")
    split = split_one_draw()
    total = sum(split.values())
    print("one draw in this process: " + ", ".join(
        f"{k} {v * 1e3:.2f} ms ({v / total * 100:.0f} %)" for k, v in split.items()))
    print(f"load average after: {os.getloadavg()}")


if __name__ == "__main__":
    main()
