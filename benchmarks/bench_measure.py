"""Measuring cost on long records: `simwave.measure` on 10-minute 48 kHz files (a sine, a step
train of 1,000 transitions, white noise), each beside one plain whole-file pass over the same
data (``soundfile.read`` of the file, then one ``numpy`` reduction: the ``np.load``-style
baseline). Time and peak memory are printed, and their ratios.

Each step runs in its own Python process, so its peak resident set size (``ru_maxrss``) is that
step's own high-water mark (the import of simwave alone is printed first: every step pays it).

Target: every record measured in <= 3 s and <= 200 MB peak on a 2-core machine.

Short pairs (what a batch measures per pair): a 0.05-s 48 kHz output (2,400 samples, one
step through a second-order low-pass) measured against its input, given as arrays and as
two WAV files, in one process, beside a plain read of the two files
(``soundfile.read`` twice). Target: <= 4 ms per pair either way.

Usage: python benchmarks/bench_measure.py [--minutes 10] [--keep] [--dir DIR]
       [--only sine,steps,noise,short] [--pairs 200] [--baseline DIR] [--rounds 2]

``--baseline DIR``: an older checkout (``git archive <commit> | tar -x -C DIR``) whose
``simwave.measure`` runs beside this one's in the same session (before/after).
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import textwrap

RATE = 48000

MAKE = """
import numpy as np, soundfile as sf
rate, n = {rate}, int({minutes} * 60 * {rate})
kind, path = {kind!r}, {path!r}
block = 1 << 20
rng = np.random.default_rng(7)
with sf.SoundFile(path, "w", rate, 1, subtype="FLOAT") as fh:
    for s in range(0, n, block):
        k = np.arange(s, min(s + block, n))
        t = k / rate
        if kind == "sine":
            y = 0.5 * np.sin(2 * np.pi * 1000.0 * t)
        elif kind == "steps":
            # 1,000 transitions: a square wave of 500 periods through a first-order lag
            period = n / 500
            ph = (k % period) / period
            up = ph < 0.5
            tau = 0.002 * rate
            since = np.where(up, k % period, k % period - period / 2)
            y = np.where(up, 1 - np.exp(-since / tau), np.exp(-since / tau))
        else:
            y = 0.1 * rng.standard_normal(k.size)
        fh.write(y.astype(np.float32))
"""

PRELUDE = """
import json, resource, sys, time
t0 = time.perf_counter()
def done(**extra):
    dt = time.perf_counter() - t0
    ru = resource.getrusage(resource.RUSAGE_SELF)
    peak = ru.ru_maxrss / 1024.0
    print(json.dumps(dict(seconds=dt, cpu_s=ru.ru_utime + ru.ru_stime, peak_mb=peak, **extra)))
"""

BASE_STEP = "one whole-file pass (soundfile.read + sum, baseline)"
STEPS = {
    "import only": "import simwave\ndone()",
    BASE_STEP: """
import numpy as np, soundfile as sf
y, rate = sf.read(P, dtype="float64", always_2d=True)
s = float(np.sum(y))
done(samples=int(y.shape[0]))
""",
    "simwave.measure": """
import simwave
r = simwave.measure(P).to_dict()
ch = r["channels"][0]
done(kind=ch["kind"], transitions=len(ch.get("transitions") or []))
""",
}


SHORT = """
import numpy as np, soundfile as sf, time, simwave
from scipy import signal
from simwave import Waveform
rate, n, d, pairs = 48000, 2400, {d!r}, {pairs}
x = np.zeros(n)
x[600:] = 1.0
y = signal.sosfilt(signal.butter(2, 2000, fs=rate, output="sos"), x)
fx, fy = d + "/short-x.wav", d + "/short-y.wav"
sf.write(fx, x.astype(np.float32), rate, subtype="FLOAT")
sf.write(fy, y.astype(np.float32), rate, subtype="FLOAT")
xw, yw = Waveform(sf.read(fx)[0], rate), Waveform(sf.read(fy)[0], rate)
steps = {{
    "plain read of the two files (soundfile.read x 2)": lambda: (sf.read(fx), sf.read(fy)),
    "simwave.measure, arrays": lambda: simwave.measure(yw, reference=xw),
    "simwave.measure, file paths": lambda: simwave.measure(fy, reference=fx),
}}
out = {{}}
for name, f in steps.items():
    f()
for rnd in range(3):  # interleaved rounds: the machine's load falls on every step alike
    for name, f in steps.items():
        t, c = time.perf_counter(), time.process_time()
        for _ in range(pairs):
            f()
        out.setdefault(name, []).append((time.perf_counter() - t) / pairs)
        out.setdefault("cpu " + name, []).append((time.process_time() - c) / pairs)
print(__import__("json").dumps({{k: min(v) for k, v in out.items()}}))
"""


HERE = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def _env(pythonpath: str | None) -> dict:
    """This checkout (or the baseline's) first on the path; the steps run in the data folder,
    so the current directory cannot put another checkout first."""
    from common import byte_compiled  # bytecode caches as an installed package has them

    byte_compiled(os.path.abspath(pythonpath or HERE))
    return dict(os.environ, PYTHONPATH=os.path.abspath(pythonpath or HERE))


def _short_once(d: str, pairs: int, pythonpath: str | None) -> dict:
    res = subprocess.run(
        [sys.executable, "-c", SHORT.format(d=d, pairs=pairs)],
        capture_output=True,
        text=True,
        env=_env(pythonpath),
        cwd=d,
    )
    if res.returncode != 0:
        return {"error": (res.stderr.strip().splitlines() or ["?"])[-1]}
    return json.loads(res.stdout.strip().splitlines()[-1])


def _short(d: str, pairs: int, baseline: str | None, rounds: int) -> None:
    """This checkout and the baseline's in alternate processes, the fastest of each step
    over the rounds kept."""
    runs = {"this checkout": None}
    if baseline is not None:
        runs["baseline checkout"] = baseline
    best: dict = {}
    for _ in range(rounds):
        for who, pp in runs.items():
            r = _short_once(d, pairs, pp)
            if "error" in r:
                print(f"short pairs ({who}) failed: {r['error']}")
                return
            for k, v in r.items():
                best.setdefault(who, {})[k] = min(v, best.get(who, {}).get(k, v))
    print(f"\nshort pair: 2,400 samples at {RATE} Hz, one step, output against input "
          f"(fastest of {3 * rounds} rounds, checkouts in alternate processes)")
    for who, r in best.items():
        base = r["plain read of the two files (soundfile.read x 2)"]
        for name, sec in r.items():
            if name.startswith("cpu "):
                continue
            cpu = r.get("cpu " + name, float("nan"))
            print(f"  {who:17s} {name:50s} {1e3 * sec:7.2f} ms (CPU {1e3 * cpu:6.2f} ms)  "
                  f"({sec / base:.1f}x the read)")
    mine = best["this checkout"]
    worst = max(mine["simwave.measure, arrays"], mine["simwave.measure, file paths"])
    print(f"  target <= 4 ms per pair: {'met' if worst <= 0.004 else 'NOT met'}")
    if baseline is not None:
        old = best["baseline checkout"]
        for k in ("simwave.measure, arrays", "simwave.measure, file paths"):
            print(f"  {k}: this checkout / baseline {mine[k] / old[k]:.2f}x")


def _best(a: dict, b: dict) -> dict:
    """The faster of two runs of one step (a failed run loses)."""
    if "error" in a:
        return b
    if "error" in b:
        return a
    return a if a["seconds"] <= b["seconds"] else b


def _run(code: str, path: str, pythonpath: str | None = None) -> dict:
    prog = PRELUDE + f"P = {path!r}\n" + textwrap.dedent(code)
    res = subprocess.run(
        [sys.executable, "-c", prog],
        capture_output=True,
        text=True,
        env=_env(pythonpath),
        cwd=os.path.dirname(os.path.abspath(path)) if path else None,
    )
    if res.returncode != 0:
        return {"error": (res.stderr.strip().splitlines() or ["?"])[-1]}
    return json.loads(res.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=10.0)
    ap.add_argument("--keep", action="store_true")
    ap.add_argument("--dir", default=None)
    ap.add_argument("--only", default="sine,steps,noise,short")
    ap.add_argument("--pairs", type=int, default=200)
    ap.add_argument("--baseline", default=None)
    ap.add_argument("--rounds", type=int, default=2)
    a = ap.parse_args()
    d = a.dir or tempfile.mkdtemp(prefix="simwave-bench-measure-")
    os.makedirs(d, exist_ok=True)
    print("load average (1, 5, 15 min) at start: %.2f %.2f %.2f" % os.getloadavg())
    try:
        imp = _run(STEPS["import only"], "")
        print(f"import simwave alone: {imp.get('seconds', 0):.3f} s, "
              f"{imp.get('peak_mb', 0):.0f} MB")
        for kind in a.only.split(","):
            if kind == "short":
                _short(d, a.pairs, a.baseline, a.rounds)
                continue
            path = os.path.join(d, f"{kind}-{a.minutes:g}min.wav")
            if not os.path.exists(path):
                code = MAKE.format(rate=RATE, minutes=a.minutes, kind=kind, path=path)
                subprocess.run([sys.executable, "-c", code], check=True)
            # interleaved rounds, the fastest of each step kept: the machine's load (shared,
            # other sessions' test suites) falls on every step alike
            base = meas = old = {"error": "not run"}
            for _ in range(a.rounds):
                base = _best(base, _run(STEPS[BASE_STEP], path))
                meas = _best(meas, _run(STEPS["simwave.measure"], path))
                if a.baseline is not None:
                    old = _best(old, _run(STEPS["simwave.measure"], path, a.baseline))
            rows = [("baseline: one whole-file pass", base), ("simwave.measure", meas)]
            if a.baseline is not None:
                rows.append(("simwave.measure, --baseline", old))
            size = os.path.getsize(path) / 1e6
            print(f"\n{kind}: {a.minutes:g} min at {RATE} Hz ({size:.0f} MB)")
            for name, r in rows:
                if "error" in r:
                    print(f"  {name:32s} failed: {r['error']}")
                    continue
                extra = {k: v for k, v in r.items() if k not in ("seconds", "cpu_s", "peak_mb")}
                print(f"  {name:32s} {r['seconds']:7.2f} s (CPU {r['cpu_s']:5.2f} s)  "
                      f"{r['peak_mb']:6.0f} MB  {extra or ''}")
            if "error" not in base and "error" not in meas:
                met = meas["seconds"] <= 3 and meas["peak_mb"] <= 200
                print(
                    f"  ratio measure / baseline: time {meas['seconds'] / base['seconds']:.2f}x, "
                    f"CPU {meas['cpu_s'] / base['cpu_s']:.2f}x, "
                    f"peak memory {meas['peak_mb'] / base['peak_mb']:.2f}x; target <= 3 s and "
                    f"<= 200 MB: {'met' if met else 'NOT met'}"
                )
                if a.baseline is not None and "error" not in old:
                    print(
                        f"  this checkout / baseline checkout: time "
                        f"{meas['seconds'] / old['seconds']:.2f}x, CPU "
                        f"{meas['cpu_s'] / old['cpu_s']:.2f}x, peak memory "
                        f"{meas['peak_mb'] / old['peak_mb']:.2f}x"
                    )
        print("\nload average (1, 5, 15 min) at end: %.2f %.2f %.2f" % os.getloadavg())
    finally:
        if not a.keep and a.dir is None:
            shutil.rmtree(d, ignore_errors=True)


if __name__ == "__main__":
    main()
