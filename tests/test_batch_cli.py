"""``simwave batch`` on the command line: quick form, exit codes, failure lines, progress line.

The pairs run in the batch process (``-j 1``) on tiny generated records, so these
tests take about a second.
"""

from __future__ import annotations

import io
import json
import math
import os

from click.testing import CliRunner

from simwave.batch.progress import BatchProgress
from simwave.cli import main

STEP = "step:rate=2k,duration=50m,time=5m"
PULSE = "pulse:rate=2k,duration=50m,width=10m,delay=5m"
RC = "2*pi*100/(s + 2*pi*100)"
# Second order, damping 0.3, 50 Hz: a step overshoots exp(-pi*0.3/sqrt(1-0.09)) = 37.23 %
# and peaks pi/(wn*sqrt(1-0.09)) = 10.48 ms after it (Ogata, Modern Control Engineering,
# 5th ed., sec. 5-3, peak overshoot and peak time; section number quoted from memory).
UNDERDAMPED = "(2*pi*50)^2/(s^2 + 2*0.3*2*pi*50*s + (2*pi*50)^2)"
OVERSHOOT_PCT = 100 * math.exp(-math.pi * 0.3 / math.sqrt(1 - 0.3**2))
PEAK_TIME_S = math.pi / (2 * math.pi * 50 * math.sqrt(1 - 0.3**2))


def _invoke(*args: str):
    return CliRunner().invoke(main, ["batch", *args])


def test_quick_form_all_ok(tmp_path):
    out = tmp_path / "out"
    result = _invoke("-s", RC, "-s", UNDERDAMPED, STEP, PULSE, "-o", str(out), "-j", "1")
    assert result.exit_code == 0, result.output
    assert "4 pairs: 4 ok, 0 failed, 0 not run" in result.output
    assert "Per-system comparison" in result.output
    assert "\r" not in result.output  # no progress line when stderr is not a terminal
    names = sorted(os.listdir(out))
    assert "summary.csv" in names and "summary.json" in names
    # Generated signals are written as CSV, named after the signal text.
    assert sum(n.endswith(".csv") and n != "summary.csv" for n in names) == 4
    with open(out / "summary.json") as fh:
        doc = json.load(fh)
    step = next(r for r in doc["rows"]
                if r["input"].startswith("step") and r["system"] == "system2")
    # At 2 kHz the sampled peak can fall up to half a sample from the true one: allow
    # 0.5 percentage point and one sample period.
    assert abs(step["overshoot_pct_worst"] - OVERSHOOT_PCT) < 0.5
    assert abs(step["peak_time_s_first"] - PEAK_TIME_S) < 1 / 2000
    # The 10 ms pulse ends before the underdamped output's first peak (pi / wd = 10.5 ms,
    # Ogata sec. 5-3), still rising past its final level: its high level is not
    # established, so neither edge's overshoot is known (null, the reason in "missing";
    # it used to be read against the last value as if that were a bound), and the
    # comparison's worst case is the step's.
    pulse2 = next(r for r in doc["rows"]
                  if r["input"].startswith("pulse") and r["system"] == "system2")
    assert pulse2["overshoot_pct_worst"] is None
    assert "overshoot_pct_worst: final level not established" in pulse2["missing"]
    worst = doc["comparison"]["system2"]["overshoot_pct_worst"]["value"]
    assert worst == step["overshoot_pct_worst"]
    # First order: a step does not overshoot (Ogata, sec. 5-2); the state levels of a
    # 50 ms record leave a small measured value at most.
    step1 = next(r for r in doc["rows"]
                 if r["input"].startswith("step") and r["system"] == "system1")
    assert step1["overshoot_pct_worst"] < 0.5
    line = next(ln for ln in result.output.splitlines() if ln.startswith("overshoot, worst"))
    assert f"{worst:.4g}" in line


def test_quick_form_failure_exit_1_with_a_line_per_failure(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("time,v\n0,1\n0.0005,oops\n")
    out = tmp_path / "out"
    result = _invoke("-s", RC, "-s", UNDERDAMPED, STEP, str(bad), "-o", str(out), "-j", "1")
    assert result.exit_code == 1, result.output
    fails = [ln for ln in result.output.splitlines() if ln.startswith("failed: ")]
    assert len(fails) == 2 and all("bad.csv x system" in ln and "oops" in ln for ln in fails)
    assert "2 of 4 pairs failed" in result.output
    with open(out / "summary.csv") as fh:
        text = fh.read()
    assert text.count(",failed,") == 2 and text.count(",ok,") == 2


def test_json_output_and_resume(tmp_path):
    out = tmp_path / "out"
    first = _invoke("-s", RC, STEP, "-o", str(out), "-j", "1", "--json")
    assert first.exit_code == 0, first.output
    doc = json.loads(first.output)
    assert doc["counts"] == {"pairs": 1, "ok": 1, "failed": 0, "not_run": 0, "reused": 0,
                             "ran": 1}
    again = json.loads(_invoke("-s", RC, STEP, "-o", str(out), "-j", "1", "--json").output)
    assert again["counts"]["reused"] == 1 and again["counts"]["ran"] == 0
    forced = json.loads(_invoke("-s", RC, STEP, "-o", str(out), "-j", "1", "--json",
                                "--force").output)
    assert forced["counts"]["reused"] == 0 and forced["counts"]["ran"] == 1


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_line_only_on_a_terminal():
    quiet = io.StringIO()
    bar = BatchProgress(10, stream=quiet)
    bar.update(10, 1)
    bar.close()
    assert quiet.getvalue() == ""
    term = _Terminal()
    bar = BatchProgress(10, stream=term)
    bar.update(4, 1)
    bar.log("failed: x.csv x lp: broken")
    # no rate from the first burst of pairs: 4 pairs in a few microseconds is no estimate
    assert "4/10 pairs, 1 failed, estimating time left" in term.getvalue()
    bar.started -= 5.0  # as if 5 s had passed
    bar.update(10, 1)
    bar.close()
    text = term.getvalue()
    assert "\r[##########--------------] 4/10 pairs, 1 failed" in text
    assert "failed: x.csv x lp: broken\n" in text
    assert "10/10 pairs, 1 failed, 2.0 pairs/s" in text
    assert text.endswith("\n")
