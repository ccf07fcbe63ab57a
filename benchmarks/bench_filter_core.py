"""simwave's filtering core against scipy.signal.sosfilt on the same sections.

Target (issue 5): DiscreteSystem.process() takes at most 1.15x the time of a
bare scipy.signal.sosfilt call on the same second-order sections and data,
10 M samples, for 1 and 8 channels. Both are timed side by side in one
process, interleaved (A, B, A, B, ...), and the minimum of the repeats is
compared, so machine load affects both alike.

Run: python benchmarks/bench_filter_core.py [--samples N] [--repeats R]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import scipy.signal as sig

from simwave import System
from simwave.discrete import discretize


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=10_000_000)
    ap.add_argument("--repeats", type=int, default=5)
    args = ap.parse_args()

    # A 4th-order Butterworth low-pass at 1 kHz (invented test system), ramp-invariant at 48 kHz.
    z, p, k = sig.butter(4, 2 * np.pi * 1000.0, analog=True, output="zpk")
    model = discretize(System.from_zpk(z, p, k), 48_000.0, "ramp-invariant")
    sos = model.sos
    rng = np.random.default_rng(1)
    print(
        f"sections: {model.n_sections}, samples: {args.samples:,}, "
        f"repeats: {args.repeats} (min taken)"
    )
    print(f"{'channels':>8} {'sosfilt s':>10} {'process s':>10} {'ratio':>6}  target <= 1.15")
    for nch in (1, 8):
        x = rng.standard_normal((args.samples, nch))
        t_ref, t_sw = [], []
        for _ in range(args.repeats):
            # The same start for both: the exact at-rest state for this first sample.
            state = model.initial_state(x[0], "rest")
            zi0 = state.zi.copy()
            t0 = time.perf_counter()
            y_ref, _ = sig.sosfilt(sos, x, axis=0, zi=zi0)
            t_ref.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            y_sw, _ = model.process(x, state)
            t_sw.append(time.perf_counter() - t0)
            if not np.array_equal(y_ref, y_sw):
                raise SystemExit("outputs differ: the comparison would be meaningless")
            del y_ref, y_sw
        a, b = min(t_ref), min(t_sw)
        print(f"{nch:>8} {a:>10.4f} {b:>10.4f} {b / a:>6.3f}")


if __name__ == "__main__":
    main()
