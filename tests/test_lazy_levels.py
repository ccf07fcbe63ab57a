"""The histogram's state levels are computed when first read, not before.

An output measured beside a reference input of transitions has its levels read off the
input-aligned segments; its histogram levels (two half modes, about a quarter of
measuring a short record) are then never needed. Deferring them must not change any
number: every measurement here is compared, as JSON text, with the same measurement
computing the levels at once (as before).
"""

from __future__ import annotations

import importlib
import json

import numpy as np
import pytest

import simwave
from simwave.measure.stages.work import Channel

state_levels_stage = importlib.import_module("simwave.measure.stages.state_levels")


def _channel() -> Channel:
    return Channel("y", "", 0.0, 1.0, 0.5, 0.5)


def test_computed_once_when_first_read():
    calls = []
    ch = _channel()
    ch.defer_levels(lambda: calls.append(1) or ("L", 0.75, (1, 2, 3)))
    assert not calls
    assert ch.two_state_fraction == 0.75 and ch.levels == "L" and ch.refs == (1, 2, 3)
    assert len(calls) == 1


def test_a_value_set_before_the_first_read_is_kept():
    calls = []
    ch = _channel()
    ch.defer_levels(lambda: calls.append(1) or ("L", 0.75, (1, 2, 3)))
    ch.levels = "mine"
    assert ch.levels == "mine" and not calls  # reading what was set computes nothing
    assert ch.refs == (1, 2, 3) and len(calls) == 1  # the others as if computed first
    assert ch.levels == "mine"


def test_never_computed_when_all_three_are_set():
    ch = _channel()
    ch.defer_levels(lambda: pytest.fail("computed although replaced"))
    ch.levels, ch.refs, ch.two_state_fraction = "a", (0, 1, 2), 0.5
    assert (ch.levels, ch.refs, ch.two_state_fraction) == ("a", (0, 1, 2), 0.5)


def _eager(monkeypatch):
    # as before: every channel's histogram filled in the state-levels pass, and its levels
    # computed at once
    def defer_levels(self, compute):
        self._pending = None
        self._levels, self._two_state_fraction, self._refs = compute()
    monkeypatch.setattr(Channel, "defer_levels", defer_levels)
    monkeypatch.setattr(state_levels_stage, "histogram_later", lambda w: set())


RATE = 10_000.0


def _cases():
    """(name, input, system) pairs of the kinds measured beside a reference (invented)."""
    rng = np.random.default_rng(11)
    t = np.arange(4000) / RATE
    step = (t >= 0.05).astype(float)
    pulses = ((t % 0.1) < 0.03).astype(float)
    stairs = np.floor(t / 0.08) * 0.25
    sine = np.sin(2 * np.pi * 50 * t)
    flat = np.full(t.size, 0.3) + 1e-3 * rng.standard_normal(t.size)
    lag = "1/(2m*s + 1)"
    ringing = "(2*pi*60)^2/(s^2 + 2*0.15*2*pi*60*s + (2*pi*60)^2)"
    return [
        ("step, lag", step, lag),
        ("noisy step, ringing", step + 2e-3 * rng.standard_normal(t.size), ringing),
        ("pulse train, ringing", pulses, ringing),
        ("pulse train, notch (output ignores the input's levels)", pulses,
         "(s^2 + (2*pi*5)^2)/(s^2 + 2*pi*5*s + (2*pi*5)^2)"),
        ("pulse train, high-pass (back to 0 after every edge: the input's levels are not "
         "followed, the histogram's are kept)", pulses, "s/(s + 2*pi*500)"),
        ("staircase, lag", stairs, lag),
        ("sine, ringing", sine, ringing),
        ("no transition in the input", flat, lag),
        ("step at the first sample", np.ones(t.size), ringing),
    ]


@pytest.mark.parametrize("method", ["histogram", "minmax"])
@pytest.mark.parametrize("case", range(len(_cases())))
def test_same_numbers_as_computing_the_levels_at_once(case, method, monkeypatch):
    name, x, system = _cases()[case]
    src = simwave.Waveform(x[:, None], RATE)
    y = simwave.simulate(system, src)

    def measured() -> str:
        res = simwave.measure(y, reference=src, system=system, rest_before_record=True,
                              state_level_method=method)
        return json.dumps(res.to_dict(), sort_keys=True, default=str)

    lazy = measured()
    with monkeypatch.context() as m:
        _eager(m)
        eager = measured()
    assert lazy == eager, name


def test_some_cases_fill_the_output_histogram_later(monkeypatch):
    # the comparison above covers both ways: outputs whose histogram is never filled, and
    # outputs whose levels are read after all (filled then, in a pass of their own)
    late = []
    real = state_levels_stage.histogram_levels

    def watching(w, hist, c):
        late.append(c in w.hist_later)
        return real(w, hist, c)

    monkeypatch.setattr(state_levels_stage, "histogram_levels", watching)
    for _name, x, system in _cases():
        src = simwave.Waveform(x[:, None], RATE)
        simwave.measure(simwave.simulate(system, src), reference=src, system=system,
                        rest_before_record=True)
    assert any(late) and not all(late)


def test_the_output_beside_a_step_input_needs_no_histogram_levels(monkeypatch):
    computed = []
    real = state_levels_stage.histogram_levels

    def counting(w, hist, c):
        computed.append(c)
        return real(w, hist, c)

    monkeypatch.setattr(state_levels_stage, "histogram_levels", counting)
    t = np.arange(4000) / RATE
    src = simwave.Waveform((t >= 0.05).astype(float)[:, None], RATE)
    y = simwave.simulate("1/(2m*s + 1)", src)
    res = simwave.measure(y, reference=src, system="1/(2m*s + 1)", rest_before_record=True)
    assert computed == [1]  # the reference's (channel 1 of outputs + references) only
    edge = res.to_dict()["channels"][0]["transitions"][0]
    # a first-order lag's 10-90 % rise time is tau ln 9 (Ogata, Modern Control
    # Engineering, 5th ed., sec. 5-2); sampled at 10 kHz, to within a sample
    assert edge["rise_time_s"] == pytest.approx(2e-3 * np.log(9), abs=1e-4)


segments_module = importlib.import_module("simwave.measure.segments")
source_module = importlib.import_module("simwave.measure.source")


@pytest.mark.parametrize("case", range(len(_cases())))
def test_turning_point_search_left_for_later_gives_the_same_numbers(case, monkeypatch):
    # a segment that is a view of a record held in memory has its turning-point search run
    # only if its result is read (an end that has not settled); measured as before (every
    # search at once: no array counted as outliving the pass) the JSON is the same
    name, x, system = _cases()[case]
    src = simwave.Waveform(x[:, None], RATE)
    y = simwave.simulate(system, src)

    def measured() -> str:
        res = simwave.measure(y, reference=src, system=system, rest_before_record=True)
        return json.dumps(res.to_dict(), sort_keys=True, default=str)

    lazy = measured()
    with monkeypatch.context() as m:
        m.setattr(source_module.MeasureSource, "lasting_output_arrays", lambda self: [])
        eager = measured()
    assert lazy == eager, name


def test_turning_point_searches_skipped_and_run_late(monkeypatch):
    # over the cases, some deferred searches are never run (settled ends) and some run when
    # read (ends still ringing, whose level is extrapolated), so both ways are compared above
    deferred = []
    real_analyse = segments_module.analyse_segment

    def analyse(seg, *a, **k):
        real_analyse(seg, *a, **k)
        if seg._turning_later is not None:
            deferred.append(seg)

    monkeypatch.setattr(segments_module, "analyse_segment", analyse)
    for _name, x, system in _cases():
        src = simwave.Waveform(x[:, None], RATE)
        simwave.measure(simwave.simulate(system, src), reference=src, system=system,
                        rest_before_record=True)
    never = sum(1 for s in deferred if s._turning_later is not None)
    late = len(deferred) - never
    assert never > 0 and late > 0
