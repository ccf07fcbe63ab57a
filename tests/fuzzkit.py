"""In-process fuzzing of the CLI: run one command, classify what happened.

Outcomes (the columns of the fault campaign's counts table):

clean      exit 0, 1 or 2; no traceback; one ``Error:`` line on exit 2; valid JSON
           where JSON was asked for; nothing lost
traceback  an exception other than a user error escaped the command
wrong      exit 0 but the result is not valid (JSON with NaN/Infinity or not JSON, an
           output file holding non-finite samples), or exit 2 without one Error line
hang       the command did not finish within the time allowed (a timer interrupts it)
lost       an input changed, a temporary file was left, or an output name exists after
           a failed command
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
from dataclasses import dataclass, field

import numpy as np
from click.testing import CliRunner

from simwave.cli import main
from simwave.signals.atomic import TEMP_NAME

OUTCOMES = ("clean", "traceback", "wrong", "hang", "lost")


class Hang(Exception):
    """Raised by the interval timer inside a command that ran too long."""


def _alarm(signum, frame):
    raise Hang()


def _digest(path: str) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _files(folder: str) -> dict[str, str]:
    out = {}
    for d, _, names in os.walk(folder):
        for n in names:
            p = os.path.join(d, n)
            if os.path.isfile(p):
                out[os.path.relpath(p, folder)] = _digest(p)
    return out


@dataclass
class Outcome:
    kind: str
    args: list[str]
    exit_code: int | None
    detail: str = ""
    stderr: str = field(default="", repr=False)


def _no_constants(name: str):
    raise ValueError(f"{name} is not JSON")


def _output_not_finite(path: str) -> str | None:
    """A reason when a written waveform holds NaN or infinite samples."""
    import simwave

    try:
        data = simwave.read(path).data
    except Exception as exc:  # noqa: BLE001 - an unreadable output is itself wrong
        return f"{path} cannot be read back ({type(exc).__name__}: {exc})"
    if not np.all(np.isfinite(data)):
        return f"{path} holds non-finite samples"
    return None


def run_case(args: list[str], folder: str, *, outputs: tuple[str, ...] = (),
             expect_json: bool = False, timeout_s: float = 60.0,
             allow_non_finite: bool = False) -> Outcome:
    """Run ``simwave ARGS`` in ``folder`` (in this process) and classify the outcome."""
    before = _files(folder)
    cwd = os.getcwd()
    os.chdir(folder)
    old = signal.signal(signal.SIGALRM, _alarm)
    signal.setitimer(signal.ITIMER_REAL, timeout_s)
    try:
        res = CliRunner().invoke(main, args, catch_exceptions=True)
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)
        os.chdir(cwd)
    code = res.exit_code
    err = res.stderr if hasattr(res, "stderr") else ""
    exc = res.exception
    if isinstance(exc, Hang):
        return Outcome("hang", args, None, f"over {timeout_s:g} s", err)
    if exc is not None and not isinstance(exc, SystemExit):
        return Outcome("traceback", args, code, f"{type(exc).__name__}: {exc}"[:300], err)
    after = _files(folder)
    changed = [p for p, d in before.items() if after.get(p) != d]
    temps = [p for p in after if TEMP_NAME.match(os.path.basename(p))]
    leftover = [o for o in outputs if code not in (0, 1) and o in after and o not in before]
    if changed or temps or leftover:
        return Outcome("lost", args, code, f"changed {changed}, temporaries {temps}, "
                                           f"left after failure {leftover}", err)
    if code not in (0, 1, 2):
        return Outcome("wrong", args, code, f"exit code {code}", err)
    if code == 2 and sum(ln.startswith("Error:") for ln in err.splitlines()) != 1:
        return Outcome("wrong", args, code, "exit 2 without exactly one Error: line", err)
    if code == 0 and expect_json:
        try:
            json.loads(res.stdout, parse_constant=_no_constants)
        except ValueError as e:
            return Outcome("wrong", args, code, f"invalid JSON: {e}", err)
    if code == 0 and not allow_non_finite:
        for o in outputs:
            p = os.path.join(folder, o)
            if o.endswith((".csv", ".h5", ".wav")) and os.path.exists(p):
                reason = _output_not_finite(p)
                if reason:
                    return Outcome("wrong", args, code, reason, err)
            if o.endswith(".json") and os.path.exists(p):
                try:
                    with open(p) as fh:
                        json.load(fh, parse_constant=_no_constants)
                except ValueError as e:
                    return Outcome("wrong", args, code, f"{o}: invalid JSON: {e}", err)
    return Outcome("clean", args, code, "", err)


def tally(outcomes: list[Outcome]) -> dict[str, int]:
    counts = {"tried": len(outcomes)}
    for k in OUTCOMES:
        counts[k] = sum(o.kind == k for o in outcomes)
    return counts


def clear_outputs(folder: str, names: tuple[str, ...]) -> None:
    for n in names:
        p = os.path.join(folder, n)
        if os.path.exists(p):
            os.unlink(p)
