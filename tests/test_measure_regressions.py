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


# 2b. staircases without a reference input: transitions from the output itself -----------
@pytest.mark.parametrize("hum, noise", [(0.0, 0.0), (0.01, 0.002)])
def test_staircase_without_a_reference(hum, noise):
    # Every step between adjacent settled levels is a transition with its own levels, found
    # from the output (IEEE Std 181-2011's two-state definitions applied per transition). The
    # disturbance (hum 0.01 + noise 0.002: RMS 0.0075) is under a tenth of the smallest
    # step (1.0). Truth: Ogata sec. 5-3 closed form (tests/truth.py); without an input the
    # settling time runs from the output's own 10 % instant.
    x = _staircase()
    y = simulate_staircase(x, hum, noise)
    ch = simwave.measure(y).to_dict()["channels"][0]
    assert ch["kind"] == "transitions"
    rows = ch["transitions"]
    assert len(rows) == len(STAIRS) - 1, [(r["initial_level"], r["final_level"]) for r in rows]
    for row, a, b in zip(rows, STAIRS, STAIRS[1:], strict=False):
        assert row["direction"] == ("rising" if b > a else "falling")
        rms = row["disturbance_rms"]
        for key, truth in (("initial_level", a), ("final_level", b)):
            u = row["uncertainty"][key] or 0.0
            assert abs(row[key] - truth) <= 4 * u + 3 * rms + 1e-3
        assert row["time_origin"].startswith("output transition start")
        dur = row["rise_time_s" if b > a else "fall_time_s"]
        assert abs(dur - TRUTH["rise_time_s"]) <= 2 * T + (
            row["uncertainty"]["transition_duration_s"] or 0.0)
        assert abs(row["overshoot_pct"] - TRUTH["overshoot_pct"]) <= (
            row["uncertainty"]["overshoot_pct"] + 0.05)
        # the truth for the band narrowed and widened by the disturbance's peak, counted from
        # the 10 % instant (which the disturbance moves by up to its instant uncertainty)
        d_pct = 100.0 * row["disturbance_peak"] / abs(b - a)
        if d_pct >= 2.0:  # the disturbance alone reaches the band: no value, a reason
            assert row["settling_time_s"] is None
            assert "disturbance" in row["null_reasons"]["settling_time_s"]
            continue
        wide = closed_form("second", zeta=ZETA, wn=WN, band_pct=2.0 + d_pct)
        narrow = closed_form("second", zeta=ZETA, wn=WN, band_pct=max(2.0 - d_pct, 0.05))
        slack = 2 * T + 3 * (row["uncertainty"]["crossing_50_s"] or 0.0)
        assert (wide["settling_time_s"] - TRUTH["start_s"] - slack
                <= row["settling_time_s"]
                <= narrow["settling_time_s"] - TRUTH["start_s"] + slack)


def simulate_staircase(x: Waveform, hum: float, noise: float) -> Waveform:
    """The staircase through the 20 Hz second-order low-pass, with hum and noise added."""
    y = simwave.simulate(System.parse(SYSTEM), x).data[:, 0]
    t = np.arange(y.size) / RATE
    rng = np.random.default_rng(7)
    return Waveform(y + hum * np.sin(2 * np.pi * 50 * t + 0.4)
                    + noise * rng.standard_normal(y.size), RATE)


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


# 8. tones with a level change inside the steady-state window -----------------------------
LOWPASS_100 = "(2*pi*100)^2/(s^2+1.414*2*pi*100*s+(2*pi*100)^2)"
TONES_HZ = (50.0, 200.0, 400.0)


def _tones_with_a_step(at_s: float, height: float = 0.5) -> Waveform:
    """Three tones of amplitude 1 (1 s at 10 kHz) with a level change at ``at_s``: inside
    the default steady-state window (the last quarter) when at_s > 0.75."""
    x = simwave.generate("multitone", RATE, 1.0, frequencies=list(TONES_HZ),
                         amplitude=[1.0] * len(TONES_HZ))
    data = x.data[:, 0].copy()
    data[int(round(at_s * RATE)):] += height
    return Waveform(data, RATE)


def _expected_gain_phase(f_hz: float) -> tuple[float, float]:
    """The analog H(j 2 pi f) (scipy.signal.freqs) times the ramp-invariant model's input
    interpolation: a sampled sine read as straight lines between samples has its amplitude
    scaled by sinc^2(f / rate) and its phase kept (the triangle hold's spectrum; Franklin,
    Powell & Workman, *Digital Control of Dynamic Systems*, 3rd ed., ch. 6; from memory)."""
    from scipy import signal

    wn = 2 * math.pi * 100.0
    _, h = signal.freqs([wn**2], [1.0, 1.414 * wn, wn**2], worN=[2 * math.pi * f_hz])
    hold = np.sinc(f_hz / RATE) ** 2
    return 20 * math.log10(abs(h[0]) * hold), math.degrees(np.angle(h[0]))


def test_tone_gains_with_a_level_change_in_the_steady_window(tmp_path):
    # Before: a false 15.9 Hz "tone" (the step's spectrum) flagged, and the 400 Hz gain off
    # by 0.17 dB and flagged, with no reason given. Now the window is searched for the
    # level change, the tones are fitted on the part after it once H(s) has answered it,
    # and the result says which part and why.
    x = _tones_with_a_step(0.85)
    system = System.parse(LOWPASS_100)
    y = simwave.simulate(system, x)
    ch = simwave.measure(y, reference=x, system=system).to_dict()["channels"][0]
    assert ch["kind"] == "multitone"
    freqs = [t["frequency_hz"] for t in ch["tones"]]
    assert freqs == pytest.approx(TONES_HZ, abs=1e-6)
    for tone in ch["tones"]:
        gain, phase = _expected_gain_phase(tone["frequency_hz"])
        assert tone["gain_db"] == pytest.approx(gain, abs=0.005)
        assert tone["phase_deg"] == pytest.approx(phase, abs=0.05)
    assert not [r["quantity"] for r in ch["comparison"] if r["flag"]]
    fw = ch["fit_window"]
    assert [c["time_s"] for c in fw["level_changes"]] == pytest.approx([0.85], abs=2 * T)
    assert fw["level_changes"][0]["change"] == pytest.approx(0.5, abs=0.01)
    assert 0.85 < fw["start_s"] < 0.9 and fw["end_s"] == pytest.approx(1.0 - T, abs=T)
    assert "level change at 0.85" in fw["note"]
    # on the terminal: the run line and measure's notes say it
    simwave.write(tmp_path / "in.csv", x)
    r = cli("run", tmp_path / "in.csv", "-s", LOWPASS_100, "-o", tmp_path / "out.csv",
            "--metrics", tmp_path / "m.json")
    assert r.exit_code == 0, r.output
    assert "level change at 0.85" in r.output
    r = cli("measure", tmp_path / "out.csv", "--reference", tmp_path / "in.csv",
            "-s", LOWPASS_100)
    assert r.exit_code == 0, r.output
    assert "level change at 0.85" in r.output and "FLAG" not in r.output


def test_tone_gains_without_a_clean_part_are_null_with_the_reason(tmp_path):
    # The change 10 ms into the window leaves too little before it for two periods of 50 Hz,
    # and without H(s) the part after it cannot be trusted (how long the output answers the
    # change is not known): no gains, and the reason on the terminal and in the JSON.
    x = _tones_with_a_step(0.76)
    y = simwave.simulate(System.parse(LOWPASS_100), x)
    ch = simwave.measure(y, reference=x, signal_kind="multitone").to_dict()["channels"][0]
    assert ch["tones"] == []
    why = ch["null_reasons"]["tones"]
    assert "level change at 0.76" in why and "long enough" in why
    simwave.write(tmp_path / "in.csv", x)
    simwave.write(tmp_path / "out.csv", y)
    r = cli("measure", tmp_path / "out.csv", "--reference", tmp_path / "in.csv",
            "--kind", "multitone")
    assert r.exit_code == 0, r.output
    assert "level change at 0.76" in r.output
