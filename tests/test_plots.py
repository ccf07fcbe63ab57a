"""Plots: drawn content read back from the figures and checked against the measurement
and against published step and frequency responses; bad plot targets."""

from __future__ import annotations

import math
import os
import re

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import signal

import simwave
from simwave.cli import main
from simwave.plots import (
    PlotError,
    check_plot_path,
    format_seconds,
    plot_batch,
    plot_frequency,
    plot_run,
    summary_rows,
)
from simwave.run import RunJob, execute, simulate

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
WAVEFORMS = os.path.join(ROOT, "waveforms")

UNIT = {"s": 1.0, "ms": 1e-3, "\u00b5s": 1e-6, "ns": 1e-9}


def _unit_of(label: str) -> float:
    """Seconds per axis unit, from an x label ending in '(ms)' and the like."""
    m = re.search(r"\(([^()]*)\)\s*$", label)
    assert m, label
    return UNIT[m.group(1)]


def _by_gid(ax, gid):
    return [a for a in ax.get_children() if a.get_gid() == gid]


def _second_order(zeta: float, fn_hz: float) -> simwave.System:
    wn = 2 * math.pi * fn_hz
    return simwave.System.from_coeffs([wn**2], [1.0, 2 * zeta * wn, wn**2], name="second order")


@pytest.fixture(scope="module")
def step_run():
    """A step (0 -> 1 V at 5 ms, 20 kHz) through a second-order system, zeta 0.5, 50 Hz."""
    system = _second_order(0.5, 50.0)
    step = simwave.generate("step", 20_000.0, 0.12, time=0.005, units="V")
    out = simulate(system, step)
    result = simwave.measure(out, reference=step, system=system)
    return system, step, out, result.to_dict()


# --------------------------------------------------------------------------- time plot
def test_run_plot_annotations_equal_the_measurement(step_run, tmp_path):
    system, step, out, metrics = step_run
    path = tmp_path / "step.png"
    fig = plot_run(out, step, metrics, path)
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not [p for p in os.listdir(tmp_path) if p != "step.png"]  # no temporary left

    overview, zoom, settle = fig.axes[0], fig.axes[1], fig.axes[2]
    row = metrics["channels"][0]["transitions"][0]
    # overview: the input and the output, both whole
    gids = [ln.get_gid() for ln in overview.get_lines()]
    assert gids.count("input") == 1 and gids.count("output") == 1
    assert overview.get_xlabel() == "time (s)"
    assert overview.get_ylabel() == f"{out.channels[0]} (V)"

    # rise time: the drawn span is the measured one, and so is the text
    scale = _unit_of(zoom.get_xlabel())
    (span,) = _by_gid(zoom, "rise-time-span")
    x0, x1 = span.get_xdata()
    assert (x1 - x0) * scale == pytest.approx(row["rise_time_s"], rel=1e-9)
    origin = row["time_origin_s"]
    assert x0 * scale + origin == pytest.approx(row["start_s"], rel=1e-9)
    (text,) = _by_gid(zoom, "rise-time-text")
    assert text.get_text() == f"rise time {format_seconds(row['rise_time_s'])}"

    # state and reference levels drawn where they were measured
    levels = metrics["channels"][0]["state_levels"]
    refs = metrics["channels"][0]["reference_levels"]
    for key in ("low", "high"):
        (line,) = _by_gid(zoom, f"state-{key}")
        assert line.get_ydata()[0] == levels[key]
    for key in ("low", "mid", "high"):
        (line,) = _by_gid(zoom, f"reference-{key}")
        assert line.get_ydata()[0] == refs[key]

    # overshoot peak at the measured instant and value
    (peak,) = _by_gid(zoom, "overshoot-peak")
    assert peak.get_xdata()[0] * scale == pytest.approx(row["peak_time_s"], rel=1e-9)
    assert peak.get_ydata()[0] == row["peak_value"]
    (otext,) = _by_gid(zoom, "overshoot-text")
    assert otext.get_text() == f"overshoot {row['overshoot_pct']:.3g} %"

    # settling band and instant
    (band,) = _by_gid(settle, "settling-band")
    if hasattr(band, "get_height"):  # a Rectangle (matplotlib >= 3.9)
        y = [band.get_y(), band.get_y() + band.get_height()]
    else:  # a Polygon
        y = np.asarray(band.get_xy())[:, 1]
    half = row["settling_band_pct"] / 100 * levels["amplitude"]
    assert min(y) == pytest.approx(row["final_level"] - half)
    assert max(y) == pytest.approx(row["final_level"] + half)
    (instant,) = _by_gid(settle, "settling-instant")
    assert instant.get_xdata()[0] * _unit_of(settle.get_xlabel()) + origin == pytest.approx(
        row["settled_at_s"], rel=1e-9)


def test_run_plot_shows_the_textbook_second_order_step(step_run):
    # Ogata, Modern Control Engineering, 5th ed., sec. 5-3: maximum overshoot of the
    # standard second-order step response is exp(-zeta*pi/sqrt(1-zeta^2)), peak time
    # pi/(wn*sqrt(1-zeta^2)).
    _, _, out, metrics = step_run
    fig = plot_run(out, None, metrics)
    zoom = fig.axes[1]
    zeta, wn = 0.5, 2 * math.pi * 50.0
    expected_pct = 100 * math.exp(-zeta * math.pi / math.sqrt(1 - zeta**2))
    (otext,) = _by_gid(zoom, "overshoot-text")
    shown = float(re.search(r"overshoot ([0-9.]+) %", otext.get_text()).group(1))
    assert shown == pytest.approx(expected_pct, abs=0.2)
    (peak,) = _by_gid(zoom, "overshoot-peak")
    tp = peak.get_xdata()[0] * _unit_of(zoom.get_xlabel())
    assert tp == pytest.approx(math.pi / (wn * math.sqrt(1 - zeta**2)), rel=0.01)


def test_first_order_rise_time_is_tau_ln9(tmp_path):
    # First-order step response 1 - exp(-t/tau): 10-90 % rise time tau*ln 9
    # (Ogata, Modern Control Engineering, 5th ed., sec. 5-2, first-order systems).
    tau = 2e-3
    system = simwave.System.parse(f"1/({tau}*s + 1)")
    step = simwave.generate("step", 100_000.0, 0.03, time=0.002)
    out = simulate(system, step)
    fig = plot_run(out, step, simwave.measure(out, reference=step), tmp_path / "rc.svg")
    zoom = fig.axes[1]
    (span,) = _by_gid(zoom, "rise-time-span")
    x0, x1 = span.get_xdata()
    assert (x1 - x0) * _unit_of(zoom.get_xlabel()) == pytest.approx(tau * math.log(9), rel=2e-3)
    svg = (tmp_path / "rc.svg").read_text(encoding="utf-8")
    assert "<svg" in svg and "rise time" in svg


@pytest.mark.filterwarnings("ignore::UserWarning")  # model-accuracy notes
def test_run_plot_from_execute_result_and_files(tmp_path):
    # The form `simwave run --plot` uses: output file, input file, execute()'s result dict.
    src = os.path.join(WAVEFORMS, "strain-step.csv")
    job = RunJob(system=simwave.System.parse("1/(0.2m*s + 1)"), source=src,
                 output=str(tmp_path / "out.csv"), metrics=str(tmp_path / "m.json"))
    result = execute(job)
    fig = plot_run(job.output, job.source, result, tmp_path / "run.png", transition=0)
    row = result["metrics"]["channels"][0]["transitions"][0]
    zoom = fig.axes[1]
    (text,) = _by_gid(zoom, "rise-time-text")
    assert text.get_text() == f"rise time {format_seconds(row['rise_time_s'])}"
    # the metrics JSON file written by the run works the same
    fig2 = plot_run(job.output, job.source, job.metrics)
    (text2,) = _by_gid(fig2.axes[1], "rise-time-text")
    assert text2.get_text() == text.get_text()


def test_input_channel_of_the_same_file(tmp_path):
    path = os.path.join(WAVEFORMS, "valve-actuator.h5")
    metrics = simwave.measure(path, reference_channel="command").to_dict()
    assert [c["name"] for c in metrics["channels"]] == ["position"]
    fig = plot_run(path, None, metrics, transition=1)
    overview = fig.axes[0]
    assert overview.get_ylabel() == "position (V)"
    assert [ln.get_gid() for ln in overview.get_lines()].count("input") == 1  # command
    zoom = [ax for ax in fig.axes if ax.get_title(loc="left").startswith("position: transition")]
    assert zoom and "transition 1 (falling)" in zoom[0].get_title(loc="left")
    (text,) = _by_gid(zoom[0], "rise-time-text")
    row = metrics["channels"][0]["transitions"][1]
    assert text.get_text() == f"fall time {format_seconds(row['fall_time_s'])}"


def test_input_of_very_different_range_gets_its_own_axis():
    system = simwave.System.parse("100/(1m*s + 1)")
    step = simwave.generate("step", 50_000.0, 0.02, time=0.002)
    out = simulate(system, step)
    fig = plot_run(out, step)  # measured here, with default options
    overview = fig.axes[0]
    assert [ln.get_gid() for ln in overview.get_lines()] == ["output"]
    twins = [ax for ax in fig.axes if "input, right axis" in ax.get_ylabel()]
    assert twins and [ln.get_gid() for ln in twins[0].get_lines()] == ["input"]


def test_run_plot_bad_channel_or_transition(step_run):
    _, step, out, metrics = step_run
    with pytest.raises(PlotError, match="transition 5 does not exist"):
        plot_run(out, step, metrics, transition=5)
    with pytest.raises(PlotError, match="no measured channel 'nope'"):
        plot_run(out, step, metrics, channel="nope")


# --------------------------------------------------------------------------- frequency plot
@pytest.mark.filterwarnings("ignore::UserWarning")  # model-accuracy notes
def test_frequency_plot_against_scipy_and_bilinear_zeros(tmp_path):
    # Butterworth: -3.01 dB at the cutoff (Williams & Taylor, Electronic Filter Design
    # Handbook, 4th ed., ch. 2); the bilinear transform maps s = infinity to z = -1, so an
    # all-pole 4th-order filter gets 4 zeros there (Oppenheim & Schafer, Discrete-Time
    # Signal Processing, 3rd ed., sec. 7.2.2).
    fc, rate = 1000.0, 8000.0
    system = simwave.System.design("butterworth", 4, fc, name="lp4")
    fig = plot_frequency(system, tmp_path / "f.png", rate=rate, method="bilinear")
    ax_m, ax_p, ax_s, ax_z = fig.axes
    assert ax_m.get_ylabel() == "magnitude (dB)"
    assert ax_p.get_ylabel() == "phase (degrees, unwrapped)"
    assert ax_p.get_xlabel() == "frequency (Hz)"
    assert ax_m.get_xscale() == "log"
    (analog,) = _by_gid(ax_m, "analog")
    (digital,) = _by_gid(ax_m, "discrete")
    f, db = analog.get_xdata(), analog.get_ydata()
    z, p, k = signal.buttap(4)
    b, a = signal.zpk2tf(z, p * 2 * np.pi * fc, k * (2 * np.pi * fc) ** 4)
    _, h = signal.freqs(b, a, worN=2 * np.pi * f)
    np.testing.assert_allclose(db, 20 * np.log10(np.abs(h)), atol=1e-9)
    assert np.interp(math.log(fc), np.log(f), db) == pytest.approx(-3.0103, abs=0.01)
    # the discrete curve stops below Nyquist and matches scipy's bilinear design
    fd = digital.get_xdata()
    assert fd.max() < rate / 2
    bz, az = signal.bilinear(b, a, fs=rate)
    _, hd = signal.freqz(bz, az, worN=fd, fs=rate)
    np.testing.assert_allclose(digital.get_ydata(), 20 * np.log10(np.abs(hd)), atol=1e-6)
    (nyq,) = _by_gid(ax_m, "nyquist")
    assert nyq.get_xdata()[0] == rate / 2
    # pole-zero maps: s-plane poles where scipy puts them, z-plane zeros at -1 (x4)
    (sp,) = _by_gid(ax_s, "s-poles")
    drawn = np.sort_complex(sp.get_xdata() + 1j * sp.get_ydata())
    np.testing.assert_allclose(drawn, np.sort_complex(p * 2 * np.pi * fc), rtol=1e-9)
    (zz,) = _by_gid(ax_z, "z-zeros")
    assert list(zz.get_xdata()) == pytest.approx([-1.0]) and "\u00d74" in [
        t.get_text() for t in ax_z.texts]
    (zp,) = _by_gid(ax_z, "z-poles")
    assert np.all(np.hypot(zp.get_xdata(), zp.get_ydata()) < 1)
    assert _by_gid(ax_z, "unit-circle")


def test_frequency_plot_without_rate_has_no_discrete_parts():
    system = simwave.System.parse("(s + 10)/(s^2 + 2*s + 100)")
    fig = plot_frequency(system)
    assert len(fig.axes) == 3
    ax_m = fig.axes[0]
    assert len(_by_gid(ax_m, "analog")) == 1
    assert not _by_gid(ax_m, "discrete") and not _by_gid(ax_m, "nyquist")
    (sz,) = _by_gid(fig.axes[2], "s-zeros")
    assert list(sz.get_xdata()) == [-10.0]


def test_z_plane_notes_roots_outside_the_view():
    # a ramp-invariant model of a low-pass filter far below Nyquist has zeros well outside
    # the unit circle: the view keeps the unit circle and names them instead
    system = simwave.System.design("bessel-magnitude", 4, 15.0)
    fig = plot_frequency(system, rate=2000.0)
    ax_z = fig.axes[3]
    zeros = system.discretize(2000.0, "ramp-invariant").zpk[0]
    far = zeros[np.abs(zeros) > 1.35]
    assert far.size
    (note,) = _by_gid(ax_z, "z-outside")
    assert f"{far.real.min():.4g}" in note.get_text()


# --------------------------------------------------------------------------- batch chart
ROWS = [
    {"input": "in/a.csv", "system": "s1", "channel": "y", "status": "ok",
     "overshoot_pct_worst": 1.5, "settling_time_s_longest": 0.020, "not_settled": 0},
    {"input": "in/a.csv", "system": "s2", "channel": "y", "status": "ok",
     "overshoot_pct_worst": 10.0, "settling_time_s_longest": None, "not_settled": 3},
    {"input": "in/b.csv", "system": "s1", "channel": "y", "status": "ok",
     "overshoot_pct_worst": 2.5, "settling_time_s_longest": 0.040, "not_settled": 0},
    {"input": "in/b.csv", "system": "s2", "channel": "y", "status": "ok",
     "overshoot_pct_worst": 11.0, "settling_time_s_longest": 0.080, "not_settled": 0},
    {"input": "in/c.csv", "system": "s2", "channel": None, "status": "failed",
     "overshoot_pct_worst": None, "settling_time_s_longest": None},
]


def test_batch_chart_bars_are_the_summary_values(tmp_path):
    fig = plot_batch(ROWS, tmp_path / "cmp.svg")
    over, settle = fig.axes
    assert over.get_title(loc="left") == "overshoot, worst (%)"
    assert settle.get_title(loc="left") == "settling time, longest (ms)"
    assert [t.get_text() for t in over.get_xticklabels()] == ["a.csv", "b.csv"]
    s1 = [b.get_height() for b in over.patches if b.get_gid() == "bars:s1"]
    s2 = [b.get_height() for b in over.patches if b.get_gid() == "bars:s2"]
    assert s1 == [1.5, 2.5] and s2 == [10.0, 11.0]
    times = [b.get_height() for b in settle.patches if b.get_gid() == "bars:s2"]
    assert times == pytest.approx([0.0, 80.0])  # ms; the unsettled one drawn empty ...
    assert "never\nsettled" in [t.get_text() for t in settle.texts]  # ... and said so
    assert sorted(t.get_text() for t in fig.legends[0].get_texts()) == ["s1", "s2"]
    svg = (tmp_path / "cmp.svg").read_text(encoding="utf-8")
    assert "overshoot, worst" in svg


def test_batch_chart_reads_summary_files(tmp_path):
    import csv
    import json

    cols = ["input", "system", "channel", "status", "overshoot_pct_worst",
            "settling_time_s_longest", "not_settled"]
    with open(tmp_path / "summary.csv", "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(cols)
        for r in ROWS:
            w.writerow(["" if r.get(c) is None else r.get(c) for c in cols])
    (tmp_path / "summary.json").write_text(json.dumps({"rows": ROWS}), encoding="utf-8")
    from_csv = summary_rows(str(tmp_path / "summary.csv"))
    from_json = summary_rows(str(tmp_path / "summary.json"))
    assert [r["overshoot_pct_worst"] for r in from_csv] == [r["overshoot_pct_worst"]
                                                           for r in from_json]
    fig = plot_batch(str(tmp_path / "summary.csv"), metrics=["overshoot_pct_worst"])
    assert len([b for b in fig.axes[0].patches if b.get_gid() == "bars:s2"]) == 2
    with pytest.raises(PlotError, match="no summary column 'nope'"):
        plot_batch(ROWS, metrics=["nope"])


# --------------------------------------------------------------------------- bad targets
@pytest.mark.parametrize("name", ["plot.pdf", "plot", "plot.PNG.txt"])
def test_unknown_extension_is_refused(tmp_path, name):
    with pytest.raises(PlotError, match=r"use a file name ending in \.png or \.svg"):
        check_plot_path(tmp_path / name)


def test_unwritable_place_is_refused_and_nothing_is_written(tmp_path, step_run):
    _, step, out, metrics = step_run
    blocker = tmp_path / "file.txt"
    blocker.write_text("keep me", encoding="utf-8")
    with pytest.raises(PlotError, match="does not exist"):
        plot_run(out, step, metrics, blocker / "p.png")
    with pytest.raises(PlotError, match="is a directory"):
        plot_run(out, step, metrics, tmp_path)
    assert sorted(os.listdir(tmp_path)) == ["file.txt"]
    assert blocker.read_text(encoding="utf-8") == "keep me"


def test_cli_plot_options(tmp_path):
    runner = CliRunner()
    valve = os.path.join(WAVEFORMS, "valve-actuator.h5")
    ok = runner.invoke(main, ["measure", valve, "--input-channel", "command",
                              "--plot", str(tmp_path / "m.png")])
    assert ok.exit_code == 0, ok.output
    assert (tmp_path / "m.png").read_bytes()[:4] == b"\x89PNG"
    ok = runner.invoke(main, ["inspect", "-s", "1/(1m*s + 1)", "--rate", "10k",
                              "--plot", str(tmp_path / "i.svg")])
    assert ok.exit_code == 0, ok.output
    assert "<svg" in (tmp_path / "i.svg").read_text(encoding="utf-8")

    for args in (["inspect", "-s", "1/(s+1)", "--plot", str(tmp_path / "x.pdf")],
                 ["measure", valve, "--input-channel", "command", "--metrics",
                  str(tmp_path / "m.json"), "--plot", str(tmp_path / "no" / "m.png")]):
        bad = runner.invoke(main, args)
        assert bad.exit_code == 2
        lines = bad.output.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("Error: ")
        assert "Traceback" not in bad.output
    assert not (tmp_path / "m.json").exists()  # refused before any work
