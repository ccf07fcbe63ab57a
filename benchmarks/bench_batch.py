"""Side-by-side benchmark for ``simwave batch``: scaling of the local pool, Dask overhead.

Run:  python benchmarks/bench_batch.py [--files 2000] [--state-levels histogram|minmax]
                                       [--rounds 1]

Makes N short recordings (CSV, 0.05 s at 2 kHz: steps and pulses, invented data)
and runs them all through one system with measurement (every pair writes its
output and its metrics JSON), in one process run, on:

1. ``--jobs 1`` (the pairs in the batch process itself: what a user gets),
2. a local process pool of one worker (the same worker set-up as 3., so 3. / 2. is
   the scaling of the pool alone: pool workers run BLAS single-threaded, the batch
   process keeps the library default),
3. ``--jobs 2`` (a local process pool of two workers),
4. a Dask ``LocalCluster`` of two single-threaded worker processes (started
   before the clock starts, as a cluster one connects to would be).

Prints pairs per second for each, the ``--jobs 2`` / ``--jobs 1`` throughput ratio
(target >= 1.8x on two cores) and the 2-worker / 1-worker pool ratio, and the
per-pair wall-time overhead of the Dask engine over the local pool with the same
two worker processes. Each engine writes
to its own fresh output directory. With ``--rounds`` > 1 the engines are
interleaved and each keeps its best time (the machines are shared and noisy).
``os.getloadavg()`` is printed before and after: other work on the machine
lowers the ratios.
"""

from __future__ import annotations

import argparse
import logging
import os
import shutil
import sys
import tempfile
import time
import warnings

import simwave
from simwave.batch import load_description, run_batch
from simwave.batch.engines import DaskEngine, PoolEngine, default_jobs

RATE = 2000.0
DURATION = 0.05
SYSTEM = "(2*pi*100)^2/(s^2 + 2*0.5*2*pi*100*s + (2*pi*100)^2)"


def make_inputs(folder: str, n: int) -> None:
    os.makedirs(folder, exist_ok=True)
    for i in range(n):
        if i % 2:
            wave = simwave.generate("step", RATE, DURATION, time=f"{2 + i % 9}m", level=1 + i % 5)
        else:
            wave = simwave.generate("pulse", RATE, DURATION, width=f"{10 + i % 7}m",
                                    delay=f"{3 + i % 5}m", level=0.5 + i % 3)
        simwave.write(os.path.join(folder, f"rec{i:05d}.csv"), wave)


def description(root: str, out: str, state_levels: str) -> str:
    path = os.path.join(root, f"batch-{out}.toml")
    with open(path, "w") as fh:
        fh.write(
            f'[output]\ndir = "{out}"\nformat = "csv"\n\n'
            f'[measure]\nstate_level_method = "{state_levels}"\n\n'
            f'[systems.lp2]\nexpression = "{SYSTEM}"\nmethod = "ramp-invariant"\n\n'
            '[[inputs]]\nfiles = "data/*.csv"\n'
        )
    return path


def timed(root: str, out: str, state_levels: str, **kw) -> tuple[float, int, float]:
    """Wall time, pairs, and the workers' CPU seconds summed over the pairs."""
    shutil.rmtree(os.path.join(root, out), ignore_errors=True)
    plan = load_description(description(root, out, state_levels))
    t0 = time.perf_counter()
    result = run_batch(plan, force=True, **kw)
    elapsed = time.perf_counter() - t0
    if result.counts["ok"] != len(plan.pairs):
        raise SystemExit(f"{out}: {result.counts['failed']} pairs failed: "
                         f"{next(r['error'] for r in result.rows if r['status'] != 'ok')}")
    cpu = sum(r.get("cpu_s") or 0.0 for r in result.results.values())
    return elapsed, len(plan.pairs), cpu


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--files", type=int, default=2000)
    ap.add_argument("--state-levels", choices=("histogram", "minmax"), default="histogram",
                    help="measurement's state-level method (histogram: the default; "
                         "minmax: cheaper, so engine overhead weighs more)")
    ap.add_argument("--rounds", type=int, default=1)
    args = ap.parse_args()
    warnings.simplefilter("ignore")
    print(f"cores available: {default_jobs()}, load average before: "
          f"{', '.join(f'{v:.2f}' for v in os.getloadavg())}")
    root = tempfile.mkdtemp(prefix="simwave-bench-batch-")
    try:
        t0 = time.perf_counter()
        make_inputs(os.path.join(root, "data"), args.files)
        print(f"made {args.files} inputs ({DURATION * 1e3:g} ms at {RATE:g} Hz, CSV) in "
              f"{time.perf_counter() - t0:.1f} s; measurement: {args.state_levels} state levels")

        from dask.distributed import LocalCluster

        t0 = time.perf_counter()
        cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                               dashboard_address=None, silence_logs=logging.ERROR)
        print(f"Dask LocalCluster (2 worker processes x 1 thread) started in "
              f"{time.perf_counter() - t0:.1f} s (not counted)")
        best = {k: float("inf") for k in ("jobs1", "pool1", "jobs2", "dask")}
        cpu = {}
        n = 0
        try:
            for _ in range(args.rounds):
                for name, kw in (("jobs1", {"jobs": 1}), ("pool1", {"engine": PoolEngine(1)}),
                                 ("jobs2", {"jobs": 2}),
                                 ("dask", {"engine": DaskEngine(cluster.scheduler_address)})):
                    elapsed, n, used = timed(root, name, args.state_levels, **kw)
                    if elapsed < best[name]:
                        best[name], cpu[name] = elapsed, used
                    print(f"  {name:6s} {elapsed:8.2f} s  {n / elapsed:7.1f} pairs/s  "
                          f"(load {os.getloadavg()[0]:.2f})", flush=True)
        finally:
            cluster.close()
        t1, t2, td = best["jobs1"], best["jobs2"], best["dask"]
        workers = {"jobs1": 1, "pool1": 1, "jobs2": 2, "dask": 2}
        print()
        print(f"pairs: {n} (one system, output + metrics JSON each)")
        print("engine                     wall      pairs/s   ms/pair   worker CPU ms/pair  "
              "CPU busy")
        labels = {"jobs1": "--jobs 1 (in-process)", "pool1": "pool of 1 worker",
                  "jobs2": "--jobs 2 (process pool)", "dask": "Dask, 2 worker processes"}
        for name, label in labels.items():
            t = best[name]
            # CPU busy: the workers' CPU time over (wall time x workers); below 100 % means
            # the workers waited (for a core taken by other programs, or for work).
            print(f"{label:26s} {t:8.2f} s {n / t:8.1f} {t / n * 1e3:9.2f} "
                  f"{cpu[name] / n * 1e3:12.2f} {100 * cpu[name] / (t * workers[name]):14.0f} %")
        print(f"scaling --jobs 2 / --jobs 1: {t1 / t2:.2f}x throughput (target >= 1.8x)")
        print(f"scaling pool 2 workers / pool 1 worker: {best['pool1'] / t2:.2f}x throughput")
        print(f"Dask / local pool (same 2 workers): {td / t2:.2f}x wall time; overhead "
              f"{(td - t2) / n * 1e3:+.2f} ms per pair wall, {(td - t2) / n * 2e3:+.2f} ms "
              "per pair of worker time")
        print(f"load average after: {', '.join(f'{v:.2f}' for v in os.getloadavg())}")
    finally:
        shutil.rmtree(root, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
