"""Per-pair overhead of ``simwave batch`` over a plain read/sosfilt/write loop, side by side.

Run:  python benchmarks/bench_batch_overhead.py [--files 2000] [--long-files 200]
                                                [--baseline DIR] [--jobs 2]

1. Short pairs: N WAVs of 0.05 s at 48 kHz (steps and pulses, invented) x one
   system, every pair writing its output and its metrics JSON (``simwave batch``
   quick form, ``--jobs 2``). Target >= 150 pairs/s on 2 cores. Printed beside it: a
   plain loop in one process (soundfile.read, scipy.signal.sosfilt, soundfile.write
   per file, no metrics) and the per-pair overhead of simwave over it in worker
   time (wall x jobs / pairs minus the loop's time per pair). The measuring step
   alone (``simwave.measure`` on one output against its input) is timed too: its
   cost belongs to the measuring rebuild, not to the batch machinery. Then where a
   short pair's time goes, in one process (best of 3 over up to 200 files): the plain
   loop, ``simwave run`` alone, and the run with measuring and the metrics JSON, of
   which measuring in memory. Beside each batch run: the batch process's CPU time per
   pair, and the workers' own CPU and elapsed time per pair (from the journal), which say
   more than wall time when other processes share the cores.
2. Long pairs: M WAVs of 10 s x 3 systems (same batch command); target >= 4x the
   baseline's pairs/s in the issue's run, 200 files (the default). ``--long-files``
   scales it down for a quick look, but the ratio is not scale-free: each batch's
   start-up (~0.5-1 s in either tree) weighs more in a short batch (20 files: ~35 % of
   this tree's time) and lowers the ratio.

Each contender is a fresh process (``python -m simwave batch ...``), in turn per
round, this tree and (with ``--baseline DIR``) an older checkout.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile

import numpy as np
import soundfile as sf

from common import NEUTRAL_DIR, python, time_process, tree_env

RATE = 48000
SYSTEMS = ["(2*pi*100)^2/(s^2 + 2*0.5*2*pi*100*s + (2*pi*100)^2)",
           "1/(2m*s + 1)",
           "(2*pi*1k)^4/((s^2 + 0.7654*2*pi*1k*s + (2*pi*1k)^2)"
           "*(s^2 + 1.8478*2*pi*1k*s + (2*pi*1k)^2))"]

PLAIN_LOOP = r"""
import glob, os, sys
import numpy as np, scipy.signal, soundfile
import simwave
sos = simwave.System.parse(sys.argv[3]).discretize(48000.0, "ramp-invariant").sos
os.makedirs(sys.argv[2], exist_ok=True)
for path in sorted(glob.glob(os.path.join(sys.argv[1], "*.wav"))):
    x, rate = soundfile.read(path, always_2d=True)
    y = scipy.signal.sosfilt(sos, x, axis=0)
    soundfile.write(os.path.join(sys.argv[2], os.path.basename(path)), y, rate, subtype="FLOAT")
"""

MEASURE_ONE = r"""
import sys, time, warnings
warnings.simplefilter("ignore")
import simwave
out, ref, n = sys.argv[1], sys.argv[2], int(sys.argv[3])
simwave.measure(out, reference=ref)
t0 = time.perf_counter()
for _ in range(n):
    simwave.measure(out, reference=ref)
print((time.perf_counter() - t0) / n)
"""


SPLIT = r"""
import glob, json, os, sys, time, warnings
warnings.simplefilter("ignore")
import numpy as np, scipy.signal, soundfile
import simwave
from simwave.run import RunJob, execute
data, out, text, n = sys.argv[1], sys.argv[2], sys.argv[3], int(sys.argv[4])
os.makedirs(out, exist_ok=True)
files = sorted(glob.glob(os.path.join(data, "*.wav")))[:n]
system = simwave.System.parse(text)
sos = system.discretize(48000.0, "ramp-invariant").sos
fresh = [0]
def target(i, ext):
    # a new folder per pass, as the batch writes into a fresh one: replacing an existing
    # file that was not synced makes ext4 start writing it back at the rename (~3 ms)
    return os.path.join(out, str(fresh[0]), f"{i:05d}.{ext}")
def new_folder():
    fresh[0] += 1
    os.makedirs(os.path.join(out, str(fresh[0])))
def plain():
    for i, path in enumerate(files):
        x, rate = soundfile.read(path, always_2d=True)
        soundfile.write(target(i, "wav"), scipy.signal.sosfilt(sos, x, axis=0), rate,
                        subtype="FLOAT")
def run_only():
    for i, path in enumerate(files):
        execute(RunJob(system=system, source=path, output=target(i, "wav")))
def run_and_measure():
    for i, path in enumerate(files):
        execute(RunJob(system=system, source=path, output=target(i, "wav"),
                       metrics=target(i, "json")))
def measure_only():
    for y, x in held:
        simwave.measure(y, reference=x, system=system, rest_before_record=True)
times = {}
new_folder()
run_and_measure()  # warm: models cached
held = [(simwave.read(target(i, "wav")), simwave.read(p)) for i, p in enumerate(files)]
for _ in range(3):
    for name, f in (("plain", plain), ("run", run_only), ("all", run_and_measure),
                    ("measure", measure_only)):
        new_folder()
        t0 = time.perf_counter()
        f()
        times[name] = min(times.get(name, 1e9), (time.perf_counter() - t0) / len(files))
print(json.dumps(times))
"""


def make_inputs(folder: str, n: int, seconds: float) -> None:
    os.makedirs(folder, exist_ok=True)
    rng = np.random.default_rng(5)
    m = int(seconds * RATE)
    for i in range(n):
        x = np.zeros(m)
        start = int(m * (0.1 + 0.3 * (i % 5) / 5))
        stop = m if i % 2 else start + m // 3
        x[start:stop] = 0.2 + 0.1 * (i % 3)
        x += 1e-3 * rng.standard_normal(m)
        sf.write(os.path.join(folder, f"rec{i:05d}.wav"), x, RATE, subtype="FLOAT")


def batch_cmd(data: str, out: str, systems: list[str], jobs: int) -> list[str]:
    argv = [python(), "-m", "simwave", "batch", "-o", out, "-j", str(jobs), "--force"]
    for s in systems:
        argv += ["-s", s]
    return argv + [os.path.join(data, "*.wav")]


#: CPU seconds of the batch process (the workers, children of its forkserver, are not
#: reaped by it and not counted) and the workers' own per-pair figures from the journal,
#: of the last :func:`_timed` run.
LAST: dict[str, float | None] = {}


def _timed(argv: list[str], tree: str | None, out: str) -> float:
    """Wall time of one batch process into a fresh output folder (it must exit 0).

    Also records in :data:`LAST` the CPU time of the batch process (this process's reaped
    children) and, from the journal, the
    workers' mean CPU and elapsed time per pair (``cpu_s``, ``elapsed_s``; None where the
    tree's journal has no ``cpu_s``).
    """
    shutil.rmtree(out, ignore_errors=True)
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    wall = time_process(argv, tree_env(tree))
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    LAST.clear()
    LAST["cpu_s"] = (after.ru_utime + after.ru_stime) - (before.ru_utime + before.ru_stime)
    try:
        with open(os.path.join(out, ".simwave-batch-journal.jsonl"), encoding="utf-8") as fh:
            results = [json.loads(line)["result"] for line in fh if line.strip()]
    except (OSError, ValueError, KeyError):
        results = []
    cpus = [r.get("cpu_s") for r in results]
    LAST["pair_cpu_s"] = (sum(cpus) / len(cpus)) if results and None not in cpus else None
    els = [r.get("elapsed_s") for r in results]
    LAST["pair_elapsed_s"] = (sum(els) / len(els)) if results and None not in els else None
    return wall


def _cpu_text(figures: dict | None, pairs: int) -> str:
    """CPU per pair of a batch run, all its processes, and the workers' own per pair."""
    if not figures:
        return ""
    text = f"batch process CPU {figures['cpu_s'] / pairs * 1e3:5.2f} ms/pair"
    if figures.get("pair_cpu_s") is not None:
        text += (f", in the worker {figures['pair_cpu_s'] * 1e3:6.2f} ms CPU / "
                 f"{figures['pair_elapsed_s'] * 1e3:6.2f} ms elapsed")
    return text


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--files", type=int, default=2000)
    ap.add_argument("--long-files", type=int, default=200)
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--rounds", type=int, default=1)
    ap.add_argument("--baseline", metavar="DIR", default=None)
    args = ap.parse_args()
    trees = {"now": None} | ({"before": args.baseline} if args.baseline else {})
    root = tempfile.mkdtemp(prefix="simwave-bench-overhead-")
    print(f"load average before: {', '.join(f'{v:.2f}' for v in os.getloadavg())}")
    try:
        short, long_ = os.path.join(root, "short"), os.path.join(root, "long")
        make_inputs(short, args.files, 0.05)
        make_inputs(long_, args.long_files, 10.0)
        best: dict[str, float] = {}
        cpu: dict[str, dict[str, float | None]] = {}  # of each contender's fastest run

        runs: dict[str, list[float]] = {}  # every round's time, in order

        def keep(key: str, seconds: float) -> None:
            runs.setdefault(key, []).append(seconds)
            if seconds < best.get(key, float("inf")) and key != "plain":
                cpu[key] = dict(LAST)
            best[key] = min(best.get(key, float("inf")), seconds)

        for r in range(args.rounds):
            keep("plain", time_process([python(), "-c", PLAIN_LOOP, short,
                                        os.path.join(root, "plain"), SYSTEMS[0]], tree_env()))
            # the contenders take turns at going first: the one that runs second in a round
            # was 4-9 % faster in A/A and swapped runs (2,000 short pairs, 2026-12-03)
            order = list(trees.items())
            for label, tree in order if r % 2 == 0 else order[::-1]:
                out = os.path.join(root, f"out-{label}")
                keep(f"short {label}",
                     _timed(batch_cmd(short, out, SYSTEMS[:1], args.jobs), tree, out))
                if args.long_files:
                    keep(f"long {label}",
                         _timed(batch_cmd(long_, out, SYSTEMS, args.jobs), tree, out))
        one_out = os.path.join(root, "one.wav")
        subprocess.run([python(), "-m", "simwave", "run", os.path.join(short, "rec00000.wav"),
                        "-s", SYSTEMS[0], "-o", one_out], env=tree_env(), cwd=NEUTRAL_DIR,
                       check=True, capture_output=True)
        measure_s = float(subprocess.run(
            [python(), "-c", MEASURE_ONE, one_out, os.path.join(short, "rec00000.wav"), "50"],
            env=tree_env(), cwd=NEUTRAL_DIR, check=True, capture_output=True, text=True
        ).stdout.split()[-1])

        split = json.loads(subprocess.run(
            [python(), "-c", SPLIT, short, os.path.join(root, "split"), SYSTEMS[0],
             str(min(args.files, 200))],
            env=tree_env(), cwd=NEUTRAL_DIR, check=True, capture_output=True, text=True
        ).stdout.split("\n")[-2])

        n, j = args.files, args.jobs
        plain_ms = best["plain"] / n * 1e3
        print(f"1. {n} short WAVs (0.05 s, 48 kHz) x 1 system, output + metrics JSON, "
              f"--jobs {j}")
        print(f"   plain loop (1 process, no metrics) {best['plain']:7.2f} s "
              f"{n / best['plain']:8.1f} pairs/s  {plain_ms:6.2f} ms/pair")
        for label in trees:
            t = best[f"short {label}"]
            worker_ms = t * j / n * 1e3
            print(f"   simwave batch [{label:<6}]        {t:7.2f} s {n / t:8.1f} pairs/s  "
                  f"{worker_ms:6.2f} ms/pair of worker time, overhead over the loop "
                  f"{worker_ms - plain_ms:+7.2f} ms/pair")
            print(f"      {_cpu_text(cpu.get(f'short {label}'), n)}")
        print(f"   target >= 150 pairs/s: now {n / best['short now']:.1f} pairs/s")
        if args.baseline:
            print(f"   now / before = {best['short before'] / best['short now']:.2f}x pairs/s")
        print(f"   measuring one short output against its input (simwave.measure, this tree): "
              f"{measure_s * 1e3:.1f} ms per pair")
        ms = {k: v * 1e3 for k, v in split.items()}
        print(f"   where a short pair's time goes, in one process (this tree, best of 3 over "
              f"{min(args.files, 200)} files), ms/pair:")
        print(f"     plain read/sosfilt/write {ms['plain']:6.2f} | simwave run (model, "
              f"checks, output, report) {ms['run']:6.2f} | + measuring and metrics JSON "
              f"{ms['all'] - ms['run']:6.2f}, of which simwave.measure in memory "
              f"{ms['measure']:6.2f}, the rest (reading back or keeping the arrays, "
              f"metrics JSON and its file) {ms['all'] - ms['run'] - ms['measure']:6.2f}")
        print(f"     total {ms['all']:6.2f} ms/pair in process = "
              f"{j * 1e3 / ms['all']:.0f} pairs/s on {j} workers before pool and start-up costs")
        m = args.long_files * len(SYSTEMS)
        if not m:
            print("2. long pairs skipped (--long-files 0)")
        else:
            print(f"2. {args.long_files} WAVs of 10 s x {len(SYSTEMS)} systems = {m} pairs, "
                  f"--jobs {j}")
            for label in trees:
                t = best[f"long {label}"]
                print(f"   simwave batch [{label:<6}] {t:7.2f} s {m / t:7.2f} pairs/s  "
                      f"{_cpu_text(cpu.get(f'long {label}'), m)}")
            if args.baseline:
                print(f"   now / before = {best['long before'] / best['long now']:.2f}x pairs/s "
                      "(target >= 4x; best of each)")
                if args.rounds > 1:
                    pairs = zip(runs["long before"], runs["long now"], strict=True)
                    print("   each round, before / now: " + ", ".join(
                        f"{b:.2f} / {t:.2f} s = {b / t:.2f}x" for b, t in pairs))
        print(f"load average after: {', '.join(f'{v:.2f}' for v in os.getloadavg())}")
    finally:
        shutil.rmtree(root, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
