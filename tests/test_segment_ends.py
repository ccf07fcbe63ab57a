"""Where an output state ends when the output answers its input late, against exact responses.

With a reference input, each output segment (one state) must end where the OUTPUT starts
to answer the next input transition, not where the input starts to move: a lagging or
delayed system goes on settling toward its level after the input's next edge has begun.
These checks build the exact continuous response of rational H(s) (with and without dead
time) to pulse trains of linear ramps, in closed form from the partial-fraction expansion
of H(s) (residues from scipy.signal.residue, the reference library; inverse Laplace
transform of the step and ramp responses term by term: A. V. Oppenheim & A. S. Willsky,
*Signals and Systems*, 2nd ed., sec. 9.3, from memory), checked against scipy.signal.lsim,
sample it, measure it, and compare the settling time with the exact last exit from the band
found by root finding (scipy.optimize.brentq).

The exact reference for a transition k is the response to the input's transitions up to k
only (the input held after them: linearity and time invariance): its last exit from the
band final level +/- band % of the amplitude is the settling instant the record would show
if nothing came after. The measured value must equal it (within one sample period) when
that instant lies before the output starts to answer the next transition, and be null with
the reason when it does not.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal
from scipy.optimize import brentq

from simwave import Waveform
from simwave.measure import measure


class RampTrainResponse:
    """Exact response of H(s) e^(-s dead) to base + sum_k a_k * (linear edge from t_k over T_k).

    H strictly proper with distinct poles: step response s(t) = H(0) + sum r_i / p_i e^(p_i t),
    ramp response rho(t) = H(0) t + sum r_i / p_i^2 (e^(p_i t) - 1) (partial fractions,
    Oppenheim & Willsky sec. 9.3); a linear edge of duration T is (rho(t) - rho(t - T)) / T.
    """

    def __init__(self, b, a, base: float, edges: list, dead: float = 0.0) -> None:
        self.r, self.p, direct = signal.residue(b, a)
        assert not np.any(direct)
        self.h0 = float(np.polyval(b, 0.0) / np.polyval(a, 0.0))
        self.base, self.edges, self.dead = base, edges, dead

    def _ramp(self, t: np.ndarray) -> np.ndarray:
        tp = np.maximum(t, 0.0)
        modes = sum(r / p**2 * (np.exp(p * tp) - 1.0) for r, p in zip(self.r, self.p, strict=True))
        return np.where(t > 0, self.h0 * tp + np.real(modes), 0.0)

    def y(self, t, upto: int | None = None) -> np.ndarray:
        t = np.asarray(t, dtype=float) - self.dead
        out = np.full(t.shape, self.base * self.h0)
        for k, (tk, dur, amp) in enumerate(self.edges):
            if upto is not None and k > upto:
                break
            out = out + amp / dur * (self._ramp(t - tk) - self._ramp(t - tk - dur))
        return out

    def input(self, t) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        return self.base + sum(a / d * np.clip(t - tk, 0.0, d) for tk, d, a in self.edges)

    def last_exit(self, k: int, level: float, band: float, a: float, b: float) -> float:
        """Last instant in [a, b] at which the response to edges 0..k crosses level +/- band."""
        tt = np.linspace(a, b, 100_001)
        best = -math.inf
        for lev in (level - band, level + band):
            v = self.y(tt, upto=k) - lev
            for i in np.flatnonzero(v[:-1] * v[1:] < 0):
                f = lambda x, lev=lev: float(self.y(np.array([x]), upto=k)[0]) - lev  # noqa: E731
                best = max(best, brentq(f, tt[i], tt[i + 1], xtol=1e-14))
        return best

    def departure(self, k: int, threshold: float, a: float, b: float) -> float:
        """First instant in [a, b] where the next transition's part of the response exceeds
        ``threshold`` (the output has started to answer it)."""
        tt = np.linspace(a, b, 100_001)
        dev = np.abs(self.y(tt) - self.y(tt, upto=k))
        return float(tt[int(np.argmax(dev > threshold))])


def pulse_edges(first: float, width: float, period: float, count: int, ramp: float, amp: float):
    """Linear ramps of a pulse train (0-100 % duration ``ramp``, 50 % instants at the pulse
    times), as (start, duration, amplitude) triples."""
    edges = []
    for p in range(count):
        t50 = first + p * period
        edges += [(t50 - ramp / 2, ramp, amp), (t50 + width - ramp / 2, ramp, -amp)]
    return edges


def check_lsim(resp: RampTrainResponse, b, a, t_end: float) -> None:
    # the closed form against scipy.signal.lsim (exact for a piecewise-linear input on a grid
    # holding its corners), both from rest
    tt = np.arange(0.0, t_end, 2e-5)
    _, ys, _ = signal.lsim((b, a), resp.input(tt) - resp.base, tt)
    ref = resp.y(tt + resp.dead) - resp.base * resp.h0
    assert np.max(np.abs(ys - ref)) < 1e-6 * max(abs(e[2]) for e in resp.edges)


def measure_train(resp: RampTrainResponse, b, a, t_end: float, fs: float,
                  band_pct: float) -> dict:
    """The exact response (checked against lsim) sampled at fs, measured against its input;
    returns the channel's dict after checking the transitions alternate rising/falling."""
    check_lsim(resp, b, a, t_end)
    t = np.arange(int(t_end * fs)) / fs
    d = measure(
        Waveform(resp.y(t), fs), Waveform(resp.input(t), fs), settling_band_pct=band_pct
    ).to_dict()
    ch = d["channels"][0]
    assert [r["direction"] for r in ch["transitions"]] == ["rising", "falling"] * 3
    return ch


def test_butterworth_pulse_train_settles_before_its_own_next_edge():
    # The weigh-station geometry of the demo without hum and noise: a 4th-order Butterworth
    # low-pass at 15 Hz (scipy.signal.butter, analog), 2 kg parcels on 0.35 kg for 0.22 s
    # every 0.4 s, 15 ms ramps, 2 kHz, settling band +/-0.1 %. The output enters the band
    # about 181 ms after each arrival and moves a tenth of the band toward the next state
    # only ~4 ms after the next (falling) input edge starts: cut at the input's edge, the
    # segment would end before its last swing inside the band shows.
    fs, band_pct = 2000.0, 0.1
    b, a = signal.butter(4, 2 * math.pi * 15.0, analog=True)
    edges = pulse_edges(0.1, 0.22, 0.4, 3, 0.015, 2.0)
    resp = RampTrainResponse(b, a, 0.35, edges)
    t_end = 1.6
    ch = measure_train(resp, b, a, t_end, fs, band_pct)
    tr = ch["transitions"]
    assert ch["state_levels"]["basis"] == "input-aligned"
    # the output leaves its rest level by a tenth of the band ~4 ms after the input starts
    # to move (its ramp response grows as t^5 at first: order 4 plus the ramp)
    assert 0.002 < ch["state_levels"]["response_onset_delay_s"] < 0.008
    settled = 0
    for k, row in enumerate(tr):
        amp = abs(row["final_level"] - row["initial_level"])
        tol = band_pct / 100 * amp
        true_final = 0.35 + (2.0 if row["direction"] == "rising" else 0.0)  # H(0) = 1
        t50 = edges[k][0] + edges[k][1] / 2
        assert row["input_crossing_50_s"] == pytest.approx(t50, abs=1e-9)
        exact = resp.last_exit(k, row["final_level"], tol, t50, t50 + 0.5)
        if k + 1 < len(edges):
            # where the output starts to answer the next edge (a hundredth of the band)
            dep = resp.departure(k, 0.01 * tol, edges[k + 1][0], edges[k + 1][0] + 0.05)
        else:
            dep = math.inf
        if exact < dep:
            # settled before its own next transition: the exact instant within one sample,
            # on a level within a quarter of the band of the true one
            assert row["final_level"] == pytest.approx(true_final, abs=0.25 * tol)
            assert row["settling_time_s"] == pytest.approx(exact - t50, abs=1.0 / fs)
            # and later than the input's next edge would have allowed before
            if k + 1 < len(edges):
                assert row["settled_at_s"] < edges[k + 1][0] + 0.0075
            settled += 1
        else:
            assert row["settling_time_s"] is None
            why = row["null_reasons"]["settling_time_s"]
            assert why.startswith("never settles before the next transition")
            assert "±0.1 % band" in why
    # the rising edges (three) and the last falling edge settle; the falling edges followed by
    # a parcel do not: their ringing would leave the band for the last time ~181 ms after
    # the edge, but the next parcel's ramp starts 172.5 ms after it
    assert settled == 4
    for row in tr:
        if row["direction"] == "rising":
            assert 0.179 < row["settling_time_s"] < 0.183


@pytest.mark.parametrize(("tau1", "band_pct"), [(0.005, 0.1), (0.010, 2.0)])
def test_dead_time_output_settles_after_the_next_input_edge(tau1, band_pct):
    # H(s) = e^(-s tau) / (tau1 s + 1), tau = 20 ms, pulses of 50 ms every 100 ms with 1 ms
    # ramps, 10 kHz. The output answers an input edge 20 ms late, so it settles after the
    # input's next edge has started (first-order step response 1 - e^(-t / tau1): the band
    # +/-b is reached tau + tau1 ln(100 / b) after the edge, common practice), but before its
    # own next transition.
    fs, tau = 10_000.0, 0.020
    b, a = [1.0], [tau1, 1.0]
    edges = pulse_edges(0.05, 0.05, 0.1, 3, 0.001, 1.0)
    resp = RampTrainResponse(b, a, 0.0, edges, dead=tau)
    t_end = 0.45
    ch = measure_train(resp, b, a, t_end, fs, band_pct)
    tr = ch["transitions"]
    # the dead time, to the sample grid (the segments end this long after the input moves)
    assert ch["state_levels"]["response_onset_delay_s"] == pytest.approx(tau, abs=2.0 / fs)
    for k, row in enumerate(tr):
        amp = abs(row["final_level"] - row["initial_level"])
        tol = band_pct / 100 * amp
        t50 = edges[k][0] + edges[k][1] / 2
        assert row["final_level_detail"]["method"] == "segment end"
        true_final = 1.0 if row["direction"] == "rising" else 0.0
        # the median of a settled end window, still approaching by a fraction of the band
        assert row["final_level"] == pytest.approx(true_final, abs=0.6 * tol)
        exact = resp.last_exit(k, row["final_level"], tol, t50, t50 + 0.3)
        assert row["settling_time_s"] == pytest.approx(exact - t50, abs=1.0 / fs)
        if k + 1 < len(edges):
            # the scenario: settled after the input's next edge began, before the output's
            nxt = edges[k + 1][0]
            assert nxt < row["settled_at_s"] < nxt + tau
    # the first edge, from rest, in closed form: a linear ramp of length T into 1 / (tau1 s + 1)
    # leaves 1 - (tau1 / T)(e^(T / tau1) - 1) e^(-t / tau1) once it is over (t from the ramp's
    # start; convolution of the ramp with the impulse response e^(-t / tau1) / tau1), delayed
    # by tau: it enters the band around the measured level L where that equals L - tol
    ramp, level = edges[0][1], tr[0]["final_level"]
    tol = band_pct / 100 * abs(level - tr[0]["initial_level"])
    k = tau1 / ramp * math.expm1(ramp / tau1)
    t_in = tau + tau1 * math.log(k / (1.0 - level + tol)) - ramp / 2
    assert tr[0]["settling_time_s"] == pytest.approx(t_in, abs=1.0 / fs)


def test_a_system_that_answers_at_once_keeps_the_cut_near_the_input():
    # A lightly damped second-order system (step response starting as t^2, Ogata sec. 5-3)
    # answers each 0.2 ms input ramp at once: it is a tenth of the band away from its level
    # within the ramp (the onset delay is shorter than the ramp), and the ringing segments
    # keep their exact levels (turning-point extrapolation, Aitken).
    wn, zeta, fs = 2 * math.pi * 200.0, 0.2, 40_000.0
    b, a = [wn**2], [1.0, 2 * zeta * wn, wn**2]
    edges = pulse_edges(0.005, 0.010, 0.020, 3, 0.0002, 1.0)
    resp = RampTrainResponse(b, a, 0.0, edges)
    t = np.arange(int(0.08 * fs)) / fs
    ch = measure(Waveform(resp.y(t), fs), Waveform(resp.input(t), fs)).to_dict()["channels"][0]
    assert 0.0 < ch["state_levels"]["response_onset_delay_s"] < 0.0002
    tr = ch["transitions"]
    assert [r["direction"] for r in tr] == ["rising", "falling"] * 3
    for row in tr[:-1]:
        target = 1.0 if row["direction"] == "rising" else 0.0  # H(0) = 1
        assert row["final_level_detail"]["method"] == "turning-point extrapolation"
        assert row["final_level"] == pytest.approx(target, abs=1e-4)
        assert row["settling_time_s"] is None  # rings by ~5 % into the next edge


def test_noise_on_the_dead_time_output():
    # The dead-time case of above (tau1 = 5 ms, +/-0.1 % band) with white noise on the output.
    # At 0.01 % of the amplitude (a tenth of the band's half-width) the onset delay is still
    # the dead time and every edge settles, a little later than without noise (a noise
    # excursion beyond the band delays the last exit). At 0.04 % (three deviations are more
    # than half the band's half-width) where the output leaves its state cannot be told
    # from noise: no onset delay, with the reason, and the segments stay cut where the
    # input starts to move.
    fs, tau, tau1, band_pct = 10_000.0, 0.020, 0.005, 0.1
    edges = pulse_edges(0.05, 0.05, 0.1, 3, 0.001, 1.0)
    resp = RampTrainResponse([1.0], [tau1, 1.0], 0.0, edges, dead=tau)
    t = np.arange(int(0.45 * fs)) / fs
    clean = resp.y(t)
    rng = np.random.default_rng(5)
    quiet = clean + rng.normal(0.0, 1e-4, t.size)
    ch = measure(
        Waveform(quiet, fs), Waveform(resp.input(t), fs), settling_band_pct=band_pct
    ).to_dict()["channels"][0]
    assert ch["state_levels"]["response_onset_delay_s"] == pytest.approx(tau, abs=2.0 / fs)
    for k, row in enumerate(ch["transitions"]):
        t50 = edges[k][0] + edges[k][1] / 2
        tol = band_pct / 100 * abs(row["final_level"] - row["initial_level"])
        exact = resp.last_exit(k, row["final_level"], tol, t50, t50 + 0.3) - t50
        assert exact - 1.0 / fs <= row["settling_time_s"] <= exact + 0.001
    loud = clean + rng.normal(0.0, 4e-4, t.size)
    ch = measure(
        Waveform(loud, fs), Waveform(resp.input(t), fs), settling_band_pct=band_pct
    ).to_dict()["channels"][0]
    sl = ch["state_levels"]
    assert sl["response_onset_delay_s"] is None
    assert "quiet enough" in sl["null_reasons"]["response_onset_delay_s"]
