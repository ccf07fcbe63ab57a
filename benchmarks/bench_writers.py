"""Writers side by side: CSV, HDF5 and WAV, this tree against a plain library call
(and against an older checkout with ``--baseline DIR``).

Run:  python benchmarks/bench_writers.py [--rows 1000000] [--rounds 3] [--baseline DIR]

Every contender runs in its own fresh process (so two simwave versions never share
one), in turn once per round; the best round is kept (shared, noisy machine).

1. CSV: rows/s of ``open_writer`` (time column + 2 channels, 64k-row blocks);
   target >= 5x the baseline's; the file read back with ``simwave.read`` and with
   Python's ``float()`` must give the same float64 bits.
2. HDF5: default settings vs plain h5py (uncompressed, same chunks), and the time
   to filter the same data with scipy.signal.sosfilt: a default write that takes
   less than the filtering does not make a run write-bound. gzip and lzf
   (explicit ``compression=``) are shown with their time and file size.
3. WAV (32-bit float): ``open_writer`` vs ``soundfile.write`` of the same array.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile

from common import NEUTRAL_DIR, python, tree_env

CHILD = r"""
import json, os, sys, time
import numpy as np
import simwave
kind, path, rows = sys.argv[1], sys.argv[2], int(sys.argv[3])
opts = json.loads(sys.argv[4])
check = opts.pop("check", False)
rng = np.random.default_rng(7)
x = rng.standard_normal((rows, 2)) * 0.1
block = 1 << 16
out = {}
if kind == "plain-h5":
    import h5py
    with h5py.File(path, "w") as f:
        f.create_dataset("/w", data=x[:16])
    t0 = time.perf_counter()
    with h5py.File(path, "w") as f:
        ds = f.create_dataset("/waveform", shape=(0, 2), maxshape=(None, 2), dtype="f8",
                              chunks=(65536, 2))
        for s in range(0, rows, block):
            b = x[s:s + block]
            n0 = ds.shape[0]
            ds.resize(n0 + b.shape[0], axis=0)
            ds[n0:] = b
    out["seconds"] = time.perf_counter() - t0
elif kind == "plain-wav":
    import soundfile
    soundfile.write(path, x[:16], 48000, subtype="FLOAT")
    t0 = time.perf_counter()
    soundfile.write(path, x, 48000, subtype="FLOAT")
    out["seconds"] = time.perf_counter() - t0
elif kind == "sosfilt":
    import scipy.signal
    sos = scipy.signal.butter(4, 0.1, output="sos")
    scipy.signal.sosfilt(sos, x[:16], axis=0)
    t0 = time.perf_counter()
    scipy.signal.sosfilt(sos, x, axis=0)
    out["seconds"] = time.perf_counter() - t0
else:
    # warm-up: the modules a write needs are imported on first use
    with simwave.open_writer(path, 48000.0, ["a", "b"], **opts) as w:
        w.write(x[:16])
    t0 = time.perf_counter()
    with simwave.open_writer(path, 48000.0, ["a", "b"], **opts) as w:
        for s in range(0, rows, block):
            w.write(x[s:s + block])
    out["seconds"] = time.perf_counter() - t0
    if kind == "csv" and check:
        back = simwave.read(path).data
        same = back.shape == x.shape and bool(np.array_equal(back.view(np.int64), x.view(np.int64)))
        with open(path) as fh:
            lines = [ln for ln in fh if not ln.startswith("#")][1:]
        parsed = np.array([[float(v) for v in ln.split(",")[1:]] for ln in lines])
        same = same and bool(np.array_equal(parsed.view(np.int64), x.view(np.int64)))
        out["bit_exact"] = same
out["bytes"] = os.path.getsize(path) if os.path.exists(path) else 0
print(json.dumps(out))
"""


def child(tree: str | None, kind: str, path: str, rows: int, **opts) -> dict:
    done = subprocess.run([python(), "-c", CHILD, kind, path, str(rows), json.dumps(opts)],
                          env=tree_env(tree), cwd=NEUTRAL_DIR, capture_output=True, text=True)
    if done.returncode:
        raise SystemExit(f"{kind} ({tree or 'this tree'}) failed:\n{done.stderr}")
    if os.path.exists(path):
        os.remove(path)
    return json.loads(done.stdout.strip().splitlines()[-1])


def best(runs: list[dict]) -> dict:
    return min(runs, key=lambda r: r["seconds"])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--h5-rows", type=int, default=10_000_000)
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--baseline", metavar="DIR", default=None)
    args = ap.parse_args()
    tmp = tempfile.mkdtemp(prefix="simwave-writers-")
    trees = {"now": None} | ({"before": args.baseline} if args.baseline else {})
    n, m = args.rows, args.h5_rows
    plans = {}
    for label, tree in trees.items():
        plans[f"csv {label}"] = (tree, "csv", "o.csv", n, {"check": label == "now"})
        plans[f"h5 default {label}"] = (tree, "h5", "o.h5", m, {})
    plans["h5 gzip now"] = (None, "h5", "o.h5", m, {"compression": "gzip"})
    plans["h5 lzf now"] = (None, "h5", "o.h5", m, {"compression": "lzf"})
    plans["h5 plain h5py"] = (None, "plain-h5", "o.h5", m, {})
    plans["sosfilt"] = (None, "sosfilt", "none", m, {})
    plans["wav now"] = (None, "wav", "o.wav", m, {})
    plans["wav soundfile.write"] = (None, "plain-wav", "o.wav", m, {})
    results: dict[str, list[dict]] = {k: [] for k in plans}
    for _ in range(args.rounds):
        for key, (tree, kind, name, rows, opts) in plans.items():
            path = os.path.join(tmp, name)
            results[key].append(child(tree, kind, path, rows, **opts))
    r = {k: best(v) for k, v in results.items()}

    print(f"writers, best of {args.rounds} rounds, fresh process each")
    print(f"1. CSV, {n:,} rows (time + 2 channels)")
    for label in trees:
        res = r[f"csv {label}"]
        print(f"   {label:<7} {res['seconds']:7.2f} s  {n / res['seconds']:12,.0f} rows/s  "
              f"{res['bytes'] / 1e6:7.1f} MB")
    if args.baseline:
        ratio = r["csv before"]["seconds"] / r["csv now"]["seconds"]
        print(f"   rows/s now / before = {ratio:.2f}x (target >= 5x)")
    print(f"   read back bit-exact (simwave.read and float()): {r['csv now']['bit_exact']}")
    filt = r["sosfilt"]["seconds"]
    print(f"2. HDF5, {m:,} rows x 2 channels float64; sosfilt (order 4) on the same data "
          f"{filt:.2f} s")
    rows_h5 = [(f"default {label}", f"h5 default {label}") for label in trees]
    rows_h5 += [("gzip (explicit)", "h5 gzip now"), ("lzf (explicit)", "h5 lzf now"),
                ("plain h5py", "h5 plain h5py")]
    plain = r["h5 plain h5py"]["seconds"]
    for label, key in rows_h5:
        sec = r[key]["seconds"]
        print(f"   {label:<16} {sec:6.2f} s  {r[key]['bytes'] / 1e6:7.1f} MB  "
              f"/ plain h5py {sec / plain:5.2f}x  / sosfilt {sec / filt:5.2f}x")
    print("   (a default write no slower than the filtering (/ sosfilt <= 1x) does not make a "
          "run write-bound)")
    w, p = r["wav now"]["seconds"], r["wav soundfile.write"]["seconds"]
    print(f"3. WAV float, {m:,} rows x 2: simwave {w:.2f} s, soundfile.write {p:.2f} s, "
          f"ratio {w / p:.2f}x (target ~1x: libsndfile speed)")


if __name__ == "__main__":
    sys.exit(main())
