"""Streaming I/O benchmark: a ~1 GB float32 stereo WAV, a ~120 MB CSV and a ~260 MB HDF5 file
written and read in blocks; peak memory and throughput, side by side with plain library loops.

Each step runs in its own Python process, so its peak resident set size (``ru_maxrss`` from
``resource.getrusage``, kilobytes on Linux) is the high-water mark of that step alone. The
first step only imports simwave: its peak is the fixed cost every other step also pays.

Target (issue 4): peak memory under 200 MB while streaming a 1 GB file.

Usage: python benchmarks/bench_streaming_io.py [--wav-gb 1.0] [--keep] [--dir DIR]
Big files go to a temporary directory that is deleted at the end (unless --keep).
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

PRELUDE = """
import json, resource, sys, time
import numpy as np
import simwave
from simwave.signals import generate_blocks
BLOCK = 1 << 16
def done(t0, nbytes, **extra):
    dt = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(json.dumps(dict(seconds=dt, mb=nbytes / 1e6, mb_per_s=nbytes / 1e6 / dt,
                          peak_mb=peak, **extra)))
"""

STEPS = {
    "import only": """
t0 = time.perf_counter(); done(t0, 0)
""",
    "WAV write (simwave.open_writer)": """
t0 = time.perf_counter()
n = 0
with simwave.open_writer(P["wav"], 48000, ["l", "r"]) as out:
    for b in generate_blocks("white-noise", 48000, P["seconds"], BLOCK, amplitude=0.1, seed=1):
        out.write(np.column_stack([b.data[:, 0], -b.data[:, 0]]))
        n += b.n_samples
done(t0, n * 2 * 4, file_mb=__import__("os").path.getsize(P["wav"]) / 1e6)
""",
    "WAV read (simwave.blocks)": """
t0 = time.perf_counter()
n = 0; s = 0.0
for b in simwave.blocks(P["wav"], BLOCK):
    n += b.n_samples; s += float(b.data[:, 0].sum())
done(t0, n * 2 * 4, samples=n)
""",
    "WAV read (soundfile.blocks, baseline)": """
import soundfile as sf
t0 = time.perf_counter()
n = 0; s = 0.0
for b in sf.blocks(P["wav"], BLOCK, dtype="float64", always_2d=True):
    n += b.shape[0]; s += float(b[:, 0].sum())
done(t0, n * 2 * 4, samples=n)
""",
    "WAV round trip (blocks -> open_writer)": """
t0 = time.perf_counter()
n = 0
info = simwave.info(P["wav"])
with simwave.open_writer(P["wav2"], info.rate, info.channels, info.units) as out:
    for b in simwave.blocks(P["wav"], BLOCK):
        out.write(b); n += b.n_samples
done(t0, n * 2 * 4 * 2)
""",
    "CSV write (simwave.open_writer)": """
t0 = time.perf_counter()
n = 0
with simwave.open_writer(P["csv"], 10000, ["a", "b"], ["V", "V"]) as out:
    for b in generate_blocks("white-noise", 10000, P["csv_seconds"], BLOCK, seed=2):
        out.write(np.column_stack([b.data[:, 0], 2 * b.data[:, 0]])); n += b.n_samples
done(t0, __import__("os").path.getsize(P["csv"]), rows=n)
""",
    "CSV read (simwave.blocks)": """
t0 = time.perf_counter()
n = 0
for b in simwave.blocks(P["csv"], BLOCK):
    n += b.n_samples
done(t0, __import__("os").path.getsize(P["csv"]), rows=n)
""",
    "CSV read (numpy.loadtxt per 64k lines, baseline)": """
import itertools
t0 = time.perf_counter()
n = 0
with open(P["csv"]) as fh:
    next(fh); next(fh)
    while True:
        lines = list(itertools.islice(fh, BLOCK))
        if not lines: break
        n += np.loadtxt(lines, delimiter=",", ndmin=2).shape[0]
done(t0, __import__("os").path.getsize(P["csv"]), rows=n)
""",
    "HDF5 write (simwave.open_writer, gzip)": """
t0 = time.perf_counter()
n = 0
with simwave.open_writer(P["h5"], 48000, ["l", "r"]) as out:
    for b in generate_blocks("sine", 48000, P["h5_seconds"], BLOCK, frequency=997):
        out.write(np.column_stack([b.data[:, 0], -b.data[:, 0]])); n += b.n_samples
done(t0, n * 2 * 8, file_mb=__import__("os").path.getsize(P["h5"]) / 1e6)
""",
    "HDF5 read (simwave.blocks)": """
t0 = time.perf_counter()
n = 0
for b in simwave.blocks(P["h5"], BLOCK):
    n += b.n_samples
done(t0, n * 2 * 8, samples=n)
""",
    "HDF5 read (h5py slices, baseline)": """
import h5py
t0 = time.perf_counter()
n = 0
with h5py.File(P["h5"], "r") as f:
    ds = f["/waveform"]
    step = ds.chunks[0]
    for i in range(0, ds.shape[0], step):
        n += np.asarray(ds[i:i + step], dtype=np.float64).shape[0]
done(t0, n * 2 * 8, samples=n)
""",
}


def run_step(code: str, params: dict) -> dict:
    script = PRELUDE + f"P = {params!r}\n" + textwrap.dedent(code)
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                         check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--wav-gb", type=float, default=1.0, help="size of the WAV in GB")
    ap.add_argument("--dir", default=None, help="where to put the big files")
    ap.add_argument("--keep", action="store_true", help="keep the files")
    args = ap.parse_args()
    tmp = tempfile.mkdtemp(prefix="simwave-bench-", dir=args.dir)
    params = {
        "wav": os.path.join(tmp, "big.wav"), "wav2": os.path.join(tmp, "copy.wav"),
        "csv": os.path.join(tmp, "big.csv"), "h5": os.path.join(tmp, "big.h5"),
        "seconds": args.wav_gb * 1e9 / (48000 * 2 * 4),
        "csv_seconds": 200.0,   # 2 M rows, ~120 MB of text
        "h5_seconds": 350.0,    # 16.8 M frames x 2 channels float64 = 269 MB
    }
    results = {}
    try:
        for name, code in STEPS.items():
            r = run_step(code, params)
            results[name] = r
            print(f"{name:<50} {r['mb']:9.1f} MB  {r['seconds']:7.2f} s  "
                  f"{r['mb_per_s']:8.1f} MB/s  peak RSS {r['peak_mb']:6.1f} MB", flush=True)
    finally:
        if not args.keep:
            shutil.rmtree(tmp, ignore_errors=True)
    base = results["import only"]["peak_mb"]
    print()
    print(f"fixed cost (import simwave): {base:.1f} MB")
    worst = max(r["peak_mb"] for r in results.values())
    print(f"largest peak RSS of any step: {worst:.1f} MB (target < 200 MB): "
          f"{'met' if worst < 200 else 'NOT met'}")

    def ratio(a: str, b: str) -> None:
        print(f"throughput {a} / {b}: {results[a]['mb_per_s'] / results[b]['mb_per_s']:.2f}")

    ratio("WAV read (simwave.blocks)", "WAV read (soundfile.blocks, baseline)")
    ratio("CSV read (simwave.blocks)", "CSV read (numpy.loadtxt per 64k lines, baseline)")
    ratio("HDF5 read (simwave.blocks)", "HDF5 read (h5py slices, baseline)")


if __name__ == "__main__":
    main()
