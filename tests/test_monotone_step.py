"""predict.monotone_step: when a still-moving end may be read as a bound on its final level.

The claim "this system's step response never turns back" is checked against
scipy.signal.step (an independent simulation) on random real-pole systems, and on systems
whose step response is known in closed form: a lead network (s + 1)/(s + 10) steps to 1
and then falls monotonically to 0.1; (s - 1)/((s + 1)(s + 2)) first undershoots (a right
half-plane zero: a non-minimum-phase response, common textbook example, from memory);
a complex pole pair rings (Ogata sec. 5-3).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal as sig

from simwave import System
from simwave.measure.predict import monotone_step


@pytest.mark.parametrize("zeros, poles, gain, expected", [
    ([], [-5.0], 5.0, True),                       # first-order lag
    ([], [-5.0, -5.0, -40.0], 1e3, True),          # repeated real poles, no zeros
    ([-1.0], [-10.0], 1.0, True),                  # lead: 1 -> 0.1, falling after the step
    ([-10.0], [-1.0], 0.1, True),                  # lag: rising to 1
    ([-2.0, -20.0], [-1.0, -10.0, -100.0], 50.0, True),  # interlaced (RC ladder shape)
    ([1.0], [-1.0, -2.0], -2.0, False),            # right half-plane zero: undershoot
    ([-0.5], [-1.0, -2.0], 4.0, False),            # zero nearer than both poles: overshoot
    ([], [-1 + 5j, -1 - 5j], 26.0, False),         # complex pair: ringing
    ([-1.0], [-3.0, -3.0], 9.0, False),            # repeated poles with a zero: not decided
])
def test_known_systems(zeros, poles, gain, expected):
    assert monotone_step(System.from_zpk(zeros, poles, gain)) is expected


def _monotone(y: np.ndarray) -> bool:
    d = np.diff(y[1:])  # after the step at t = 0 (a direct term jumps there)
    tol = 1e-9 * (np.max(np.abs(y)) + 1e-300)
    return bool(np.all(d >= -tol) or np.all(d <= tol))


def test_every_claim_holds_in_scipys_step_response():
    rng = np.random.default_rng(3)
    claimed = 0
    for _ in range(300):
        n = int(rng.integers(1, 5))
        p = -(10 ** rng.uniform(0, 3, n))
        z = -(10 ** rng.uniform(0, 3, int(rng.integers(0, n + 1))))
        z = z * np.where(rng.random(z.size) < 0.8, 1.0, -1.0)
        k = float(10 ** rng.uniform(-1, 1)) * (1.0 if rng.random() < 0.7 else -1.0)
        if monotone_step(System.from_zpk(z, p, k)):
            claimed += 1
            t = np.linspace(0.0, 10.0 / np.min(np.abs(p)), 4000)
            _, y = sig.step((z, p, k), T=t)
            assert _monotone(y), (z, p, k)
    assert claimed > 80  # the check is not vacuous: many systems are claimed


def test_a_lag_network_still_rising_is_a_bound_only_with_its_system():
    # H(s) = 0.1 (s + 2000) / (s + 200): a step answers 1 - 0.9 e^(-200 t) (jumps to 0.1,
    # rises to 1). A 10 ms pulse ends at 1 - 0.9 e^-2 = 0.878, still rising: given the
    # system (one real pole, one real zero, residue 0.1 * 1800 > 0) that value is a lower
    # bound on the final level; without it, no number.
    from simwave import Waveform, measure

    fs = 10_000.0
    t = np.arange(600) / fs
    x = ((t >= 0.01) & (t < 0.02)).astype(float)
    y = sig.lsim(([0.1, 200.0], [1.0, 200.0]), x, t)[1]  # scipy's simulation
    given = measure(Waveform(y, fs), Waveform(x, fs), system="0.1*(s + 2000)/(s + 200)")
    row = given.to_dict()["channels"][0]["transitions"][0]
    assert row["bounds"]["final_level"] == "lower"
    assert 0.85 < row["final_level"] <= 1.0 - 0.9 * np.exp(-2.0) + 1e-3
    bare = measure(Waveform(y, fs), Waveform(x, fs)).to_dict()["channels"][0]["transitions"][0]
    assert bare["final_level"] is None and "final_level" in bare["null_reasons"]
