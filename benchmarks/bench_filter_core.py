"""simwave's filtering core against scipy.signal.sosfilt on the same model.

Targets: DiscreteSystem.process() takes at most 1.2x the time of a bare
scipy.signal.sosfilt call on the same second-order sections and data for
ordinary models (those ``realization="auto"`` runs as sections), 10 M samples,
for 1 and 8 channels. For models far above their corners, where ``auto`` picks
the incremental (delta-operator) form because sections would lose digits, the
cost of that form is printed against sosfilt on the same model's sections
(fast but inexact there) and its error against the exact analog step response
is printed beside it. Both are timed side by side in one process,
interleaved (A, B, A, B, ...), and the minimum of the repeats is compared, so
machine load affects both alike.

Multichannel (``--only channels``, target: >= 1.4x today at 8 and 64 channels with
bit-identical output): the same 4th-order model on 2, 8, 16 and 64 channels of 32 M values
in all. (a) The filter core: today's ``DiscreteSystem.process`` was one sosfilt call
along axis 0, timed here beside ``process`` now (from 4 channels the frames are
transposed in cache-sized pieces and sosfilt's loop runs on them in place), CPU time of
the whole process (every thread) and wall time, min over interleaved repeats, outputs
compared bit for bit.
(b) simwave's own filtering path: ``simulate`` on the in-memory
waveform, bilinear (the input peak, the sections, the output level meter and finiteness
check),
this tree against ``--baseline DIR`` (an older checkout, e.g. ``git archive 7ab4dd0``),
each in its own child process, interleaved, output digests compared.

Run: python benchmarks/bench_filter_core.py [--samples N] [--repeats R]
     [--only core|channels] [--baseline DIR] [--values V]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import time
import warnings

import numpy as np
import scipy.signal as sig

from common import NEUTRAL_DIR, python, tree_env
from simwave import System
from simwave.discrete import discretize


def timed(model, x, repeats):
    """(min sosfilt seconds, min process seconds, process output of the last run)."""
    t_ref, t_sw = [], []
    y_sw = None
    for _ in range(repeats):
        # The same start for both: at rest (for sections, the exact at-rest state).
        state = model.initial_state(x[0], "rest")
        zi0 = state.zi.copy() if state.zi.size else np.zeros((model.n_sections, 2, x.shape[1]))
        t0 = time.perf_counter()
        y_ref, _ = sig.sosfilt(model.sos, x, axis=0, zi=zi0)
        t_ref.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        y_sw, _ = model.process(x, state)
        t_sw.append(time.perf_counter() - t0)
        if model.realization == "sections" and not np.array_equal(y_ref, y_sw):
            raise SystemExit("outputs differ: the comparison would be meaningless")
        del y_ref
    return min(t_ref), min(t_sw), y_sw


CHANNEL_COUNTS = (2, 4, 8, 16, 64)


def bench_channels_core(values: int, repeats: int) -> None:
    """(a): one sosfilt call along axis 0 (what process() was) against process() now."""
    z, p, k = sig.butter(4, 2 * np.pi * 1000.0, analog=True, output="zpk")
    model = discretize(System.from_zpk(z, p, k), 48_000.0, "ramp-invariant")
    rng = np.random.default_rng(2)
    print(f"(a) filter core, {values:,} values per row, min of {repeats} interleaved repeats; "
          "ratio = one sosfilt call / process now (> 1: faster now); cpu = process CPU time")
    print(f"{'channels':>8} {'frames':>10} {'one call cpu':>12} {'now cpu':>8} {'ratio':>6}"
          f" {'one call wall':>13} {'now wall':>8} {'ratio':>6}  identical")
    for nch in CHANNEL_COUNTS:
        x = rng.standard_normal((values // nch, nch))
        zi = model.initial_state(x[0], "rest").zi.copy()  # the exact at-rest start
        best = {"one": [np.inf, np.inf], "now": [np.inf, np.inf]}
        same = True
        for _ in range(repeats):
            for name in ("one", "now"):
                c0, w0 = time.process_time(), time.perf_counter()
                if name == "one":
                    y, zf = sig.sosfilt(model.sos, x, axis=0, zi=zi)
                else:
                    y, state = model.process(x, model.initial_state(x[0], "rest"))
                    zf = state.zi
                c1, w1 = time.process_time(), time.perf_counter()
                best[name] = [min(best[name][0], c1 - c0), min(best[name][1], w1 - w0)]
                if name == "one":
                    ref = (y, zf)
                else:
                    same = same and np.array_equal(y, ref[0]) and np.array_equal(zf, ref[1])
                del y, zf
        (oc, ow), (nc, nw) = best["one"], best["now"]
        print(f"{nch:>8} {x.shape[0]:>10,} {oc:>12.3f} {nc:>8.3f} {oc / nc:>6.2f}"
              f" {ow:>13.3f} {nw:>8.3f} {ow / nw:>6.2f}  {'yes' if same else 'NO'}")
        del x


SIMULATE_CHILD = r"""
import hashlib, json, sys, time, warnings
import numpy as np, simwave
warnings.simplefilter("ignore")
nch, values, repeats = int(sys.argv[1]), int(sys.argv[2]), int(sys.argv[3])
system = ("(2*pi*1k)^4/((s^2 + 0.7654*2*pi*1k*s + (2*pi*1k)^2)"
          "*(s^2 + 1.8478*2*pi*1k*s + (2*pi*1k)^2))")
w = simwave.Waveform(np.random.default_rng(3).standard_normal((values // nch, nch)), 48000.0)
# bilinear: no first-sample start correction, so the digests compare the filtering alone
# model cached (a Waveform: older trees, e.g. a385a60, take no bare arrays)
simwave.simulate(system, simwave.Waveform(w.data[:1000], 48000.0), method="bilinear")
cpu = wall = float("inf")
for _ in range(repeats):
    c0, w0 = time.process_time(), time.perf_counter()
    y = simwave.simulate(system, w, method="bilinear").data
    cpu, wall = min(cpu, time.process_time() - c0), min(wall, time.perf_counter() - w0)
digest = hashlib.sha256(np.ascontiguousarray(y).tobytes()).hexdigest()
print(json.dumps({"cpu": cpu, "wall": wall, "digest": digest}))
"""


def bench_channels_simulate(values: int, repeats: int, baseline: str | None) -> None:
    """(b): simulate() in memory, this tree against the baseline tree, child processes."""
    trees = {"now": None} | ({"before": baseline} if baseline else {})
    print(f"\n(b) simulate() on an in-memory waveform of {values:,} values, each tree in its "
          f"own child process, {repeats} rounds of 2 calls interleaved (min taken)")
    if not baseline:
        print("    (no --baseline DIR given: this tree only)")
    print(f"{'channels':>8} " + " ".join(f"{t + ' cpu':>10} {t + ' wall':>10}" for t in trees)
          + (f" {'cpu ratio':>9} {'wall ratio':>10}  identical" if baseline else ""))
    for nch in CHANNEL_COUNTS:
        res = {t: {"cpu": np.inf, "wall": np.inf, "digest": set()} for t in trees}
        for _ in range(repeats):
            for label, tree in trees.items():
                done = subprocess.run(
                    [python(), "-c", SIMULATE_CHILD, str(nch), str(values), "2"],
                    env=tree_env(tree), cwd=NEUTRAL_DIR, check=True, capture_output=True,
                    text=True)
                got = json.loads(done.stdout.strip().splitlines()[-1])
                res[label]["cpu"] = min(res[label]["cpu"], got["cpu"])
                res[label]["wall"] = min(res[label]["wall"], got["wall"])
                res[label]["digest"].add(got["digest"])
        line = f"{nch:>8} " + " ".join(f"{res[t]['cpu']:>10.3f} {res[t]['wall']:>10.3f}"
                                       for t in trees)
        if baseline:
            same = res["now"]["digest"] == res["before"]["digest"]
            line += (f" {res['before']['cpu'] / res['now']['cpu']:>9.2f}"
                     f" {res['before']['wall'] / res['now']['wall']:>10.2f}  "
                     f"{'yes' if same else 'NO'}")
        print(line)
    print("ratios are before / now (> 1: faster now); target >= 1.4x at 8 and 64 channels")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=10_000_000)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--only", choices=("core", "channels"), default=None)
    ap.add_argument("--baseline", metavar="DIR", default=None)
    ap.add_argument("--values", type=int, default=32_000_000,
                    help="values (frames x channels) per multichannel case")
    args = ap.parse_args()
    if args.only != "core":
        bench_channels_core(args.values, args.repeats)
        bench_channels_simulate(args.values, args.repeats, args.baseline)
        if args.only == "channels":
            return
        print()
    rng = np.random.default_rng(1)

    # Ordinary: a 4th-order Butterworth low-pass at 1 kHz (invented test system),
    # ramp-invariant at 48 kHz: runs as sections.
    z, p, k = sig.butter(4, 2 * np.pi * 1000.0, analog=True, output="zpk")
    model = discretize(System.from_zpk(z, p, k), 48_000.0, "ramp-invariant")
    print(
        f"ordinary model: {model.realization}, sections: {model.n_sections}, "
        f"samples: {args.samples:,}, repeats: {args.repeats} (min taken)"
    )
    print(f"{'channels':>8} {'sosfilt s':>10} {'process s':>10} {'ratio':>6}  target <= 1.2")
    for nch in (1, 8):
        x = rng.standard_normal((args.samples, nch))
        a, b, _ = timed(model, x, args.repeats)
        print(f"{nch:>8} {a:>10.4f} {b:>10.4f} {b / a:>6.3f}")
        del x

    # Far above the corner: the same filter at 1 Hz sampled at 1 MHz (fs/fc = 1e6), where
    # auto picks the incremental form. Step input, 3 s: the error column is against the
    # exact step response from partial fractions (evaluated in float64 here, good to
    # ~1e-15 for this well-separated pole set; the tests use 40-digit mpmath).
    z, p, k = sig.butter(4, 2 * np.pi * 1.0, analog=True, output="zpk")
    rate = 1e6
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        inc = discretize(System.from_zpk(z, p, k), rate, "step-invariant")
        sec = discretize(System.from_zpk(z, p, k), rate, "step-invariant",
                         realization="sections")
    n = min(args.samples, 3_000_000)
    idx = np.unique(np.concatenate([np.arange(200), np.linspace(0, n - 1, 20_000).astype(int)]))
    t = idx / rate
    r = k * np.array([1 / np.prod(pi - np.delete(p, i)) for i, pi in enumerate(p)])
    exact = 1.0 + np.real(np.exp(np.outer(t, p)) @ (r / p))
    peak = np.max(np.abs(exact))
    print(f"\nfs/fc = 1e6 model: {inc.realization} ({inc.options['realization_reason']})")
    print(f"{'channels':>8} {'sosfilt s':>10} {'process s':>10} {'ratio':>6}  "
          f"{'process err':>11} {'sosfilt err':>11}  (max |error| / peak, step response)")
    for nch in (1, 8):
        x = np.ones((n, nch))
        a, b, y = timed(inc, x, max(1, args.repeats // 2))
        y_sec = sec.filter(x[:, 0])
        e_inc = np.max(np.abs(y[idx, 0] - exact)) / peak
        e_sec = np.max(np.abs(y_sec[idx] - exact)) / peak
        print(f"{nch:>8} {a:>10.4f} {b:>10.4f} {b / a:>6.2f}  {e_inc:>11.1e} {e_sec:>11.1e}")


if __name__ == "__main__":
    main()
