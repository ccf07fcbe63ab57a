"""The measuring step's rule: paths are checked first; afterwards a measuring failure is a warning.

README, "Exit codes, stops and faults": once the output is complete, a failure to
measure it or to write the metrics JSON does not undo the run (exit 0, the output
stays, no metrics file, the reason on stderr and in the JSON report).
"""

from __future__ import annotations

import json
import os

import pytest
from click.testing import CliRunner

import simwave.run
from simwave.cli import main
from simwave.errors import MeasurementError

STEP = "step:rate=1k,duration=0.1,time=10m"


@pytest.fixture()
def failing_measure(monkeypatch):
    def refuse(*args, **kwargs):
        raise MeasurementError("out.csv: constant waveform: nothing to measure")

    monkeypatch.setattr(simwave.run, "measure_run", refuse)


def _invoke(*args):
    return CliRunner().invoke(main, list(args))


def test_measuring_failure_after_the_run_is_a_warning(tmp_path, monkeypatch, failing_measure):
    monkeypatch.chdir(tmp_path)
    res = _invoke("run", STEP, "-s", "1/(s/100+1)", "-o", "out.csv", "--metrics", "m.json",
                  "--json")
    assert res.exit_code == 0, res.output
    assert os.path.exists("out.csv") and not os.path.exists("m.json")
    report = json.loads(res.stdout)
    assert report["metrics"] is None
    assert "nothing to measure" in report["metrics_error"]
    assert "metrics not written" in res.stderr and "nothing to measure" in res.stderr


def test_metrics_path_problems_are_found_before_the_run(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    res = _invoke("run", STEP, "-s", "1/(s/100+1)", "-o", "out.csv", "--metrics",
                  "no-such-folder/m.json")
    assert res.exit_code == 2
    assert "no-such-folder" in res.stderr and "does not exist" in res.stderr
    assert os.listdir(tmp_path) == []  # nothing written: the check came first


def test_batch_pair_with_a_measuring_failure_counts_as_ok(tmp_path, monkeypatch, failing_measure):
    monkeypatch.chdir(tmp_path)
    res = _invoke("batch", "-s", "1/(s/100+1)", STEP, "-o", "out", "--jobs", "1")
    assert res.exit_code == 0, res.output
    rows = json.loads((tmp_path / "out" / "summary.json").read_text())["rows"]
    assert rows and all(r["status"] == "ok" for r in rows)
    assert any("metrics not written" in " ".join(map(str, r.values())) for r in rows)
