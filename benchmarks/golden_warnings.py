"""Golden comparison of the warnings an in-memory ``simulate`` run raises, between trees.

Run:  PYTHONPATH=<tree> python benchmarks/golden_warnings.py OUT.json
      python benchmarks/golden_warnings.py --compare A.json B.json

Every warning text (a poor model's, with its suggested rates and remedies; the model's
own; numpy's) of 2,760 in-memory runs: 46 invented systems (Butterworth orders 1-11 at
three corners, Chebyshev, Bessel, elliptic, high-pass, band-pass, lead, right-half-plane
zero, integrators, an unstable pole, narrow resonances, a notch on the grid, very fast
and very slow poles) x rates 1 kHz - 1 MHz x the five methods x oversampling 1 and 3,
each a new system (the prepared-model cache cleared). About a third are poor models.
Used to check that the shorter rate search behind a poor model's warning
(``accuracy.rate_advice``) words every warning as the full report did.
"""

from __future__ import annotations

import json
import sys
import warnings

import numpy as np
import scipy.signal as sig

RATES = (1000.0, 8000.0, 44100.0, 48000.0, 96000.0, 1e6)
METHODS = ("ramp-invariant", "step-invariant", "impulse-invariant", "bilinear", "matched-z")


def systems() -> list[tuple[str, tuple]]:
    out = []
    for n in (1, 2, 3, 4, 6, 8, 11):
        for fc in (50.0, 1000.0, 5000.0):
            out.append((f"butter{n}@{fc}", sig.butter(n, 2 * np.pi * fc, analog=True,
                                                      output="zpk")))
    for n in (2, 4, 6):
        out.append((f"cheby1_{n}", sig.cheby1(n, 1, 2 * np.pi * 800, analog=True, output="zpk")))
        out.append((f"bessel_{n}", sig.bessel(n, 2 * np.pi * 300, analog=True, output="zpk",
                                              norm="mag")))
        out.append((f"ellip_{n}", sig.ellip(n, 1, 40, 2 * np.pi * 2000, analog=True,
                                            output="zpk")))
        out.append((f"hp_{n}", sig.butter(n, 2 * np.pi * 100, btype="high", analog=True,
                                          output="zpk")))
    out.append(("bp4", sig.butter(2, [2 * np.pi * 100, 2 * np.pi * 1000], btype="band",
                                  analog=True, output="zpk")))
    out.append(("lead", ([-10.0], [-100.0], 10.0)))
    out.append(("rhpz", ([2 * np.pi * 20], [-2 * np.pi * 5, -2 * np.pi * 50], -1.0)))
    out.append(("integ", ([], [0.0, -100.0], 100.0)))
    out.append(("dinteg", ([], [0.0, 0.0], 1.0)))
    out.append(("unstable", ([], [50.0, -300.0], 1e4)))
    w = 2 * np.pi * 1000
    out.append(("resQ50", ([], [-w / 100 + 1j * w, -w / 100 - 1j * w], w * w)))
    w = 2 * np.pi * 15000
    out.append(("resQ500@15k", ([], [-w / 1000 + 1j * w, -w / 1000 - 1j * w], w * w)))
    out.append(("double", ([], [-300.0, -300.0, -50.0], 300.0 ** 2 * 50)))
    out.append(("biproper", ([-2000.0], [-500.0], 1.0)))
    w = 2 * np.pi * 60
    out.append(("notch", ([1j * w, -1j * w], [-w / 10 + 1j * w, -w / 10 - 1j * w], 1.0)))
    out.append(("fast", ([], [-2 * np.pi * 3e5, -2 * np.pi * 4e5], (2 * np.pi) ** 2 * 1.2e11)))
    out.append(("slow", ([], [-0.01], 0.01)))
    return out


def collect(path: str) -> None:
    import simwave
    import simwave.run as run_module
    from simwave import System, Waveform

    x = 0.01 * np.random.default_rng(2).standard_normal(300)
    out = {}
    for name, (z, p, k) in systems():
        system = System.from_zpk(z, p, k)
        for rate in RATES:
            for method in METHODS:
                for factor in (1, 3):
                    key = f"{name}/{rate:g}/{method}/{factor}"
                    run_module._PREPARED.clear()
                    with warnings.catch_warnings(record=True) as caught:
                        warnings.simplefilter("always")
                        try:
                            simwave.simulate(system, Waveform(x, rate), method=method,
                                             oversample=factor)
                        except Exception as e:  # recorded: the same failure must recur
                            out[key] = ["error", type(e).__name__, str(e)]
                            continue
                    out[key] = [str(w.message) for w in caught]
    with open(path, "w") as f:
        json.dump(out, f, indent=0, sort_keys=True)
    poor = sum(any("largest steady output" in t for t in v) for v in out.values()
               if v[:1] != ["error"])
    print(f"{len(out)} runs, {poor} with a poor model's warning")


def compare(a_path: str, b_path: str) -> int:
    with open(a_path) as f:
        a = json.load(f)
    with open(b_path) as f:
        b = json.load(f)
    differ = [k for k in sorted(set(a) | set(b)) if a.get(k) != b.get(k)]
    print(f"{len(a) - len(differ)} of {len(a)} identical")
    for k in differ[:20]:
        print("  differs:", k)
    return 1 if differ else 0


if __name__ == "__main__":
    if len(sys.argv) == 4 and sys.argv[1] == "--compare":
        sys.exit(compare(sys.argv[2], sys.argv[3]))
    if len(sys.argv) != 2:
        sys.exit(__doc__)
    collect(sys.argv[1])
