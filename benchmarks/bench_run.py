"""Side-by-side benchmarks for the main job (``simulate`` / ``simwave run``).

Run:  python benchmarks/bench_run.py [--minutes 10] [--repeat 3] [--baseline DIR]
      [--only lsim|long|fixed|short|methods]

Prints ratios measured in one process run, interleaving the contenders and
keeping each one's best time (the machines are shared and noisy):

1. simwave ramp-invariant vs scipy.signal.lsim (first-order hold), 200k samples,
   order 4: speed ratio (target >= 300x) and the largest difference relative to
   the output's peak (target <= 1e-9).
2. ``simwave run`` on an N-minute 48 kHz stereo float WAV vs a plain script that
   reads the whole file with soundfile, filters with scipy.signal.sosfilt and
   writes it: time ratio (target <= 1.0x) and each one's peak memory (simwave's
   target: under 200 MB whatever the file length). Each contender runs in a fresh
   subprocess, so its peak RSS (ru_maxrss) is its own.

3. ``simulate`` fixed cost on 1,000 samples for Butterworth orders 2/4/8/16: the
   call's time minus ``sosfilt`` on the same sections, for a system already run
   once (its discrete model is kept) and for a new one (never seen: nothing cached); target
   <= 0.5 ms for order <= 8.
4. ``simwave run`` on a 1-second 48 kHz WAV vs the plain script, whole processes
   (start-up included): target <= 1.1x.

5. (``--only methods``) the new-system fixed cost of 3. per method at orders 2/4/8,
   the poor models' rate search for their warning included.

``--baseline DIR`` runs 3., 4. and 5. on an older checkout as well (before/after).
The filter core alone vs sosfilt is in bench_filter_core.py.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time

import numpy as np
import scipy.signal
import soundfile

import simwave
from common import NEUTRAL_DIR, interleaved, median, python, time_process, tree_env

# 4th-order Butterworth low-pass at 1 kHz (section damping 0.3827 and 0.9239)
SYSTEM = (
    "(2*pi*1k)^4/((s^2 + 0.7654*2*pi*1k*s + (2*pi*1k)^2)"
    "*(s^2 + 1.8478*2*pi*1k*s + (2*pi*1k)^2))"
)


def bench_lsim(repeat: int) -> None:
    rate = 48_000.0
    n = 200_000
    rng = np.random.default_rng(0)
    x = np.cumsum(rng.standard_normal(n)) * 1e-2
    system = simwave.System.parse(SYSTEM)
    t = np.arange(n) / rate
    wave = simwave.Waveform(x, rate)
    lti = scipy.signal.lti(system.zeros, system.poles, system.gain)
    best_sw = best_ref = np.inf
    simwave.simulate(system, wave, method="ramp-invariant")  # warm-up: imports, caches
    for _ in range(repeat):
        # simwave's run is ~300x shorter than lsim's, so it gets several tries per round
        # (its best of them), like timeit does for short statements
        for _ in range(10):
            t0 = time.perf_counter()
            y_sw = simwave.simulate(system, wave, method="ramp-invariant").data[:, 0]
            best_sw = min(best_sw, time.perf_counter() - t0)
        t0 = time.perf_counter()
        _, y_ref, _ = scipy.signal.lsim(lti, x, t, interp=True)
        best_ref = min(best_ref, time.perf_counter() - t0)
    diff = np.max(np.abs(y_sw - y_ref)) / np.max(np.abs(y_ref))
    print("1. ramp-invariant vs scipy.signal.lsim (FOH), 200k samples, order 4")
    print(f"   simwave {best_sw * 1e3:8.1f} ms   lsim {best_ref * 1e3:8.1f} ms   "
          f"speed-up {best_ref / best_sw:7.1f}x (target >= 300x)")
    print(f"   max |difference| / max |output| = {diff:.2e} (target <= 1e-9)")


PLAIN_SCRIPT = """
import sys, numpy as np, scipy.signal, soundfile, simwave
src, dst = sys.argv[1], sys.argv[2]
sos = simwave.System.parse(sys.argv[3]).discretize(48000.0, "bilinear").sos
x, rate = soundfile.read(src, always_2d=True)
y = scipy.signal.sosfilt(sos, x, axis=0)
soundfile.write(dst, y, rate, subtype="FLOAT")
"""

SIMWAVE_SCRIPT = """
import sys, simwave
simwave.simulate(sys.argv[3], sys.argv[1], method="bilinear", output=sys.argv[2])
"""


def _measure_in_helper(code: str, *args: str) -> tuple[float, float]:
    """Time a child and read that child's own peak RSS via a wrapper process."""
    wrapper = (
        "import resource, subprocess, sys, time\n"
        "t0 = time.perf_counter()\n"
        "subprocess.run([sys.executable, '-c', sys.argv[1], *sys.argv[2:]], check=True)\n"
        "dt = time.perf_counter() - t0\n"
        "print(dt, resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0)\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", wrapper, code, *args], check=True, capture_output=True, text=True
    ).stdout.split()
    return float(out[-2]), float(out[-1])


def bench_file(minutes: float, repeat: int) -> None:
    rate = 48_000
    n = int(minutes * 60 * rate)
    with tempfile.TemporaryDirectory() as tmp:
        src = os.path.join(tmp, "in.wav")
        rng = np.random.default_rng(1)
        with soundfile.SoundFile(src, "w", rate, 2, subtype="FLOAT") as f:
            for start in range(0, n, 1 << 20):
                m = min(1 << 20, n - start)
                f.write((0.1 * rng.standard_normal((m, 2))).astype(np.float32))
        size_mb = os.path.getsize(src) / 1e6
        best = {"plain": (np.inf, 0.0), "simwave": (np.inf, 0.0)}
        for _ in range(repeat):
            for name, code in (("plain", PLAIN_SCRIPT), ("simwave", SIMWAVE_SCRIPT)):
                dst = os.path.join(tmp, f"out-{name}.wav")
                dt, rss = _measure_in_helper(code, src, dst, SYSTEM)
                if dt < best[name][0]:
                    best[name] = (dt, rss)
                os.remove(dst)
    (t_plain, m_plain), (t_sw, m_sw) = best["plain"], best["simwave"]
    print(f"2. simwave run vs plain read-whole/sosfilt/write script, {minutes:g} min 48 kHz "
          f"stereo float WAV ({size_mb:.0f} MB)")
    print(f"   plain   {t_plain:6.2f} s   peak memory {m_plain:7.1f} MB")
    print(f"   simwave {t_sw:6.2f} s   peak memory {m_sw:7.1f} MB (target < 200 MB)")
    print(f"   time ratio simwave/plain = {t_sw / t_plain:.2f}x (target <= 1.0x)")


FIXED_COST = r"""
import json, time, warnings
import numpy as np, scipy.signal as sig
import simwave
import simwave.run as run_module
warnings.simplefilter("ignore")
x = np.random.default_rng(0).standard_normal(1000)
w = simwave.Waveform(x, 48000.0)
out = {}
for order in (2, 4, 8, 16):
    z, p, k = sig.butter(order, 2 * np.pi * 1000, analog=True, output="zpk")
    system = simwave.System.from_zpk(z, p, k)
    sos = system.discretize(48000.0).sos
    simwave.simulate(system, w)

    def best(f, n):
        b = 1e9
        for _ in range(n):
            t0 = time.perf_counter(); f(); b = min(b, time.perf_counter() - t0)
        return b

    fresh = iter([simwave.System.from_zpk(*sig.butter(order, 2 * np.pi * 1000 * (1 + 1e-9 * i),
                                                      analog=True, output="zpk"))
                  for i in range(1, 40)])

    def cold():
        # a system never seen before (its corner moved in the 9th digit: other poles and
        # gain), so no cache keyed on any part of it can hold it
        getattr(run_module, "_PREPARED", {}).clear()
        simwave.simulate(next(fresh), w)

    filt = best(lambda: sig.sosfilt(sos, x), 200)
    out[order] = {"warm_ms": (best(lambda: simwave.simulate(system, w), 200) - filt) * 1e3,
                  "cold_ms": (best(cold, 20) - filt) * 1e3}
print(json.dumps(out))
"""


def bench_fixed_cost(baseline: str | None) -> None:
    import json

    trees = {"now": None} | ({"before": baseline} if baseline else {})
    res = {}
    for label, tree in trees.items():
        done = subprocess.run([python(), "-c", FIXED_COST], env=tree_env(tree), cwd=NEUTRAL_DIR,
                              check=True, capture_output=True, text=True)
        res[label] = json.loads(done.stdout.strip().splitlines()[-1])
    print("3. simulate fixed cost, 1,000 samples (call minus sosfilt), best of 200 (warm) / 20 "
          "(new system)")
    for order in ("2", "4", "8", "16"):
        line = (f"   order {order:>2}: now {res['now'][order]['warm_ms']:6.3f} ms repeated system, "
                f"{res['now'][order]['cold_ms']:6.3f} ms new system")
        if baseline:
            line += f"   before {res['before'][order]['cold_ms']:6.3f} ms new system"
        print(line + ("   (target <= 0.5 ms for order <= 8)" if order != "16" else ""))


BY_METHOD = r"""
import json, sys, time, warnings
import numpy as np, scipy.signal as sig
import simwave
import simwave.run as run_module
warnings.simplefilter("ignore")
x = np.random.default_rng(0).standard_normal(1000)
w = simwave.Waveform(x, 48000.0)
out = {}
for method in ("ramp-invariant", "step-invariant", "impulse-invariant", "bilinear", "matched-z"):
    for order in (2, 4, 8):
        z, p, k = sig.butter(order, 2 * np.pi * 1000, analog=True, output="zpk")
        system = simwave.System.from_zpk(z, p, k)
        sos = system.discretize(48000.0, method).sos
        simwave.simulate(system, w, method=method)
        fresh = iter([simwave.System.from_zpk(*sig.butter(order, 2 * np.pi * 1000 * (1 + 1e-9 * i),
                                                          analog=True, output="zpk"))
                      for i in range(1, 40)])
        b = f = 1e9
        for _ in range(int(sys.argv[1])):
            getattr(run_module, "_PREPARED", {}).clear()
            s = next(fresh)
            t0 = time.perf_counter(); simwave.simulate(s, w, method=method)
            b = min(b, time.perf_counter() - t0)
        for _ in range(200):
            t0 = time.perf_counter(); sig.sosfilt(sos, x); f = min(f, time.perf_counter() - t0)
        poor = run_module.in_band_check(system.discretize(48000.0, method))["poor"]
        out[f"{method}/{order}"] = [(b - f) * 1e3, poor]
print(json.dumps(out))
"""


def bench_by_method(baseline: str | None, rounds: int) -> None:
    """A new system's ``simulate`` fixed cost per method, Butterworth orders 2/4/8 at a
    1 kHz corner, 48 kHz, in memory. The models the in-band check calls poor (step-
    invariant here; bilinear and matched-z at order 8) include the rate search behind
    their warning. The trees alternate, ``rounds`` times; each keeps its best."""
    import json

    trees = {"now": None} | ({"before": baseline} if baseline else {})
    res: dict[str, dict] = {label: {} for label in trees}
    for _ in range(rounds):
        for label, tree in trees.items():
            done = subprocess.run([python(), "-c", BY_METHOD, "15"], env=tree_env(tree),
                                  cwd=NEUTRAL_DIR, check=True, capture_output=True, text=True)
            for key, (ms, poor) in json.loads(done.stdout.strip().splitlines()[-1]).items():
                old = res[label].get(key)
                res[label][key] = [min(ms, old[0]) if old else ms, poor]
    print(f"5. simulate fixed cost by method, a new system each call, 1,000 samples (call minus "
          f"sosfilt), best of 15 x {rounds} rounds; * = the in-band check calls it poor")
    for key, (ms, poor) in res["now"].items():
        line = f"   {key:<20}{'*' if poor else ' '} now {ms:7.3f} ms"
        if baseline:
            before = res["before"][key][0]
            line += f"   before {before:7.3f} ms   now/before {ms / before:5.2f}"
        print(line)


def bench_short_file(baseline: str | None, rounds: int) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        src = os.path.join(tmp, "in.wav")
        x = 0.1 * np.random.default_rng(3).standard_normal((48000, 2))
        soundfile.write(src, x, 48000, subtype="FLOAT")
        trees = {"now": None} | ({"before": baseline} if baseline else {})
        contenders = {"plain": lambda: time_process(
            [python(), "-c", PLAIN_SCRIPT, src, os.path.join(tmp, "p.wav"), SYSTEM], tree_env())}
        for label, tree in trees.items():
            contenders[label] = (lambda tree=tree, label=label: time_process(
                [python(), "-m", "simwave", "run", src, "-s", SYSTEM, "-m", "bilinear", "-o",
                 os.path.join(tmp, f"{label}.wav")], tree_env(tree)))
        times = {k: median(v) for k, v in interleaved(contenders, rounds).items()}
    print(f"4. simwave run vs the plain script on a 1-s 48 kHz stereo WAV, whole processes "
          f"(medians of {rounds})")
    print(f"   plain   {times['plain']:6.3f} s")
    for label in trees:
        print(f"   {label:<7} {times[label]:6.3f} s   ratio {times[label] / times['plain']:.2f}x"
              + ("   (target <= 1.1x)" if label == "now" else ""))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=10.0)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--lsim-only", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--baseline", metavar="DIR", default=None)
    ap.add_argument("--only", choices=("lsim", "long", "fixed", "short", "methods"),
                    default=None)
    args = ap.parse_args()
    if args.only == "fixed":
        bench_fixed_cost(args.baseline)
        return
    if args.only == "methods":
        bench_by_method(args.baseline, args.repeat)
        return
    if args.only == "short":
        bench_short_file(args.baseline, max(args.repeat, 5))
        return
    if args.only == "long":
        bench_file(args.minutes, args.repeat)
        return
    if args.lsim_only or args.only == "lsim":
        bench_lsim(args.repeat)
        return
    # Part 1 runs twice in fresh processes: with OpenBLAS's default worker threads, and
    # with one. lsim's large set-up products wake the workers, which then spin for a while
    # and, on a 2-core machine, steal the core the next contender runs on; simwave's own
    # linear algebra is on 4x4 matrices and gains nothing from them (lsim's per-sample
    # loop is single-threaded either way).
    for label, threads in (("default BLAS threads", None), ("OPENBLAS_NUM_THREADS=1", "1")):
        env = dict(os.environ)
        if threads:
            env["OPENBLAS_NUM_THREADS"] = threads
        print(f"[{label}]")
        subprocess.run([sys.executable, __file__, "--lsim-only", "--repeat", str(args.repeat)],
                       check=True, env=env)
    bench_file(args.minutes, args.repeat)
    bench_fixed_cost(args.baseline)
    bench_short_file(args.baseline, max(args.repeat, 5))


if __name__ == "__main__":
    main()
