"""Step records measured from the output alone (no reference input): the issue's examples
of a step at the first sample and of a record too short to settle, with expected values.

Truth: the closed-form step response of a second-order low-pass, H(s) = wn^2 / (s^2 +
2 zeta wn s + wn^2), here fn = 20 Hz and zeta = 0.707: maximum overshoot exp(-zeta pi /
sqrt(1 - zeta^2)) = 4.33 %, peak time pi / wd, 10-90 % rise time and 2 % settling time read
from the closed form (K. Ogata, *Modern Control Engineering*, 5th ed., sec. 5-3; computed in
tests/truth.py). Without a reference input the time origin is the output's own 10 %
instant, so the settling and peak times are the truth's less its 10 % instant. The
tolerances allow for the sampling (10 kHz: 0.1 ms) and for the ramp-invariant model (exact
for inputs linear between samples: the step from rest is a ramp over the sample before t0,
which moves every instant by the same half sample).
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
from simwave.measure.stages.output_aligned import leaves_rest
from truth import metrics as closed_form
from truth import overshoot_pct

FN = 20.0
WN = 2 * math.pi * FN
ZETA = 0.707
SYSTEM = "(2*pi*20)^2/(s^2+1.414*2*pi*20*s+(2*pi*20)^2)"
TRUTH = closed_form("second", zeta=ZETA, wn=WN)
RATE = 10_000.0
T = 1.0 / RATE


def cli(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def _run(tmp_path, signal: str, system: str = SYSTEM) -> str:
    out = tmp_path / "y.csv"
    r = cli("run", signal, "-s", system, "-o", out)
    assert r.exit_code == 0, r.output
    return str(out)


def _measure(path: str) -> tuple[dict, str]:
    """The JSON and the terminal text of ``simwave measure PATH`` (no reference)."""
    r = cli("measure", path, "--json")
    assert r.exit_code == 0, r.output
    text = cli("measure", path)
    assert text.exit_code == 0, text.output
    return json.loads(r.output), text.output


def _only_row(d: dict) -> dict:
    ch = d["channels"][0]
    assert ch["kind"] == "transitions", ch.get("null_reasons")
    assert len(ch["transitions"]) == 1, ch["transitions"]
    return ch["transitions"][0]


def test_truth_overshoot_is_the_textbook_formula():
    # Ogata sec. 5-3: Mp = exp(-zeta pi / sqrt(1 - zeta^2)); 4.33 % at zeta 0.707
    assert TRUTH["overshoot_pct"] == pytest.approx(overshoot_pct(ZETA), abs=0.01)
    assert TRUTH["overshoot_pct"] == pytest.approx(4.33, abs=0.01)


# issue 11, item 1: a step at the first sample, measured from the output alone -----------
def test_step_at_the_first_sample_output_only_from_the_command_line(tmp_path):
    d, text = _measure(_run(tmp_path, "step:rate=10k,duration=0.2"))
    row = _only_row(d)
    # the at-rest convention gives the initial level (0), the settled end the final (H(0) = 1)
    assert row["initial_level"] == 0.0
    assert "at rest" in d["channels"][0]["state_levels"]["method"]
    assert row["final_level"] == pytest.approx(1.0, abs=1e-6)
    assert row["overshoot_pct"] == pytest.approx(TRUTH["overshoot_pct"], abs=0.05)
    assert row["rise_time_s"] == pytest.approx(TRUTH["rise_time_s"], abs=2 * T)
    assert row["settling_time_s"] == pytest.approx(
        TRUTH["settling_time_s"] - TRUTH["start_s"], abs=3 * T)
    wd = WN * math.sqrt(1 - ZETA**2)
    assert row["peak_time_s"] == pytest.approx(math.pi / wd - TRUTH["start_s"], abs=3 * T)
    assert row["delay_s"] is None and row["null_reasons"]["delay_s"]
    assert not row.get("bounds")
    assert any("at-rest convention" in n for n in d["notes"])
    # the terminal table shows the same numbers
    table = next(x for x in text.splitlines() if x.strip().startswith("0  rising"))
    assert "4.32" in table and "17.0" in table


def test_step_at_the_first_sample_output_only_through_the_api():
    y = simwave.simulate(System.parse(SYSTEM), Waveform(np.ones(2000), RATE))
    row = _only_row(simwave.measure(y).to_dict())
    assert row["initial_level"] == 0.0
    assert row["overshoot_pct"] == pytest.approx(TRUTH["overshoot_pct"], abs=0.05)
    assert row["rise_time_s"] == pytest.approx(TRUTH["rise_time_s"], abs=2 * T)
    # without the convention the record holds no initial state: nothing from it is a value
    d = simwave.measure(y, rest_before_record=False).to_dict()
    for r in d["channels"][0].get("transitions") or []:
        assert r["initial_level"] is None and r["null_reasons"]["initial_level"]
        assert r["overshoot_pct"] is None and r["null_reasons"]["overshoot_pct"]


def test_later_step_output_only_is_measured_on_its_settled_levels(tmp_path):
    d, _ = _measure(_run(tmp_path, "step:rate=10k,duration=0.3,time=0.05"))
    row = _only_row(d)
    assert row["initial_level"] == pytest.approx(0.0, abs=1e-9)
    assert row["final_level"] == pytest.approx(1.0, abs=1e-6)
    assert row["overshoot_pct"] == pytest.approx(TRUTH["overshoot_pct"], abs=0.05)
    assert row["rise_time_s"] == pytest.approx(TRUTH["rise_time_s"], abs=2 * T)
    assert not any("at-rest convention" in n for n in d["notes"])


# issue 11, item 4: a record too short to settle, from the output alone --------------------
@pytest.mark.parametrize("signal", ["step:rate=10k,duration=0.03",
                                    "step:rate=10k,duration=0.05,time=0.01"])
def test_record_too_short_to_settle_output_only_gives_no_level_as_a_value(tmp_path, signal):
    # the record ends before the first peak (pi / wd = 35 ms after the step) or at it: the
    # output is still moving, its final level is not established, and nothing measured
    # against it is a value; each says why, in the JSON and on the terminal
    d, text = _measure(_run(tmp_path, signal))
    row = _only_row(d)
    for key in ("final_level", "overshoot_pct", "rise_time_s", "settling_time_s"):
        assert row[key] is None, key
        assert "not established" in row["null_reasons"][key], key
    assert row["initial_level"] == pytest.approx(0.0, abs=1e-9)
    assert "#0 overshoot_pct: n/a - final level not established" in text
    assert "#0 final_level: n/a - final level not established" in text
    table = next(x for x in text.splitlines() if x.strip().startswith("0  rising"))
    assert "4.3" not in table  # no overshoot shown with more confidence than the record has


def test_still_moving_end_is_no_bound_without_the_input(tmp_path):
    # a first-order lag cut short (tau = 1/(2 pi 5) s, 40 ms after the step it is at
    # 1 - exp(-0.04 * 2 pi 5) = 71.5 %, common practice): with the input the last value is
    # a lower bound of the final level; from the output alone an underdamped output past
    # its final level moves the same way, so the level is not established
    d, _ = _measure(_run(tmp_path, "step:rate=10k,duration=0.05,time=0.01",
                         "1/(s/(2*pi*5)+1)"))
    row = _only_row(d)
    assert row["final_level"] is None and "not established" in row["null_reasons"]["final_level"]
    assert not (row.get("bounds") or {}).get("final_level")
    detail = row["final_level_detail"]
    assert detail["end_median"] == pytest.approx(1 - math.exp(-0.04 * 2 * math.pi * 5), abs=0.02)


def test_sine_and_held_offset_are_not_steps_from_rest():
    t = np.arange(8000) / 8000.0
    d = simwave.measure(Waveform(np.sin(2 * np.pi * 50 * t), 8000.0)).to_dict()
    assert d["channels"][0]["kind"] == "sine"
    # a record that starts at a held level other than 0 did not start from rest
    y = 1.0 + (t > 0.5)
    d = simwave.measure(Waveform(y, 8000.0)).to_dict()
    assert not any("at-rest convention" in n for n in d["notes"])
    row = _only_row(d)
    assert row["initial_level"] == pytest.approx(1.0) and row["final_level"] == pytest.approx(2.0)


def test_leaves_rest():
    n = 4000
    k = np.arange(n, dtype=float)
    growth = np.minimum((k / 300.0) ** 2, 1.0)  # a response from rest at sample 0
    assert leaves_rest(growth[:, None])
    later = np.where(k < 1000, 0.0, np.minimum(((k - 1000) / 300.0) ** 2, 1.0))
    assert not leaves_rest(later[:, None])
    # hum at rest before a later step: it crosses the band around 0 and comes back
    hum = 0.03 * np.sin(2 * np.pi * k / 167.0)
    assert not leaves_rest((later + hum)[:, None])
    assert not leaves_rest((1.0 + growth)[:, None])  # starts away from 0


def test_settled_state_longer_than_the_samples_held():
    # a first-order lag from rest (tau 50 ms, 1 - exp(-t / tau), common practice) held for
    # 2 s: its state segment is longer than the samples a segment keeps
    # (max_window_samples), which must not make it look like a turn of slow ringing
    k = np.arange(20_000)
    y = 1 - np.exp(-k / RATE / 0.05) + 1e-4 * np.random.default_rng(3).standard_normal(k.size)
    d = simwave.measure(Waveform(y, RATE), max_window_samples=2000).to_dict()
    row = _only_row(d)
    assert row["initial_level"] == 0.0
    assert row["final_level"] == pytest.approx(1.0, abs=1e-3)
    assert row["rise_time_s"] == pytest.approx(0.05 * math.log(9), abs=2e-3)
