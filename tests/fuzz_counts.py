"""Print the fault campaign's counts table (tried / clean / traceback / wrong / hang / lost).

Runs the odd-file corpus through every command, then seeded random system texts
and CSV files from the same grammar as ``test_fuzz.py``, and tallies the outcomes.
Not part of the test suite (it takes minutes); run it by hand:

    PYTHONPATH=. python tests/fuzz_counts.py [--texts 200] [--csv 100] [--seed 17]
"""

from __future__ import annotations

import argparse
import os
import random
import sys
import tempfile

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from fuzzkit import OUTCOMES, clear_outputs, run_case, tally  # noqa: E402
from make_odd_files import make_corpus  # noqa: E402
from test_fuzz import OUTS, system_cases, waveform_cases  # noqa: E402

NUMBERS = ["0", "1", "2", "0.5", "1e4", "1e-300", "1e300", "5e-324", "1e39", "128710", "1e9",
           "1e160", "-1", "3.7e-12"]


def random_number(rng: random.Random) -> str:
    if rng.random() < 0.7:
        return rng.choice(NUMBERS)
    return repr(10 ** rng.uniform(-320, 308) * rng.choice([-1, 1]))


def random_text(rng: random.Random, depth: int = 0) -> str:
    if rng.random() < 0.15:
        return "".join(rng.choice("s0123456789.+-*/^()e xp") for _ in range(rng.randint(0, 24)))
    if depth > 2 or rng.random() < 0.4:
        a = random_number(rng)
        return rng.choice([a, "s", f"(s+{a})", f"(s-{a})",
                           f"(s^2+{a}*s+{random_number(rng)})", f"exp(-s*{a})"])
    x, y = random_text(rng, depth + 1), random_text(rng, depth + 1)
    return rng.choice([f"{x}*{y}", f"{x}/{y}", f"({x}+{y})", f"({x})^{rng.randint(0, 25)}"])


def random_csv(rng: random.Random) -> str:
    times = ["0", "0.001", "0.002", "0.001", "1e300", "-1", "nan", "0.003", "0.004", ""]
    cells = ["0", "1", "-1", "1e308", "-1e308", "5e-324", "nan", "inf", "", "x", "0.001", "2.5"]
    n = rng.randint(0, 12)
    rows = [f"{rng.choice(times)},{rng.choice(cells)}" for _ in range(n)]
    nl = rng.choice(["\n", "\r\n", "\r"])
    return nl.join(["time,x", *rows]) + nl


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--texts", type=int, default=200)
    ap.add_argument("--csv", type=int, default=100)
    ap.add_argument("--seed", type=int, default=17)
    args = ap.parse_args()
    rng = random.Random(args.seed)
    groups: dict[str, list] = {"odd files": [], "system texts": [], "CSV files": []}
    with tempfile.TemporaryDirectory() as folder:
        names = make_corpus(folder)
        for name in sorted(names):
            cases = system_cases(name) if name.endswith(".toml") else waveform_cases(name)
            for cargs, outputs, as_json in cases:
                groups["odd files"].append(run_case(cargs, folder, outputs=outputs,
                                                    expect_json=as_json, timeout_s=120))
                clear_outputs(folder, OUTS)
    for _ in range(args.texts):
        text = random_text(rng)
        with tempfile.TemporaryDirectory() as folder:
            for cargs, outputs, as_json in system_cases(text):
                groups["system texts"].append(run_case(cargs, folder, outputs=outputs,
                                                       expect_json=as_json, timeout_s=120))
                clear_outputs(folder, OUTS)
    for _ in range(args.csv):
        with tempfile.TemporaryDirectory() as folder:
            with open(os.path.join(folder, "in.csv"), "w", newline="") as fh:
                fh.write(random_csv(rng))
            for cargs, outputs, as_json in waveform_cases("in.csv"):
                groups["CSV files"].append(run_case(cargs, folder, outputs=outputs,
                                                    expect_json=as_json, timeout_s=120))
                clear_outputs(folder, OUTS)
    cols = ["tried", *OUTCOMES]
    print(f"| {'cases':<14} | " + " | ".join(f"{c:>9}" for c in cols) + " |")
    print("|" + "-" * 16 + "|" + "|".join("-" * 11 for _ in cols) + "|")
    everything = []
    for label, outs in groups.items():
        everything += outs
        t = tally(outs)
        print(f"| {label:<14} | " + " | ".join(f"{t[c]:>9}" for c in cols) + " |")
    t = tally(everything)
    print(f"| {'all':<14} | " + " | ".join(f"{t[c]:>9}" for c in cols) + " |")
    for o in everything:
        if o.kind != "clean":
            print(f"{o.kind}: simwave {' '.join(o.args)} -> {o.detail}")


if __name__ == "__main__":
    main()
