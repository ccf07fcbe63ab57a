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

Run: python benchmarks/bench_filter_core.py [--samples N] [--repeats R]
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
import scipy.signal as sig

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


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=10_000_000)
    ap.add_argument("--repeats", type=int, default=5)
    args = ap.parse_args()
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
