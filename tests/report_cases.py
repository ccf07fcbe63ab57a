"""A small batch with every kind of row a report must show (shared by the report tests).

Two candidate systems (an underdamped second-order low-pass that overshoots, and
a first-order low-pass whose 1.5 kHz pole lies above the 1 kHz Nyquist frequency,
so its runs carry warnings) x three inputs (a generated step, a
generated sine and a CSV file that breaks on line 4), with a tolerance band on
the worst overshoot. So the summary holds: a pass (first-order on the step), a
fail (second-order on the step: ζ = 0.3 overshoots by e^{-πζ/√(1-ζ²)} ≈ 37 %,
Ogata, *Modern Control Engineering*, 5th ed., sec. 5-3, far over the 10 % band),
a "not measured" (the sine has no transitions), and two failed runs (the bad
CSV) with their messages. Records are short (0.2 s at 2 kHz) so the batch runs
in a second or two in this process.
"""

from __future__ import annotations

import os

BATCH_TOML = """
[batch]
jobs = 1

[output]
dir = "results"


[limits]
overshoot_pct_worst = { max = 10 }

[systems]
underdamped = "(2*pi*20)^2/(s^2 + 2*0.3*2*pi*20*s + (2*pi*20)^2)"
firstorder = "2*pi*1500/(s + 2*pi*1500)"   # pole above the 1 kHz Nyquist: a warning

[[inputs]]
signal = "step:rate=2k,duration=0.2,time=20m"
name = "step"

[[inputs]]
signal = "sine:rate=2k,duration=0.2,frequency=50,amplitude=0.5"
name = "hum"

[[inputs]]
files = ["broken.csv"]
"""

BROKEN_CSV = "time,x\n0,0\n0.0005,1\n0.0010,not-a-number\n0.0015,1\n"


def make_batch(folder: str):
    """Write the description and the broken input in ``folder``, run the batch, return it."""
    from simwave.batch import load_description, run_batch

    with open(os.path.join(folder, "batch.toml"), "w", encoding="utf-8") as fh:
        fh.write(BATCH_TOML)
    with open(os.path.join(folder, "broken.csv"), "w", encoding="utf-8") as fh:
        fh.write(BROKEN_CSV)
    plan = load_description(os.path.join(folder, "batch.toml"))
    return run_batch(plan, jobs=1)


#: A tolerance study with every kind of build a page must show: corners of an H(s)
#: where a = 0 makes it improper (not realizable) and b < 0 unstable, a limit that some
#: builds fail.
TOLERANCE_TOML = """
[study]
analysis = "corners"
jobs = 1

[system]
expression = "(s^2 + 1)/(a*s^2 + b*s + 1)"
name = "notch"

[system.parameters]
a = "0.5 ±0.5"
b = "0.2 ±0.3"

[limits]
final_value = [0.9, 1.1]

[[inputs]]
signal = "step:rate=1k,duration=2,time=0.1"
name = "step"
"""


def make_tolerance(folder: str):
    """Run :data:`TOLERANCE_TOML` in ``folder`` (in this process); return the study result."""
    from simwave.batch.engines import InlineEngine
    from simwave.tolerance import load_study, run_study

    path = os.path.join(folder, "study.toml")
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(TOLERANCE_TOML)
    return run_study(load_study(path), engine=InlineEngine())
