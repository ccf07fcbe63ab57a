"""Make tests/data/speed_reference.json: SHA-256 digests of the float64 bytes of outputs
of an earlier simwave, for the test that the speed work changed no number
(tests/test_same_numbers.py), with the numpy and scipy versions they were made with.

Run with the simwave to compare against first on the path, e.g. from a checkout of
the commit before the speed work (f4457b3):

    PYTHONPATH=/path/to/old/checkout python tests/data/make_speed_reference.py OUT.json

Regenerate it (and say so in the commit) when a change is meant to alter outputs.
"""

import hashlib
import json
import os
import sys
import tempfile
import warnings

import numpy as np

import simwave

#: (system, method, initial) cases; the inputs are made below from fixed seeds.
CASES = [
    ("(2*pi*1k)^2/(s^2+1.414*2*pi*1k*s+(2*pi*1k)^2)", "ramp-invariant", "rest"),
    ("(2*pi*1k)^2/(s^2+1.414*2*pi*1k*s+(2*pi*1k)^2)", "bilinear", "settled"),
    ("(2*pi*200)^4/((s^2+0.7654*2*pi*200*s+(2*pi*200)^2)*(s^2+1.8478*2*pi*200*s+(2*pi*200)^2))",
     "step-invariant", "rest"),
    ("(s+100)/(s^2+2*s+10000)", "impulse-invariant", "rest"),
    ("1/(1m*s+1)", "matched-z", "settled"),
]


def inputs() -> dict[str, np.ndarray]:
    rng = np.random.default_rng(1234)
    step = np.zeros((3000, 1))
    step[500:] = 1.0
    return {"step": step, "noise8": rng.standard_normal((5000, 8)) * 0.2 + 0.1}


def outputs() -> dict[str, np.ndarray]:
    out = {}
    warnings.simplefilter("ignore")
    with tempfile.TemporaryDirectory() as tmp:
        for name, x in inputs().items():
            for i, (text, method, initial) in enumerate(CASES):
                wave = simwave.Waveform(x, 48000.0)
                y = simwave.simulate(text, wave, method=method, initial=initial).data
                out[f"{name}/{i}/memory"] = y
                src = os.path.join(tmp, f"{name}.wav")
                simwave.write(src, wave, subtype="DOUBLE")
                for ext in ("wav", "csv", "h5"):
                    dst = os.path.join(tmp, f"o{i}.{ext}")
                    simwave.simulate(text, src, method=method, initial=initial, output=dst,
                                     block_size=1000)
                    out[f"{name}/{i}/file-{ext}"] = simwave.read(dst).data
                    os.remove(dst)
    return out


def digests() -> dict[str, str]:
    return {k: hashlib.sha256(np.ascontiguousarray(v, dtype=np.float64).tobytes()).hexdigest()
            for k, v in outputs().items()}


def versions() -> dict[str, str]:
    import scipy

    return {"numpy": np.__version__, "scipy": scipy.__version__}


if __name__ == "__main__":
    with open(sys.argv[1], "w", encoding="utf-8") as fh:
        json.dump({"made_with": versions(), "digests": digests()}, fh, indent=1, sort_keys=True)
        fh.write("\n")
