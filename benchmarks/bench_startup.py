"""Start-up time of the command line and of ``import simwave``, side by side.

Run:  python benchmarks/bench_startup.py [--rounds 7] [--baseline DIR]

Each contender is a whole fresh process, run in turn once per round (medians
shown). Targets: ``simwave --help`` and ``simwave CMD --help`` <= 0.5 s; ``import
simwave`` no slower than ``import numpy, scipy.signal``. With ``--baseline DIR``
the same commands also run on an older checkout, for before/after ratios.
"""

from __future__ import annotations

import argparse

from common import interleaved, median, python, time_process, tree_env

COMMANDS = ["", "run", "batch", "measure", "inspect", "gen", "info", "demo"]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=7)
    ap.add_argument("--baseline", metavar="DIR", default=None)
    args = ap.parse_args()
    trees = {"now": None} | ({"before": args.baseline} if args.baseline else {})
    py = python()

    def proc(code_or_module: list[str], tree: str | None):
        env = tree_env(tree)
        return lambda: time_process([py, *code_or_module], env)

    contenders = {
        "python -c pass": proc(["-c", "pass"], None),
        "import numpy, scipy.signal": proc(["-c", "import numpy, scipy.signal"], None),
        "import click, numpy": proc(["-c", "import click, numpy"], None),
    }
    for label, tree in trees.items():
        contenders[f"import simwave [{label}]"] = proc(["-c", "import simwave"], tree)
        for cmd in COMMANDS:
            argv = ["-m", "simwave"] + ([cmd] if cmd else []) + ["--help"]
            contenders[f"simwave {cmd + ' ' if cmd else ''}--help [{label}]"] = proc(argv, tree)
    times = {k: median(v) for k, v in interleaved(contenders, args.rounds).items()}

    ref = times["import numpy, scipy.signal"]
    print(f"start-up, medians of {args.rounds} fresh processes each, interleaved")
    for name in ("python -c pass", "import numpy, scipy.signal", "import click, numpy"):
        print(f"  {name:<34} {times[name]:6.3f} s")
    for label in trees:
        t = times[f"import simwave [{label}]"]
        print(f"  {'import simwave [' + label + ']':<34} {t:6.3f} s   "
              f"/ import numpy, scipy.signal = {t / ref:.2f}x (target <= 1.0x)")
    worst = 0.0
    for cmd in COMMANDS:
        name = f"simwave {cmd + ' ' if cmd else ''}--help"
        now = times[f"{name} [now]"]
        worst = max(worst, now)
        line = f"  {name:<34} {now:6.3f} s"
        if args.baseline:
            before = times[f"{name} [before]"]
            line += f"   before {before:6.3f} s   before/now = {before / now:5.1f}x"
        print(line + ("   (target <= 0.5 s)" if now <= 0.5 else "   (target <= 0.5 s: MISSED)"))
    print(f"  slowest help screen {worst:.3f} s (target <= 0.5 s)")


if __name__ == "__main__":
    main()
