"""Batch rough edges: --design and names in the quick form, limits only where set, their own
exit code, the input's name in the summary, warning counts, the comparison plot."""

import csv
import json

import pytest
from click.testing import CliRunner

from simwave.batch.plan import split_name
from simwave.batch.runner import EXIT_LIMITS
from simwave.cli import main

STEP = "step:rate=20k,duration=20m,time=2m"
BW4 = "butterworth lowpass order=4 cutoff_hz=2k"


def _batch(*args):
    return CliRunner().invoke(main, ["batch", *map(str, args)])


def _rows(folder):
    with open(folder / "summary.csv", newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def test_split_name_leaves_ode_and_design_text_alone():
    assert split_name("rc=2*pi*100/(s+2*pi*100)") == ("rc", "2*pi*100/(s+2*pi*100)")
    assert split_name("lp.v2 = sys/lp.toml") == ("lp.v2", "sys/lp.toml")
    assert split_name("y'' + 3y' + 2y = 2x") == (None, "y'' + 3y' + 2y = 2x")
    assert split_name("y = x")[0] is None
    assert split_name(BW4) == (None, BW4)
    assert split_name("bw4=" + BW4) == ("bw4", BW4)


def test_quick_form_takes_designs_and_names(tmp_path):
    r = _batch("--design", f"bw4={BW4}", "-s", "rc=2*pi*1k/(s+2*pi*1k)", "-s", "1/(1m*s+1)",
               STEP, "-o", tmp_path / "out", "-j", "1", "--plot", tmp_path / "out" / "cmp.png")
    assert r.exit_code == 0, r.output
    rows = _rows(tmp_path / "out")
    assert {row["system"] for row in rows} == {"bw4", "rc", "system2"}
    assert all(row["status"] == "ok" for row in rows)
    # the input column holds the signal's name, not its whole text
    assert {row["input"] for row in rows} == {"step_rate=20k_duration=20m_time=2m"}
    assert "outside tolerance bands" not in r.output  # no limits were set
    assert (tmp_path / "out" / "cmp.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    # a 4th-order Butterworth step overshoots 10.8 % (Williams & Taylor, Electronic Filter
    # Design Handbook, step-response curves; from memory): the design really ran
    bw = next(row for row in rows if row["system"] == "bw4")
    assert float(bw["overshoot_pct_worst"]) == pytest.approx(10.8, abs=0.7)


def test_duplicate_names_are_refused(tmp_path):
    r = _batch("-s", "a=1/(s+1)", "--design", f"a={BW4}", STEP, "-o", tmp_path / "o")
    assert r.exit_code == 2 and "two systems are named 'a'" in r.output


def test_failing_limits_have_their_own_exit_code(tmp_path):
    desc = tmp_path / "b.toml"
    desc.write_text(f'''
[output]
dir = "res"

[limits]
overshoot_pct_worst = {{ max = 1 }}

[systems.bw4]
design = {{ family = "butterworth", kind = "lowpass", order = 4, cutoff_hz = "2k" }}

[systems.rc]
expression = "2*pi*1k/(s+2*pi*1k)"

[[inputs]]
signal = "{STEP}"
name = "step"
''', encoding="utf-8")
    r = _batch(desc, "-j", "1")
    assert r.exit_code == EXIT_LIMITS == 3, r.output
    assert "limits: 1 pair(s) outside their tolerance bands (exit code 3" in r.output
    assert "outside tolerance bands" in r.output
    rows = {row["system"]: row for row in _rows(tmp_path / "res")}
    assert rows["bw4"]["limits"].startswith("fail: overshoot_pct_worst=")
    assert rows["rc"]["limits"] == "pass" and rows["rc"]["input"] == "step"


def test_model_warnings_are_counted_in_the_terminal_summary(tmp_path):
    # a 4 kHz resonance sampled at 10 kHz: the rate safeguard warns for every pair
    r = _batch("-s", "(2*pi*4k)^2/(s^2+0.2*2*pi*4k*s+(2*pi*4k)^2)", "-m", "bilinear",
               "step:rate=10k,duration=20m,time=2m", "sine:rate=10k,duration=20m,frequency=100",
               "-o", tmp_path / "w", "-j", "1", "--json")
    doc = json.loads(r.output)
    rows = json.loads((tmp_path / "w" / "summary.json").read_text())["rows"]
    assert all(row["warnings"] for row in rows)
    r = _batch("-s", "(2*pi*4k)^2/(s^2+0.2*2*pi*4k*s+(2*pi*4k)^2)", "-m", "bilinear",
               "step:rate=10k,duration=20m,time=2m", "sine:rate=10k,duration=20m,frequency=100",
               "-o", tmp_path / "w", "-j", "1", "--force")
    n = sum(len(row["warnings"].split(" | ")) for row in rows)
    assert f"warnings: {n} from 2 pair(s)" in r.output and doc["counts"]["ok"] == 2


_NO_SIGNAL_IN_PARENT = r"""
import sys
from simwave.batch.plan import quick_plan
from simwave.batch.runner import run_batch
plan = quick_plan(["1/(1m*s + 1)"], ["step:rate=8k,duration=0.05,time=5m",
                                     "step:rate=8k,duration=0.05,time=10m"], sys.argv[1])
result = run_batch(plan, jobs=2)
print(result.counts["ok"], "scipy.signal" in sys.modules)
"""


def test_batch_process_leaves_scipy_signal_to_the_workers(tmp_path):
    # scipy.signal takes seconds to import here; the pool's forkserver imports it once
    # (engines.WORKER_PRELOAD) and the batch process, which only plans and collects, not at
    # all. Both pairs must still run and be measured by the workers.
    import subprocess
    import sys

    from faultkit import env

    done = subprocess.run([sys.executable, "-c", _NO_SIGNAL_IN_PARENT, str(tmp_path / "out")],
                          cwd=str(tmp_path), env=env(), capture_output=True, text=True,
                          timeout=300)
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.split() == ["2", "False"]
    metrics = sorted(p.name for p in (tmp_path / "out").glob("*.json") if "summary" not in p.name)
    assert len(metrics) == 2
