"""The exactness table: max |error| / peak of each hold method against the exact analog response.

For each case the step response of the discrete model (``realization="auto"``,
and the same model forced onto second-order sections for comparison) is
compared with the exact analog step response from partial fractions in
40-digit mpmath (tests/exact_reference.py), at ~1500 sample instants (the
first 200 samples, then log- and linearly spread), over the whole settling.
The double integrator is compared with t^2/2 at every sample. Impulse-invariant
models of high order are compared with T h(nT) (a second table).

Run: python benchmarks/accuracy_table.py [--quick]   (a few minutes; --quick: shorter records)
"""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

import numpy as np
import scipy.signal as sig

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from exact_reference import impulse_response, sample_indices, step_response  # noqa: E402

from simwave import System  # noqa: E402
from simwave.discrete import discretize  # noqa: E402


def butter(n, fc):
    return sig.butter(n, 2 * np.pi * fc, analog=True, output="zpk")


TAUS = np.array([1e-6, 1e-5, 1e-3, 1e-1, 10.0, 1000.0])
CASES = [
    ("Butterworth 4, 1 Hz, 1 MHz (fs/fc 1e6)", butter(4, 1.0), 1e6, 3.0),
    ("Butterworth 8, 0.1 Hz, 48 kHz", butter(8, 0.1), 48e3, 40.0),
    ("Butterworth 4, 0.01 Hz, 48 kHz", butter(4, 0.01), 48e3, 200.0),
    ("Butterworth 8, 0.01 Hz, 48 kHz", butter(8, 0.01), 48e3, 300.0),
    ("time constants 1 us ... 1000 s, 1 MHz", ([], -1 / TAUS, 1 / np.prod(TAUS)), 1e6, 3.0),
    ("Butterworth 4, 1 Hz, 10 MHz (fs/fc 1e7)", butter(4, 1.0), 1e7, 0.6),
    ("Butterworth 20, 10 Hz, 1 MHz", butter(20, 10.0), 1e6, 0.5),
    # hold equivalents of high relative degree: sampling zeros the sections cannot carry
    ("Butterworth 12, 1 kHz, 48 kHz", butter(12, 1000.0), 48e3, 0.014),
    ("Butterworth 14, 1 kHz, 48 kHz", butter(14, 1000.0), 48e3, 0.016),
    ("Butterworth 12, 5 kHz, 48 kHz", butter(12, 5000.0), 48e3, 0.003),
    ("Butterworth 16, 1 kHz, 48 kHz", butter(16, 1000.0), 48e3, 0.018),
    ("Butterworth 20, 5 kHz, 48 kHz (fs/fc 9.6)", butter(20, 5000.0), 48e3, 0.0044),
    ("Butterworth 20, 1 Hz, 10 MHz (fs/fc 1e7, first 0.3 s)", butter(20, 1.0), 1e7, 0.3),
    # lower orders at fs/fc 200 have such zeros too (the coefficient estimate was 2e-12)
    ("Butterworth 6, 5 kHz, 1 MHz (fs/fc 200)", butter(6, 5000.0), 1e6, 0.006),
    ("Butterworth 10, 5 kHz, 1 MHz (fs/fc 200)", butter(10, 5000.0), 1e6, 0.006),
]

#: Impulse-invariant cases: h[n] against T h(nT) (O&S 3rd ed., sec. 7.2.1; h(0+) = 0 here).
IMPULSE_CASES = [
    ("Butterworth 12, 1 kHz, 48 kHz", butter(12, 1000.0), 48e3, 0.014),
    ("Butterworth 14, 1 kHz, 48 kHz", butter(14, 1000.0), 48e3, 0.016),
    ("Butterworth 16, 2 kHz, 48 kHz", butter(16, 2000.0), 48e3, 0.009),
    ("Butterworth 20, 5 kHz, 48 kHz (fs/fc 9.6)", butter(20, 5000.0), 48e3, 0.0044),
    ("Butterworth 20, 10 Hz, 1 MHz", butter(20, 10.0), 1e6, 0.5),
]


def error(model, n, idx, ref):
    y = model.filter(np.ones(n))
    return float(np.max(np.abs(y[idx] - ref)) / np.max(np.abs(ref)))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="a fifth of each record")
    args = ap.parse_args()
    warnings.simplefilter("ignore")
    print("| case | ramp-invariant | step-invariant | sections (forced), ramp / step |")
    print("|---|---|---|---|")
    for name, (z, p, k), rate, dur in CASES:
        n = int(dur * rate / (5 if args.quick else 1))
        idx = sample_indices(n)
        ref = step_response(z, p, k, idx / rate)
        cells, forced = [], []
        for method in ("ramp-invariant", "step-invariant"):
            model = discretize(System.from_zpk(z, p, k), rate, method)
            cells.append(f"{error(model, n, idx, ref):.1e} ({model.realization})")
            sec = discretize(System.from_zpk(z, p, k), rate, method, realization="sections")
            forced.append(f"{error(sec, n, idx, ref):.1e}")
        print(f"| {name} | {cells[0]} | {cells[1]} | {' / '.join(forced)} |", flush=True)
    n = 100_000 if args.quick else 1_000_000
    t = np.arange(n) / 1e3
    ref = t**2 / 2
    cells = []
    for method in ("ramp-invariant", "step-invariant"):
        model = discretize(System.from_zpk([], [0.0, 0.0], 1.0), 1e3, method)
        cells.append(f"{np.max(np.abs(model.filter(np.ones(n)) - ref)) / ref[-1]:.1e} "
                     f"({model.realization})")
    print(f"| 1/s^2 driven by a step, {n:.0e} samples | {cells[0]} | {cells[1]} | |")
    print("\n| impulse-invariant case | auto | sections (forced) |")
    print("|---|---|---|")
    for name, (z, p, k), rate, dur in IMPULSE_CASES:
        n = int(dur * rate / (5 if args.quick else 1))
        idx = sample_indices(n)
        idx = idx[idx > 0]
        ref = impulse_response(z, p, k, idx / rate) / rate
        x = np.zeros(n)
        x[0] = 1.0
        cells = []
        for realization in ("auto", "sections"):
            model = discretize(System.from_zpk(z, p, k), rate, "impulse-invariant",
                               realization=realization)
            y = model.filter(x)
            cells.append(f"{np.max(np.abs(y[idx] - ref)) / np.max(np.abs(ref)):.1e}"
                         + (f" ({model.realization})" if realization == "auto" else ""))
        print(f"| {name} | {cells[0]} | {cells[1]} |", flush=True)


if __name__ == "__main__":
    main()
