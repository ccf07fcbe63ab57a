"""``simwave measure FILE``: JSON equal to the API, options, and bad input as exit 2."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner

import simwave
from simwave import Waveform
from simwave.cli import main
from simwave.measure import measure

WN = 2 * math.pi * 5
ZETA = 0.3


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


@pytest.fixture
def step_csv(tmp_path):
    """An input step and the analytic second-order response (Ogata 5th ed., eq. 5-10)."""
    fs = 2000.0
    t = np.arange(4000) / fs
    ts = (200 - 0.5) / fs
    wd = WN * math.sqrt(1 - ZETA**2)
    tt = np.maximum(t - ts, 0)
    y = np.where(
        t > ts,
        1
        - np.exp(-ZETA * WN * tt)
        * (np.cos(wd * tt) + ZETA / math.sqrt(1 - ZETA**2) * np.sin(wd * tt)),
        0.0,
    )
    x = (t > ts).astype(float)
    path = tmp_path / "step.csv"
    simwave.write(
        path, Waveform(np.column_stack([x, y]), fs, channels=["vin", "vout"], units=["V", "V"])
    )
    return path


def test_json_equals_the_api(step_csv):
    r = run("measure", step_csv, "--input-channel", "vin", "--json")
    assert r.exit_code == 0, r.output
    d = json.loads(r.stdout)
    api = measure(step_csv, reference_channel="vin").to_dict()
    assert d == json.loads(json.dumps(api))
    tr = d["channels"][0]["transitions"][0]
    # Ogata, Modern Control Engineering, 5th ed., sec. 5-3
    assert tr["overshoot_pct"] == pytest.approx(
        100 * math.exp(-math.pi * ZETA / math.sqrt(1 - ZETA**2)), rel=5e-3
    )
    assert tr["peak_time_s"] == pytest.approx(math.pi / (WN * math.sqrt(1 - ZETA**2)), rel=5e-3)


def test_table_with_system_and_options(step_csv):
    r = run(
        "measure",
        step_csv,
        "--input-channel",
        "vin",
        "--settling-band",
        "5",
        "--levels",
        "20,50,80",
        "-s",
        "(2*pi*5)^2/(s^2 + 2*0.3*2*pi*5*s + (2*pi*5)^2)",
    )
    assert r.exit_code == 0, r.output
    assert "measured vs predicted" in r.stdout
    assert "settling band ±5 %" in r.stdout
    assert "Reference levels 20/50/80 %" in r.stdout
    assert "FLAG" not in r.stdout


def test_separate_reference_file_and_output_json(tmp_path, step_csv):
    both = simwave.read(step_csv)
    simwave.write(tmp_path / "in.csv", both.select(["vin"]))
    simwave.write(tmp_path / "out.csv", both.select(["vout"]))
    target = tmp_path / "m.json"
    r = run("measure", tmp_path / "out.csv", "--reference", tmp_path / "in.csv",
            "--metrics", target)
    assert r.exit_code == 0, r.output
    d = json.loads(target.read_text())
    assert d["channels"][0]["transitions"][0]["delay_s"] > 0
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".m.json")]


def test_method_sets_tolerance_from_accuracy_report(step_csv):
    r = run(
        "measure",
        step_csv,
        "--input-channel",
        "vin",
        "--json",
        "--method",
        "ramp-invariant",
        "--poles",
        "-9.42477796+29.96888387j, -9.42477796-29.96888387j",
        "--gain",
        "986.960440",
    )
    assert r.exit_code == 0, r.output
    d = json.loads(r.stdout)
    assert d["predicted"]["tolerance_source"].startswith("discretization error report")
    assert d["predicted"]["discretization"]["method"] == "ramp-invariant"


def one_line_error(r):
    assert r.exit_code == 2, r.output
    err = r.stderr.strip()
    assert err.startswith("Error: ") and "\n" not in err and "Traceback" not in r.output
    return err


def test_bad_levels_and_band(step_csv):
    assert "outside (0, 100) %" in one_line_error(run("measure", step_csv, "--levels", "0,50,90"))
    assert "outside (0, 100) %" in one_line_error(
        run("measure", step_csv, "--settling-band", "100"))
    assert "three percentages" in one_line_error(run("measure", step_csv, "--levels", "10,90"))


def test_constant_file(tmp_path):
    p = tmp_path / "flat.csv"
    simwave.write(p, Waveform(np.full(100, 2.5), 100.0))
    assert "constant waveform" in one_line_error(run("measure", p))


def test_no_sine_when_asked(step_csv):
    err = one_line_error(run("measure", step_csv, "--input-channel", "vin", "--kind", "sine"))
    assert "no sine" in err


def test_reference_of_other_length(tmp_path, step_csv):
    both = simwave.read(step_csv)
    simwave.write(tmp_path / "short.csv", Waveform(both.data[:-10, :1], both.rate))
    err = one_line_error(run("measure", step_csv, "--reference", tmp_path / "short.csv"))
    assert "same length" in err


def test_missing_file_and_refusing_to_overwrite_input(tmp_path, step_csv):
    one_line_error(run("measure", tmp_path / "nope.csv"))
    before = step_csv.read_bytes()
    err = one_line_error(run("measure", step_csv, "--metrics", step_csv))
    assert "refusing" in err
    assert step_csv.read_bytes() == before


def _pulse_response(t, zeta, wn, t_on, t_off):
    """Exact response of wn^2 / (s^2 + 2 zeta wn s + wn^2) to a unit pulse: the step
    response (Ogata 5th ed. eq. 5-10) at t - t_on minus the one at t - t_off."""
    wd = wn * math.sqrt(1 - zeta**2)

    def step(tt):
        tp = max(tt, 0.0)
        if tt <= 0:
            return 0.0
        return 1 - math.exp(-zeta * wn * tp) * (
            math.cos(wd * tp) + zeta / math.sqrt(1 - zeta**2) * math.sin(wd * tp)
        )

    return step(t - t_on) - step(t - t_off)


def test_run_metrics_of_a_lightly_damped_pulse(tmp_path):
    # The integration case: a 10 ms pulse through zeta = 0.25, fn = 200 Hz. Before the
    # fix the levels came out 1.444 / -0.43 (the ringing peaks), the rise was not found
    # and the fall had an 8.4 ms "fall time". Checked against the exact analytic response
    # by root finding (scipy.optimize.brentq) and Ogata 5th ed. sec. 5-3 for the first edge
    # (it starts from rest): overshoot exp(-pi zeta / sqrt(1 - zeta^2)) = 44.4 %, peak time
    # pi / omega_d. The generated edge lies half-way between samples 99 and 100 (4.975 ms).
    from scipy.optimize import brentq

    zeta, wn = 0.25, 2 * math.pi * 200
    wd = wn * math.sqrt(1 - zeta**2)
    t_on, t_off = 0.004975, 0.014975
    js = tmp_path / "p.json"
    r = run(
        "run", "pulse:rate=20k,duration=40m,width=10m,delay=5m",
        "-s", "(2*pi*200)^2/(s^2 + 0.5*2*pi*200*s + (2*pi*200)^2)",
        "-o", tmp_path / "p.h5", "--with-input", "--metrics", js,
    )  # fmt: skip
    assert r.exit_code == 0, r.output
    ch = json.loads(js.read_text())["metrics"]["channels"][0]
    sl = ch["state_levels"]
    assert sl["low"] == pytest.approx(0.0, abs=1e-3) and sl["high"] == pytest.approx(1.0, abs=1e-3)
    assert sl["method"] == "low: segment end, high: turning-point extrapolation (input-aligned)"
    rise, fall = ch["transitions"]
    assert (rise["direction"], fall["direction"]) == ("rising", "falling")

    def y(t):
        return _pulse_response(t, zeta, wn, t_on, t_off)

    t10 = brentq(lambda t: y(t) - 0.1, t_on, t_on + math.pi / wd)
    t90 = brentq(lambda t: y(t) - 0.9, t_on, t_on + math.pi / wd)
    # linear interpolation between samples at 20 samples per rise time: a few 1e-4
    assert rise["rise_time_s"] == pytest.approx(t90 - t10, rel=2e-3)
    mp = 100 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta**2))
    assert rise["overshoot_pct"] == pytest.approx(mp, rel=5e-3)
    assert rise["peak_time_s"] == pytest.approx(math.pi / wd, rel=5e-3)
    assert rise["settling_time_s"] is None
    assert "never settles before the next transition" in rise["null_reasons"]["settling_time_s"]
    # the fall starts on the ringing left from the rise: not the mirror of the step
    f90 = brentq(lambda t: y(t) - 0.9, t_off, t_off + 0.5 * math.pi / wd)
    f10 = brentq(lambda t: y(t) - 0.1, t_off, t_off + math.pi / wd)
    assert fall["fall_time_s"] == pytest.approx(f10 - f90, rel=2e-3)
    def dy(t):  # impulse responses (Ogata 5th ed. sec. 5-3): the derivative of y
        return sum(
            sgn * wn / math.sqrt(1 - zeta**2) * math.exp(-zeta * wn * (t - t0))
            * math.sin(wd * (t - t0))
            for t0, sgn in ((t_on, 1.0), (t_off, -1.0))
            if t > t0
        )  # fmt: skip

    t_min = brentq(dy, t_off + 0.5 * math.pi / wd, t_off + 1.5 * math.pi / wd)
    assert fall["overshoot_pct"] == pytest.approx(-100 * y(t_min), rel=5e-3)
    grid = np.linspace(t_off, 0.03995, 20_001)
    dev = np.array([abs(y(t)) for t in grid]) - 0.02
    last = int(np.flatnonzero(dev > 0)[-1])
    t_settle = brentq(lambda t: abs(y(t)) - 0.02, grid[last], grid[last + 1])
    assert fall["settling_time_s"] == pytest.approx(t_settle - t_off, abs=0.1 / 20e3)
