"""Batch runs against one-by-one runs, on the local pool and on a Dask cluster; failures; resume.

The reference for every pair is :func:`simwave.run.execute` (the function behind
``simwave run``) called directly with a RunJob built here from the same system
tables, independently of the batch planner. The batch must produce the same
bytes and the same metrics; timestamps (``written``) and timings (``elapsed_s``)
are the only fields allowed to differ.

The data are tiny generated records (0.05 s at 2 kHz) so the whole module runs
in seconds; the process pool is started in two tests only (start-up dominates).
"""

from __future__ import annotations

import json
import os
import re
import threading
import time

import pytest
from click.testing import CliRunner

import simwave
from simwave.batch import load_description, run_batch
from simwave.batch.engines import InlineEngine
from simwave.cli import main
from simwave.cli.system_input import load_system_file, system_from_mapping
from simwave.measure import key_metrics
from simwave.run import RunJob, execute

RATE = 2000.0
DURATION = 0.05
N_GOOD = 50

LP2_TABLE = {"design": {"family": "butterworth", "kind": "lowpass", "order": 2,
                        "cutoff_hz": "200"}}
RC_TEXT = 'expression = "2*pi*100/(s + 2*pi*100)"\n'
# minmax state levels: the histogram method's smoothing costs ~0.1 s per short record,
# which would dominate these tests; the batch passes either option through the same way.
MEASURE = {"settling_band_pct": 2.0, "state_level_method": "minmax"}

DESCRIPTION = """
[output]
dir = "{out}"
format = "csv"

[measure]
settling_band_pct = 2
state_level_method = "minmax"

[limits]
overshoot_pct_worst = {{ max = 3 }}

[systems.lp2]
design = {{ family = "butterworth", kind = "lowpass", order = 2, cutoff_hz = "200" }}
method = "bilinear"

[systems.rc]
file = "systems/rc.toml"

[[inputs]]
files = ["data/*.csv", "data/*.wav"]
"""


def _signal(i: int) -> simwave.Waveform:
    """Input number i: steps, pulses and sines with different timing and levels (invented)."""
    kind = i % 3
    if kind == 0:
        return simwave.generate("step", RATE, DURATION, time=f"{2 + i % 7}m", level=1 + i / 50)
    if kind == 1:
        return simwave.generate("pulse", RATE, DURATION, width=f"{8 + i % 5}m",
                                delay=f"{3 + i % 4}m", level=0.5 + i / 100)
    return simwave.generate("sine", RATE, DURATION, frequency=60 + 2 * i, amplitude=0.2)


def _make_campaign(root, n_good: int, bad: bool = True) -> list[str]:
    data = root / "data"
    data.mkdir(parents=True)
    (root / "systems").mkdir()
    (root / "systems" / "rc.toml").write_text(RC_TEXT)
    names = []
    for i in range(n_good):
        path = data / f"rec{i:03d}.csv"
        simwave.write(str(path), _signal(i))
        names.append(path.name)
    if bad:
        # A corrupt recording: a WAV header cut short, and a CSV with text where numbers go.
        (data / "corrupt.wav").write_bytes(b"RIFF\x24\x08\x00\x00WAVEfmt \x10\x00\x00")
        (data / "text.csv").write_text("time,v\n0,0.1\n0.0005,high\n0.001,0.3\n")
    return names


def _write_description(root, out: str) -> str:
    path = root / f"batch-{out}.toml"
    path.write_text(DESCRIPTION.format(out=out))
    return str(path)


def _normal_output(path: str) -> str:
    """File text with the write time blanked (it is the only field that may differ)."""
    with open(path, encoding="utf-8") as fh:
        return re.sub(r'"written":\s*"[^"]*"', '"written":"-"', fh.read())


def _strip(obj, out_dir: str):
    """Metrics JSON without timing and time-stamp fields, paths relative to the output dir."""
    if isinstance(obj, dict):
        return {k: _strip(v, out_dir) for k, v in obj.items() if k not in ("elapsed_s", "written")}
    if isinstance(obj, list):
        return [_strip(v, out_dir) for v in obj]
    if isinstance(obj, str):
        return obj.replace(out_dir, "<out>")
    return obj


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    """52 inputs (50 good, 2 bad) x 2 systems, and the reference run of every good pair."""
    root = tmp_path_factory.mktemp("campaign")
    names = _make_campaign(root, N_GOOD)
    ref = root / "reference"
    ref.mkdir()
    systems = {
        "lp2": (system_from_mapping({**LP2_TABLE, "name": "lp2"}), "bilinear"),
        "rc": (load_system_file(str(root / "systems" / "rc.toml")), "ramp-invariant"),
    }
    reference = {}
    for name in names:
        stem = name[:-4]
        for sname, (system, method) in systems.items():
            out = str(ref / f"{stem}__{sname}.csv")
            job = RunJob(system=system, source=str(root / "data" / name), output=out,
                         method=method, metrics=str(ref / f"{stem}__{sname}.metrics.json"),
                         measure_options=dict(MEASURE))
            # both models are coarse at this rate on purpose: the rate safeguard says so,
            # and says it in the run's record too
            with pytest.warns(UserWarning, match="model is off by") as caught:
                reference[(f"{stem}__{sname}")] = done = execute(job)
            assert [str(w.message) for w in caught] == done["run"]["warnings"]
    return root, names, reference


def _check_against_reference(root, out: str, result, reference) -> None:
    out_dir = str(root / out)
    ref_dir = str(root / "reference")
    # --- outputs and metrics files: byte-identical outputs, identical metrics
    for key in reference:
        assert _normal_output(os.path.join(out_dir, key + ".csv")) == \
            _normal_output(os.path.join(ref_dir, key + ".csv")), key
        with open(os.path.join(out_dir, key + ".metrics.json")) as fh:
            got = _strip(json.load(fh), out_dir)
        with open(os.path.join(ref_dir, key + ".metrics.json")) as fh:
            want = _strip(json.load(fh), ref_dir)
        assert got == want, key
    # --- summary rows: one per (input, system, channel) with the reference's key metrics
    ok_rows = [r for r in result.rows if r["status"] == "ok"]
    assert len(ok_rows) == len(reference)  # one channel per input
    for row in ok_rows:
        key = os.path.splitext(row["output"])[0]
        ref = reference[key]
        ref_metrics = key_metrics(ref["metrics"])[row["channel"]]
        for metric, value in ref_metrics.items():
            assert row[metric] == value, (key, metric)
        assert row["samples"] == ref["run"]["samples"] == round(RATE * DURATION)
        assert row["record_peak"] == ref["run"]["channels"][0]["peak"]
        # [limits] overshoot_pct_worst max 3 %: judged where the record has transitions.
        over = ref_metrics["overshoot_pct_worst"]
        if over is None:
            assert row["limits"] == "not measured: overshoot_pct_worst"
        else:
            assert row["limits"] == ("pass" if over <= 3 else
                                     f"fail: overshoot_pct_worst={over:.6g} > 3")
    # --- the two bad inputs fail with their messages, for both systems; the rest are ok
    failed = [r for r in result.rows if r["status"] == "failed"]
    assert sorted((os.path.basename(r["input"]), r["system"]) for r in failed) == [
        ("corrupt.wav", "lp2"), ("corrupt.wav", "rc"), ("text.csv", "lp2"), ("text.csv", "rc")]
    for r in failed:
        assert r["error"] and os.path.basename(r["input"]) in r["error"], r["error"]
        assert not os.path.exists(os.path.join(out_dir, os.path.basename(r["input"])[:-4]
                                               + "__" + r["system"] + ".csv"))
    text_err = next(r["error"] for r in failed if r["input"].endswith("text.csv"))
    assert "high" in text_err  # the non-numeric cell is named
    assert result.counts == {"pairs": 104, "ok": 100, "failed": 4, "not_run": 0, "reused": 0,
                             "ran": 104}
    assert result.exit_code == 1
    assert not [f for f in os.listdir(out_dir) if ".part" in f]


def _summary_without_timing(path: str) -> list[dict]:
    with open(path) as fh:
        doc = json.load(fh)
    return [{k: v for k, v in row.items() if k != "elapsed_s"} for row in doc["rows"]]


def test_local_pool_matches_one_by_one_runs(campaign):
    root, _, reference = campaign
    plan = load_description(_write_description(root, "pool"))
    result = run_batch(plan, jobs=2)
    assert result.engine.startswith("local process pool, 2 workers")
    _check_against_reference(root, "pool", result, reference)
    # The command line `simwave run` writes the same bytes for a pair as the batch did.
    cli_out = root / "cli-rec000__rc.csv"
    run = CliRunner().invoke(main, ["run", str(root / "data" / "rec000.csv"), "-s",
                                    str(root / "systems" / "rc.toml"), "-o", str(cli_out)])
    assert run.exit_code == 0, run.output
    assert _normal_output(str(cli_out)) == _normal_output(str(root / "pool" / "rec000__rc.csv"))
    # Both workers took part (the pool really ran in parallel processes).
    assert len({r["worker"] for r in result.results.values()} - {os.getpid()}) == 2
    # The summary files say the same as the result object.
    with open(result.summary_csv) as fh:
        header = fh.readline().strip().split(",")
        body = fh.read().splitlines()
    assert header[:4] == ["input", "system", "channel", "status"] and len(body) == 104
    assert _summary_without_timing(result.summary_json) == [
        {k: v for k, v in r.items() if k != "elapsed_s"} for r in json.loads(
            json.dumps(result.rows))]
    # Per-system comparison: worst overshoot across inputs is the largest in the rows.
    for name in ("lp2", "rc"):
        values = [r["overshoot_pct_worst"] for r in result.rows
                  if r["system"] == name and r["overshoot_pct_worst"] is not None]
        assert result.comparison[name]["overshoot_pct_worst"]["value"] == max(values)
        assert result.comparison[name]["failed"] == 2 and result.comparison[name]["ok"] == 50


# The Dask engine leaves warnings to the worker's log (here: this process's threads); the
# summary's warnings column records them all the same (checked below).
@pytest.mark.filterwarnings("ignore:the (bilinear|ramp-invariant) model is off by:UserWarning")
def test_dask_cluster_matches_one_by_one_runs_and_the_pool(campaign):
    distributed = pytest.importorskip("dask.distributed")
    root, _, reference = campaign
    plan = load_description(_write_description(root, "dask"))
    with distributed.LocalCluster(processes=False, n_workers=2, threads_per_worker=1,
                                  dashboard_address=None) as cluster:
        result = run_batch(plan, scheduler=cluster.scheduler_address)
    assert result.engine.startswith("Dask cluster at inproc://")
    _check_against_reference(root, "dask", result, reference)
    assert all("model is off by" in (r["warnings"] or "") for r in result.rows
               if r["status"] == "ok")
    pool_summary = root / "pool" / "summary.json"
    if pool_summary.exists():  # the pool test ran first: identical summaries but for timing
        pool_rows = _summary_without_timing(str(pool_summary))
        assert _summary_without_timing(result.summary_json) == pool_rows


def _subset(plan, stems):
    """Keep the pairs of some inputs only (a short batch for the resume checks)."""
    plan.pairs = [p for p in plan.pairs if p.input.stem in stems]
    return plan


def test_rerun_skips_finished_pairs_and_redoes_changed_ones(campaign, monkeypatch):
    root, names, _ = campaign
    stems = {"rec000", "rec001", "rec002", "text"}

    def plan():
        return _subset(load_description(_write_description(root, "resume")), stems)

    first = run_batch(plan(), jobs=1)
    assert first.counts == {"pairs": 8, "ok": 6, "failed": 2, "not_run": 0, "reused": 0,
                            "ran": 8}
    calls = []
    real = execute

    def counting(job, progress=None):
        calls.append(os.path.basename(job.output))
        return real(job, progress=progress)

    monkeypatch.setattr("simwave.batch.tasks.execute", counting)
    again = run_batch(plan(), jobs=1)
    # Only the failed pairs run again; the finished ones are reused with their rows.
    assert sorted(calls) == ["text__lp2.csv", "text__rc.csv"]
    assert again.counts["reused"] == 6 and again.counts["ran"] == 2
    assert _summary_without_timing(again.summary_json) == [
        {**r, "reused": r["status"] == "ok"} for r in _summary_without_timing(first.summary_json)]
    # A newer input redoes its pairs (here: its outputs made older than it).
    calls.clear()
    out = root / "resume"
    past = os.stat(root / "data" / "rec001.csv").st_mtime - 60
    for name in ("rec001__lp2.csv", "rec001__rc.csv"):
        os.utime(out / name, (past, past))
    run_batch(plan(), jobs=1)
    assert sorted(calls) == ["rec001__lp2.csv", "rec001__rc.csv", "text__lp2.csv",
                             "text__rc.csv"]
    # A newer system file redoes that system's pairs only.
    calls.clear()
    future = max(os.stat(out / f"rec00{i}__rc.csv").st_mtime for i in range(3)) + 1
    os.utime(root / "systems" / "rc.toml", (future, future))
    run_batch(plan(), jobs=1)
    assert sorted(calls) == ["rec000__rc.csv", "rec001__rc.csv", "rec002__rc.csv",
                             "text__lp2.csv", "text__rc.csv"]
    os.utime(root / "systems" / "rc.toml", (past, past))  # older again, for the next checks
    # A changed definition (same files, same times) redoes its pairs: the fingerprint.
    calls.clear()
    changed = _write_description(root, "resume").replace(".toml", "-m.toml")
    with open(changed, "w") as fh:
        fh.write(DESCRIPTION.format(out="resume").replace('method = "bilinear"',
                                                          'method = "matched-z"'))
    run_batch(_subset(load_description(changed), stems), jobs=1)
    assert sorted(calls) == ["rec000__lp2.csv", "rec001__lp2.csv", "rec002__lp2.csv",
                             "text__lp2.csv", "text__rc.csv"]
    # --force redoes everything.
    calls.clear()
    run_batch(plan(), jobs=1, force=True)
    assert len(calls) == 8


class _PartialFileWatch:
    """Polls the output directory; any final-named output must equal its reference text."""

    def __init__(self, out_dir: str, ref_dir: str) -> None:
        self.out_dir, self.ref_dir = out_dir, ref_dir
        self.bad: list[str] = []
        self.seen_temporaries = 0
        self.polls = 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _run(self) -> None:
        while not self._stop.is_set():
            try:
                names = os.listdir(self.out_dir)
            except FileNotFoundError:
                names = []
            self.polls += 1
            for name in names:
                if name.startswith("."):
                    self.seen_temporaries += ".part" in name
                    continue
                if not name.endswith(".csv") or name == "summary.csv":
                    continue
                ref = os.path.join(self.ref_dir, name)
                try:
                    if os.path.exists(ref) and _normal_output(
                            os.path.join(self.out_dir, name)) != _normal_output(ref):
                        self.bad.append(name)
                except FileNotFoundError:
                    pass
            time.sleep(0.001)

    def __enter__(self) -> _PartialFileWatch:
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self._stop.set()
        self._thread.join()


def test_interrupt_mid_write_then_resume(campaign, monkeypatch):
    """Ctrl-C inside the 4th pair's write (in-process engine), then a re-run finishes the rest."""
    root, _, _ = campaign
    out = "interrupt-inline"
    plan = load_description(_write_description(root, out))
    plan.pairs = plan.pairs[:10]  # a short batch is enough here
    real = execute
    calls: list[str] = []
    temporaries_at_interrupt: list[list[str]] = []

    def interrupted(job, progress=None):
        calls.append(os.path.basename(job.output))
        if len(calls) < 4:
            return real(job, progress=progress)

        def ctrl_c(done, total):
            # The output's temporary file exists now: the interruption is mid-write.
            temporaries_at_interrupt.append(
                [f for f in os.listdir(os.path.dirname(job.output)) if ".part" in f])
            raise KeyboardInterrupt

        return real(job, progress=ctrl_c)

    monkeypatch.setattr("simwave.batch.tasks.execute", interrupted)
    with _PartialFileWatch(str(root / out), str(root / "reference")) as watch:
        result = run_batch(plan, engine=InlineEngine())
    assert result.interrupted and result.exit_code == 130
    assert temporaries_at_interrupt and temporaries_at_interrupt[0]
    assert watch.bad == [] and watch.polls > 0
    assert not [f for f in os.listdir(root / out) if ".part" in f]
    assert result.counts["ok"] == 3 and result.counts["not_run"] == 7
    assert [r["status"] for r in result.rows[:4]] == ["ok"] * 3 + ["not run"]
    finished = {os.path.basename(p.output) for p in plan.pairs[:3]}
    assert {f for f in os.listdir(root / out) if f.endswith(".csv") and f != "summary.csv"} \
        == finished
    # Re-run: only the 7 unfinished pairs run.
    calls.clear()
    monkeypatch.setattr("simwave.batch.tasks.execute",
                        lambda job, progress=None: (calls.append(os.path.basename(job.output)),
                                                    real(job, progress=progress))[1])
    plan2 = load_description(_write_description(root, out))
    plan2.pairs = plan2.pairs[:10]
    again = run_batch(plan2, engine=InlineEngine())
    assert sorted(calls) == sorted(os.path.basename(p.output) for p in plan.pairs[3:])
    assert again.counts == {"pairs": 10, "ok": 10, "failed": 0, "not_run": 0, "reused": 3,
                            "ran": 7}


def test_interrupt_stops_the_pool_cleanly_then_resume(campaign):
    """Ctrl-C arriving in the batch process while the pool works; workers are stopped."""
    root, _, _ = campaign
    out = "interrupt-pool"
    plan = load_description(_write_description(root, out))
    plan.pairs = plan.pairs[:16]
    seen = []

    def progress(done, total, failed):
        seen.append(done)
        if done == 3:
            raise KeyboardInterrupt  # as if Ctrl-C arrived here

    with _PartialFileWatch(str(root / out), str(root / "reference")) as watch:
        result = run_batch(plan, jobs=2, progress=progress)
    assert result.interrupted and result.exit_code == 130
    assert watch.bad == []
    assert not [f for f in os.listdir(root / out) if ".part" in f]
    journaled = result.counts["ok"]
    assert journaled == 3 and result.counts["not_run"] == 13
    # Every output present is complete (some may have finished after the interruption).
    for name in os.listdir(root / out):
        if name.endswith(".csv") and name != "summary.csv":
            assert _normal_output(str(root / out / name)) == \
                _normal_output(str(root / "reference" / name))
    plan2 = load_description(_write_description(root, out))
    plan2.pairs = plan2.pairs[:16]
    again = run_batch(plan2, jobs=1)
    assert again.counts["reused"] == 3 and again.counts["ran"] == 13
    assert again.counts["ok"] == 16
