"""The measuring problems found on everyday records, each as a test with its expected values.

Truth: the closed-form step responses of tests/truth.py (K. Ogata, *Modern Control
Engineering*, 5th ed., sec. 5-3). The tolerances allow for the sampling (10 kHz: 0.1 ms)
and for the discrete model (ramp-invariant, exact for inputs linear between samples).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner

import simwave
from simwave import System, Waveform
from simwave.cli import main
from truth import metrics as closed_form

FN = 20.0
WN = 2 * math.pi * FN
ZETA = 0.707
SYSTEM = "(2*pi*20)^2/(s^2+1.414*2*pi*20*s+(2*pi*20)^2)"
TRUTH = closed_form("second", zeta=ZETA, wn=WN)  # overshoot 4.33 %, settling 47.5 ms
RATE = 10_000.0
T = 1.0 / RATE


def cli(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def _only_row(ch: dict) -> dict:
    assert len(ch["transitions"]) == 1, ch.get("null_reasons")
    return ch["transitions"][0]


# 1. a step at the first sample from rest is a transition ----------------------------------
def test_step_at_the_first_sample_from_the_command_line(tmp_path):
    r = cli("run", "step:rate=10k,duration=0.2", "-s", SYSTEM, "-o", tmp_path / "st.csv",
            "--metrics", tmp_path / "st.json")
    assert r.exit_code == 0, r.output
    ch = json.loads((tmp_path / "st.json").read_text())["metrics"]["channels"][0]
    row = _only_row(ch)
    assert ch["kind"] == "transitions"
    assert row["overshoot_pct"] == pytest.approx(TRUTH["overshoot_pct"], abs=0.05)
    assert row["settling_time_s"] == pytest.approx(TRUTH["settling_time_s"], abs=2 * T)
    assert row["rise_time_s"] == pytest.approx(TRUTH["rise_time_s"], abs=2 * T)
    # the input moves from rest (at t0 - T) to 1 (at t0): its 50 % instant is half a sample
    # before t0, and the delay counts from there
    assert row["delay_s"] == pytest.approx(TRUTH["delay_s"], abs=T)
    line = next(x for x in r.output.splitlines() if x.startswith("metrics"))
    assert "overshoot 4.3" in line and "settling time 0.047" in line


def test_step_at_the_first_sample_through_the_api():
    x = Waveform(np.ones(2000), RATE)
    y = simwave.simulate(System.parse(SYSTEM), x)
    ch = simwave.measure(y, reference=x).to_dict()["channels"][0]
    row = _only_row(ch)
    assert row["initial_level"] == 0.0
    assert row["initial_level_detail"]["method"] == "at rest before the record (convention)"
    assert row["overshoot_pct"] == pytest.approx(TRUTH["overshoot_pct"], abs=0.05)
    # without the convention the same record has no transition, and says why
    off = simwave.measure(y, reference=x, rest_before_record=False).to_dict()["channels"][0]
    assert off["kind"] == "constant" and not off.get("transitions")


# 5. plots draw what is known and write n/a for the rest -----------------------------------
def test_plot_with_missing_overshoot_and_start_writes_n_a(tmp_path):
    x = Waveform(np.concatenate([np.zeros(200), np.ones(1800)]), RATE)
    y = simwave.simulate(System.parse(SYSTEM), x)
    data = simwave.measure(y, reference=x).to_dict()
    row = data["channels"][0]["transitions"][0]
    for key in ("overshoot_pct", "start_s", "rise_time_s", "settling_time_s", "settled_at_s"):
        row[key] = None
    row["null_reasons"] = {"overshoot_pct": "final level not established (a test)"}
    from simwave.plots import plot_run

    fig = plot_run(y, x, data, tmp_path / "p.png")
    texts = [t.get_text() for ax in fig.axes for t in ax.texts]
    assert any(t.startswith("overshoot n/a") for t in texts), texts
    assert any("settling time n/a" in t for t in texts), texts


def test_run_plot_of_a_short_record_does_not_crash(tmp_path):
    # cut off while still rising: levels and overshoot unknown
    r = cli("run", "step:rate=10k,duration=0.03,time=0.01", "-s", SYSTEM,
            "-o", tmp_path / "s.csv", "--metrics", tmp_path / "s.json",
            "--plot", tmp_path / "s.png")
    assert r.exit_code == 0, r.output
    assert (tmp_path / "s.png").stat().st_size > 0


# 6. the reference inside the same file, and no output-as-its-own-reference ----------------
def test_reference_dataset_in_the_same_hdf5(tmp_path):
    out = tmp_path / "o.h5"
    r = cli("run", "step:rate=10k,duration=0.2,time=0.02", "-s", SYSTEM, "-o", out,
            "--with-input")
    assert r.exit_code == 0, r.output
    r = cli("measure", out, "--dataset", "/waveform", "--reference-dataset", "/input", "--json")
    assert r.exit_code == 0, r.output
    row = _only_row(json.loads(r.stdout)["channels"][0])
    assert row["delay_s"] == pytest.approx(TRUTH["delay_s"], abs=T)  # 11.4 ms
    # the output as its own reference is refused, in one line
    r = cli("measure", out, "--dataset", "/waveform", "--reference", out)
    assert r.exit_code == 2
    assert r.output.startswith("Error: ") and "itself" in r.output
    assert len(r.output.strip().splitlines()) == 1


# 2. staircases: each step between settled levels is a transition with its own levels ------
STAIRS = [0.0, 1.0, 2.5, 0.5, 1.5]


def _staircase(n_per: int = 2000) -> Waveform:
    return Waveform(np.concatenate([np.full(n_per, v) for v in STAIRS]), RATE)


def _check_stairs(rows: list, tol_pct: float = 0.05) -> None:
    assert len(rows) == len(STAIRS) - 1
    for row, a, b in zip(rows, STAIRS, STAIRS[1:], strict=False):
        assert row["initial_level"] == pytest.approx(a, abs=1e-3)
        assert row["final_level"] == pytest.approx(b, abs=1e-3)
        assert row["direction"] == ("rising" if b > a else "falling")
        # linear system: every step has the same shape, scaled
        assert row["overshoot_pct"] == pytest.approx(TRUTH["overshoot_pct"], abs=tol_pct)
        assert row["settling_time_s"] == pytest.approx(TRUTH["settling_time_s"], abs=2 * T)


def test_staircase_through_the_api():
    x = _staircase()
    y = simwave.simulate(System.parse(SYSTEM), x)
    ch = simwave.measure(y, reference=x).to_dict()["channels"][0]
    assert ch["kind"] == "transitions"
    _check_stairs(ch["transitions"])


def test_staircase_through_run_metrics(tmp_path):
    x = _staircase()
    simwave.write(tmp_path / "stairs.csv", x)
    r = cli("run", tmp_path / "stairs.csv", "-s", SYSTEM, "-o", tmp_path / "o.csv",
            "--metrics", tmp_path / "m.json")
    assert r.exit_code == 0, r.output
    ch = json.loads((tmp_path / "m.json").read_text())["metrics"]["channels"][0]
    _check_stairs(ch["transitions"])
    line = next(x for x in r.output.splitlines() if x.startswith("metrics"))
    assert "overshoot 4.3" in line


# 3. hum and noise: found, with the disturbance measured and said where it matters -------
def test_staircase_with_hum_and_noise():
    x = _staircase()
    y = simwave.simulate(System.parse(SYSTEM), x)
    t = np.arange(x.n_samples) / RATE
    rng = np.random.default_rng(1)
    hum = 0.2 * np.sin(2 * np.pi * 60 * t + 0.3)
    d = simwave.measure(
        Waveform(y.data[:, 0] + hum + 0.02 * rng.standard_normal(t.size), RATE),
        reference=Waveform(x.data[:, 0] + hum + 0.02 * rng.standard_normal(t.size), RATE),
    ).to_dict()
    ch = d["channels"][0]
    assert ch["kind"] == "transitions"
    rows = ch["transitions"]
    assert len(rows) == 4
    rms = math.sqrt(0.2**2 / 2 + 0.02**2)  # hum and noise, about the levels
    for row, a, b in zip(rows, STAIRS, STAIRS[1:], strict=False):
        assert row["disturbance_rms"] == pytest.approx(rms, rel=0.25)
        # levels within a few standard uncertainties (hum over part of its period)
        for key, truth in (("initial_level", a), ("final_level", b)):
            u = row["uncertainty"][key]
            if u is not None:
                assert abs(row[key] - truth) <= 4 * u + 0.05
        # the band (+/-2 % of 1..2 units) is far inside the hum: settling is not measured,
        # and the reason says so
        assert row["settling_time_s"] is None
        assert "disturbance" in row["null_reasons"]["settling_time_s"]
        # the overshoot read off single samples is within the disturbance's bracket
        if row["overshoot_pct"] is not None:
            assert abs(row["overshoot_pct"] - TRUTH["overshoot_pct"]) <= (
                row["uncertainty"]["overshoot_pct"]
            )
        assert "transition_duration_s" in row.get("cautions", {})


# 4. a record too short to settle: no bare overshoot, bounds marked ------------------------
def test_short_record_gives_no_overshoot_as_a_value(tmp_path):
    r = cli("run", "step:rate=10k,duration=0.05,time=0.01", "-s", SYSTEM,
            "-o", tmp_path / "s.csv", "--metrics", tmp_path / "s.json")
    assert r.exit_code == 0, r.output
    line = next(x for x in r.output.splitlines() if x.startswith("metrics"))
    # the output is at its first peak when the record ends: no level, so no overshoot
    assert "overshoot n/a" in line and "settling time n/a" in line
    assert "not established" in r.output


def test_first_order_cut_short_marks_bounds(tmp_path):
    r = cli("run", "step:rate=10k,duration=0.05,time=0.01", "-s", "1/(s/(2*pi*5)+1)",
            "-o", tmp_path / "s.csv", "--metrics", tmp_path / "s.json")
    assert r.exit_code == 0, r.output
    line = next(x for x in r.output.splitlines() if x.startswith("metrics"))
    assert "rise time \u22650.03" in line and "settling time \u22650.03" in line
    row = json.loads((tmp_path / "s.json").read_text())["metrics"]["channels"][0][
        "transitions"][0]
    # first-order step response 1 - exp(-t/tau) (common practice), tau = 1/(2 pi 5) s: 40 ms
    # after the step it has reached 1 - exp(-0.04 * 2 pi 5) = 71.5 %, the final level's bound
    assert row["bounds"]["final_level"] == "lower"
    assert row["final_level"] == pytest.approx(1 - math.exp(-0.04 * 2 * math.pi * 5), abs=0.01)
    assert row["settling_time_s"] >= 0.039
