"""Helpers for the fault and fuzz tests: run the CLI as a real process and judge the outcome.

A run is *clean* when it exits 0, 1 or 2 (or 128 + the signal number when it was
stopped by one), printed no Python traceback, printed valid JSON when asked for
JSON, and left no file behind except complete outputs (no temporary file of the
tool's pattern, nothing under an output name after a failure).
"""

from __future__ import annotations

import json
import os
import resource
import signal
import subprocess
import sys
import time

import simwave
from simwave.signals.atomic import TEMP_NAME

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(simwave.__file__)))
#: Exit codes a command may end with: ok, some failed (batch), bad input.
ALLOWED_EXITS = {0, 1, 2}


def env() -> dict[str, str]:
    """This checkout first on the import path; no colour, no terminal niceties."""
    e = dict(os.environ)
    e["PYTHONPATH"] = ROOT + (os.pathsep + e["PYTHONPATH"] if e.get("PYTHONPATH") else "")
    e["PYTHONWARNINGS"] = "default"
    return e


def command(*args: str) -> list[str]:
    return [sys.executable, "-m", "simwave", *map(str, args)]


def run_cli(*args: str, cwd: str, timeout: float = 120.0, fsize_limit: int | None = None,
            stdin: str | None = None) -> subprocess.CompletedProcess:
    """Run ``simwave ARGS`` in ``cwd``; ``fsize_limit`` bytes sets RLIMIT_FSIZE (full disk)."""

    def limit() -> None:
        if fsize_limit is not None:
            resource.setrlimit(resource.RLIMIT_FSIZE, (fsize_limit, fsize_limit))

    return subprocess.run(command(*args), cwd=cwd, env=env(), capture_output=True, text=True,
                          timeout=timeout, preexec_fn=limit, input=stdin)


def has_traceback(text: str) -> bool:
    return "Traceback (most recent call last)" in text or "Fatal Python error" in text


def temporaries(folder: str) -> list[str]:
    """Files of the tool's own temporary pattern anywhere under ``folder``."""
    found = []
    for d, _, names in os.walk(folder):
        found += [os.path.join(d, n) for n in names if TEMP_NAME.match(n)]
    return found


def problems(proc: subprocess.CompletedProcess, folder: str, *, outputs: tuple[str, ...] = (),
             expect_json: bool = False, allowed: set[int] = ALLOWED_EXITS) -> list[str]:
    """Everything wrong with one finished command (empty list: clean)."""
    bad = []
    if proc.returncode not in allowed:
        bad.append(f"exit code {proc.returncode}")
    if has_traceback(proc.stderr) or has_traceback(proc.stdout):
        bad.append("traceback: " + proc.stderr.strip().splitlines()[-1][:200])
    if proc.returncode == 2:
        lines = [ln for ln in proc.stderr.splitlines() if ln.startswith("Error:")]
        if len(lines) != 1:
            bad.append(f"exit 2 with {len(lines)} 'Error:' lines")
    if expect_json and proc.returncode == 0:
        try:
            json.loads(proc.stdout, parse_constant=_refuse_constant)
        except ValueError as exc:
            bad.append(f"invalid JSON on stdout ({exc})")
    left = temporaries(folder)
    if left:
        bad.append(f"temporary files left: {[os.path.basename(p) for p in left]}")
    if proc.returncode not in (0, 1):
        for out in outputs:
            if os.path.exists(os.path.join(folder, out)):
                bad.append(f"{out} exists after a failed run")
    return bad


def _refuse_constant(name: str):
    raise ValueError(f"{name} is not JSON")


# ------------------------------------------------------------------- processes and signals
def descendants(pid: int) -> set[int]:
    """All live descendants of ``pid`` (from /proc/PID/task/*/children or a /proc scan)."""
    parents: dict[int, int] = {}
    for name in os.listdir("/proc"):
        if name.isdigit():
            try:
                with open(f"/proc/{name}/stat") as fh:
                    fields = fh.read().rsplit(")", 1)[1].split()
                parents[int(name)] = int(fields[1])
            except (OSError, IndexError, ValueError):
                continue
    found, frontier = set(), {pid}
    while frontier:
        kids = {p for p, pp in parents.items() if pp in frontier and p not in found}
        found |= kids
        frontier = kids
    return found


def alive(pids: set[int]) -> set[int]:
    """Those of ``pids`` still running (zombies count as ended)."""
    live = set()
    for p in pids:
        try:
            with open(f"/proc/{p}/stat") as fh:
                state = fh.read().rsplit(")", 1)[1].split()[0]
        except OSError:
            continue
        if state != "Z":
            live.add(p)
    return live


def start_cli(*args: str, cwd: str) -> subprocess.Popen:
    """Start ``simwave ARGS`` with its pipes read by the caller; SIGINT not ignored."""
    return subprocess.Popen(command(*args), cwd=cwd, env=env(), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))


def wait_for(predicate, timeout: float, step: float = 0.05) -> bool:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(step)
    return predicate()
