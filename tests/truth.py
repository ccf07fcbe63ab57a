"""Closed-form step responses and their transient metrics, the truth the measuring tests
compare with.

First order: y(t) = 1 - exp(-t / tau). Second order, H(s) = wn^2 / (s^2 + 2 zeta wn s + wn^2):
underdamped (0 < zeta < 1) y(t) = 1 - exp(-zeta wn t) (cos(wd t) + zeta / sqrt(1 - zeta^2)
sin(wd t)), wd = wn sqrt(1 - zeta^2); critically damped (zeta = 1) y(t) = 1 - exp(-wn t)
(1 + wn t). K. Ogata, *Modern Control Engineering*, 5th ed., sec. 5-3 (unit-step response of
second-order systems; equation numbers not quoted). Peak overshoot exp(-zeta pi / sqrt(1 -
zeta^2)) and peak time pi / wd from the same section.

The metrics (10-90 % rise time, overshoot, 2 % settling time) are read from the closed form
on a grid 50 times finer than any record the tests make, with the crossing instants
interpolated linearly: the truth is the closed form, not the measuring code under test.
"""

from __future__ import annotations

import math

import numpy as np


def step_response(kind: str, t: np.ndarray, *, tau: float = 1.0, zeta: float = 0.5,
                  wn: float = 1.0) -> np.ndarray:
    """Unit-step response at times ``t`` (0 for t <= 0)."""
    tt = np.maximum(np.asarray(t, dtype=np.float64), 0.0)
    if kind == "first":
        y = 1.0 - np.exp(-tt / tau)
    elif zeta >= 1.0:
        y = 1.0 - np.exp(-wn * tt) * (1.0 + wn * tt)
    else:
        wd = wn * math.sqrt(1.0 - zeta * zeta)
        y = 1.0 - np.exp(-zeta * wn * tt) * (
            np.cos(wd * tt) + zeta / math.sqrt(1.0 - zeta * zeta) * np.sin(wd * tt)
        )
    return np.where(np.asarray(t) > 0, y, 0.0)


def overshoot_pct(zeta: float) -> float:
    """Ogata sec. 5-3: maximum overshoot of the underdamped second-order step response."""
    if zeta >= 1.0:
        return 0.0
    return 100.0 * math.exp(-zeta * math.pi / math.sqrt(1.0 - zeta * zeta))


def metrics(kind: str, *, tau: float = 1.0, zeta: float = 0.5, wn: float = 1.0,
            band_pct: float = 2.0) -> dict:
    """10-90 % rise time, overshoot (%), 2 % settling time, peak time, 50 % instant
    (``delay_s``) and 10 % instant (``start_s``) of the unit step response, read from the
    closed form (times from the step instant)."""
    scale = tau if kind == "first" else 1.0 / wn
    t_end = 60.0 * scale if kind == "first" else 60.0 / (max(zeta, 0.05) * wn)
    t = np.linspace(0.0, t_end, 400_001)
    y = step_response(kind, t, tau=tau, zeta=zeta, wn=wn)

    def first_cross(level: float) -> float:
        k = int(np.argmax(y >= level))
        return t[k - 1] + (level - y[k - 1]) / (y[k] - y[k - 1]) * (t[k] - t[k - 1])

    out_of_band = np.flatnonzero(np.abs(y - 1.0) > band_pct / 100.0)
    k = int(out_of_band[-1])
    # the last exit from the band, interpolated between the samples around it
    level = 1.0 + math.copysign(band_pct / 100.0, y[k] - 1.0)
    settle = t[k] + (level - y[k]) / (y[k + 1] - y[k]) * (t[k + 1] - t[k])
    over = kind != "first" and zeta < 1.0
    return {
        "rise_time_s": first_cross(0.9) - first_cross(0.1),
        "overshoot_pct": overshoot_pct(zeta) if over else 0.0,
        "settling_time_s": settle,
        "delay_s": first_cross(0.5),
        # the 10 % instant: where a transition starts when it is found from the output alone
        "start_s": first_cross(0.1),
        "peak_time_s": (math.pi / (wn * math.sqrt(1 - zeta * zeta))) if over else None,
    }
