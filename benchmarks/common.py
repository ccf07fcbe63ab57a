"""Helpers shared by the side-by-side benchmarks.

``--baseline DIR`` (every benchmark that takes it): a checkout of an older simwave
(e.g. ``git archive <commit> | tar -x -C DIR``) run in the same session beside this
tree, so that before/after ratios come from one run on one machine state.
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

#: This tree (the parent of benchmarks/).
HERE = str(Path(__file__).resolve().parent.parent)


_COMPILED: set[str] = set()


def byte_compiled(tree: str) -> None:
    """Write the bytecode caches of ``tree``'s simwave package (once per benchmark run).

    An installed package has them (pip compiles at install; an editable install writes
    them at its first import), so a user's second and later runs start from them. Where
    ``PYTHONDONTWRITEBYTECODE`` is set (this machine sets it) every process would
    otherwise compile simwave's sources again, ~0.2 s a process (a batch pays it twice:
    its own process and the pool's server), a cost of this environment, not of the code.
    Every contender's tree is compiled alike.
    """
    if tree in _COMPILED:
        return
    import compileall

    compileall.compile_dir(os.path.join(tree, "simwave"), quiet=2)
    _COMPILED.add(tree)


def tree_env(tree: str | None = None, **extra: str) -> dict[str, str]:
    """Environment whose ``import simwave`` loads the simwave in ``tree`` (default: this one),
    its bytecode compiled (:func:`byte_compiled`)."""
    byte_compiled(tree or HERE)
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([tree or HERE] + extra.pop("_path", []))
    env.update(extra)
    return env


#: An empty folder to run child processes in: ``python -c`` puts its working directory
#: first on sys.path, which must not pick a simwave other than the one asked for.
NEUTRAL_DIR = tempfile.mkdtemp(prefix="simwave-bench-")


def time_process(argv: list[str], env: dict[str, str] | None = None, cwd: str | None = None
                 ) -> float:
    """Wall time of one whole process, seconds (it must exit 0)."""
    cwd = cwd or NEUTRAL_DIR
    t0 = time.perf_counter()
    subprocess.run(argv, env=env, cwd=cwd, check=True, stdout=subprocess.DEVNULL,
                   stderr=subprocess.DEVNULL)
    return time.perf_counter() - t0


def interleaved(contenders: dict[str, object], rounds: int) -> dict[str, list[float]]:
    """Call each contender (a no-argument function returning seconds) once per round, in
    turn, so that a change in the machine's load hits all of them alike."""
    times: dict[str, list[float]] = {name: [] for name in contenders}
    for _ in range(rounds):
        for name, run in contenders.items():
            times[name].append(run())
    return times


def median(values: list[float]) -> float:
    return statistics.median(values)


def python() -> str:
    return sys.executable
