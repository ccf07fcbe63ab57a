"""What H(s) predicts, and the measured-vs-predicted comparison with its tolerances.

Predictions: DC gain H(0); gain and phase of H(j 2 pi f) at measured sine and tone
frequencies; for a dominant complex pole pair, the step-response overshoot
exp(-pi zeta / sqrt(1 - zeta^2)) and peak time pi / omega_d (Ogata, *Modern Control
Engineering*, 5th ed., sec. 5-3), exact for two poles and no finite zeros, an
approximation otherwise (compared, never flagged).

A difference is flagged when it exceeds the tolerance: the discretization error the
discrete model's accuracy report states (plus a small measurement allowance) when a
discrete model is passed, else the stated tolerance options.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

#: A complex pole pair counts as dominant when every other pole and every zero is at
#: least this many times further from the imaginary axis (rule of thumb, common practice).
DOMINANCE_RATIO = 5.0
#: Allowance added to the discretization error for the measurement itself.
FLOOR_DB = 0.01
FLOOR_DEG = 0.1


@dataclass
class Predictions:
    """Predictions of one System (all None when no system was given)."""

    given: bool = False
    text: str | None = None
    dc_gain: float | None = None
    zeta: float | None = None
    wn: float | None = None
    wd: float | None = None
    delay_s: float = 0.0
    basis: str | None = None  # "exact second order" / "dominant pole pair (approximate)"
    overshoot_pct: float | None = None
    peak_time_s: float | None = None
    gain_tol_db: float = 0.1
    phase_tol_deg: float = 1.0
    tol_source: str = "stated tolerance"
    discretization: dict | None = None
    null_reasons: dict = field(default_factory=dict)

    discrete: Any = None
    _band_errors: dict = field(default_factory=dict)

    def tolerances(self, f_hz: float | None) -> tuple[float, float, float]:
        """(gain dB, phase deg, DC gain dB) tolerances for a comparison at ``f_hz``
        (None: DC and transient quantities): the discrete model's errors over the band up
        to ``f_hz`` plus a measurement allowance, else the stated tolerances."""
        if self.discretization is None:
            return self.gain_tol_db, self.phase_tol_deg, self.gain_tol_db
        if f_hz is None:
            errs = self.discretization
        else:
            key = round(float(f_hz), 9)
            if key not in self._band_errors:
                self._band_errors[key] = _discrete_errors(self.discrete, f_hz)
            errs = self._band_errors[key]
        return (
            errs["max_magnitude_error_db"] + FLOOR_DB,
            errs["max_phase_error_deg"] + FLOOR_DEG,
            errs["dc_gain_error_db"] + FLOOR_DB,
        )

    def to_dict(self) -> dict:
        if not self.given:
            return {"system": None, "null_reasons": {"system": "no system given"}}
        d: dict = {
            "system": self.text,
            "dc_gain": self.dc_gain,
            "second_order": None,
            "tolerance_source": self.tol_source,
        }
        if self.zeta is not None:
            d["second_order"] = {
                "basis": self.basis,
                "zeta": self.zeta,
                "natural_frequency_hz": self.wn / (2 * math.pi),
                "damped_frequency_hz": self.wd / (2 * math.pi),
                "overshoot_pct": self.overshoot_pct,
                "peak_time_s": self.peak_time_s,
                "dead_time_s": self.delay_s,
            }
        if self.discretization is not None:
            d["discretization"] = self.discretization
        if self.null_reasons:
            d["null_reasons"] = dict(self.null_reasons)
        return d


def _dominant_pair(system: Any) -> tuple[complex | None, str | None, str | None]:
    """The dominant complex pole (upper half plane), its basis, or a reason there is none."""
    poles = np.atleast_1d(np.asarray(system.poles, dtype=np.complex128))
    zeros = np.atleast_1d(np.asarray(system.zeros, dtype=np.complex128))
    if poles.size == 0:
        return None, None, "the system has no poles"
    if np.any(poles.real >= 0):
        return None, None, "the system is not stable: no step-response prediction"
    upper = poles[poles.imag > 0]
    if upper.size == 0:
        return None, None, "no complex pole pair (no underdamped mode)"
    p = upper[np.argmax(upper.real)]  # slowest-decaying complex pair
    if poles.size == 2 and zeros.size == 0:
        return p, "exact second order (two poles, no finite zeros)", None
    sigma = -p.real
    others = [
        q for q in poles if abs(q - p) > 1e-12 * abs(p) and abs(q - np.conj(p)) > 1e-12 * abs(p)
    ]
    if any(-q.real < DOMINANCE_RATIO * sigma for q in others):
        return (
            None,
            None,
            (
                f"no dominant pole pair: another pole is within {DOMINANCE_RATIO:g}x the pair's "
                "distance from the imaginary axis"
            ),
        )
    if any(abs(z.real) < DOMINANCE_RATIO * sigma for z in zeros):
        return (
            None,
            None,
            (
                f"no dominant pole pair: a zero lies within {DOMINANCE_RATIO:g}x the pair's "
                "distance from the imaginary axis"
            ),
        )
    return p, "dominant pole pair (approximate)", None


def _discrete_errors(discrete: Any, f_max_hz: float | None) -> dict | None:
    """Largest magnitude (dB) and phase (deg) errors, and the DC gain error, from a discrete
    model's accuracy report over (0, f_max_hz] (its default band when None)."""
    acc = getattr(discrete, "accuracy", None)
    if acc is None:
        return None
    rate = float(getattr(discrete, "rate", 0.0) or 0.0)
    band = None
    if f_max_hz is not None and rate > 0 and 0 < f_max_hz < 0.5 * rate:
        band = min(f_max_hz * 1.0001, 0.5 * rate)
    rep = acc(band_hz=band) if band is not None else acc()
    d = rep.to_dict() if hasattr(rep, "to_dict") else dict(rep)

    def num(key: str) -> float:
        v = d.get(key)
        return abs(float(v)) if isinstance(v, (int, float)) and math.isfinite(v) else 0.0

    return {
        "method": d.get("method", getattr(discrete, "method", None)),
        "rate_hz": d.get("rate_hz", rate or None),
        "band_hz": d.get("band_hz"),
        "max_magnitude_error_db": num("max_mag_error_db") + num("dead_time_max_mag_error_db"),
        "max_phase_error_deg": num("max_phase_error_deg") + num("dead_time_max_phase_error_deg"),
        "dc_gain_error_db": num("dc_gain_error_db"),
    }


def _describe(system: Any) -> str:
    def roots(r: Any) -> str:
        r = np.atleast_1d(np.asarray(r, dtype=np.complex128))
        return (
            "["
            + ", ".join(
                f"{z.real:.6g}" if z.imag == 0 else f"{z.real:.6g}{z.imag:+.6g}j" for z in r
            )
            + "]"
        )

    return f"zeros {roots(system.zeros)}, poles {roots(system.poles)} rad/s, gain {system.gain:.6g}"


def monotone_step(system: Any) -> bool:
    """Whether ``system``'s step response certainly never turns back after t = 0: its
    impulse response keeps one sign for t > 0 (any dead time only shifts it).

    Two sufficient conditions, each exact:

    * every pole real and no finite zero: H(s) = k / prod(s - p_i) has for impulse
      response k times the convolution of the exponentials e^(p_i t), t >= 0, each
      positive, so it keeps the sign of k (repeated poles included; stable or not);
    * every pole real and distinct, every zero real, no more zeros than poles, and every
      residue r_i = k prod(p_i - z_j) / prod_(l != i)(p_i - p_l) of one sign: h(t) =
      D delta(t) + sum r_i e^(p_i t) then keeps that sign for t > 0 (lead and lag
      networks, RC ladders: their poles and zeros interlace). A direct term only makes the
      step at t = 0.

    Anything else (complex poles, a zero in the right half plane that makes an
    undershoot, repeated poles with zeros) answers False, also where the response
    happens to be monotone.
    """
    if system is None:
        return False
    try:
        poles = np.asarray(system.poles, dtype=complex)
        zeros = np.asarray(system.zeros, dtype=complex)
        gain = float(system.gain)
    except (AttributeError, TypeError, ValueError):
        return False
    if poles.size == 0 or np.any(poles.imag != 0.0):
        return False
    if zeros.size == 0:
        return True
    if np.any(zeros.imag != 0.0) or zeros.size > poles.size:
        return False
    p, z = poles.real, zeros.real
    if np.unique(p).size != p.size or not (math.isfinite(gain) and gain != 0.0):
        return False
    with np.errstate(all="ignore"):
        residues = np.array([
            gain * np.prod(pi - z) / np.prod(np.delete(pi - p, i)) for i, pi in enumerate(p)
        ])
    if not np.all(np.isfinite(residues)):
        return False
    return bool(np.all(residues > 0.0) or np.all(residues < 0.0))


def predictions_for(system: Any, o: Any, rate: float) -> Predictions:
    """Predictions of ``system`` (None: nothing predicted) and the tolerances to use."""
    p = Predictions(gain_tol_db=o.gain_tolerance_db, phase_tol_deg=o.phase_tolerance_deg)
    p.discrete = o.discrete
    if o.discrete is not None:
        errs = _discrete_errors(o.discrete, None)
        if errs is not None:
            p.discretization = errs
            p.tol_source = (
                f"discretization error report (+{FLOOR_DB:g} dB, +{FLOOR_DEG:g} deg for the "
                "measurement)"
            )
    if system is None:
        return p
    p.given = True
    p.text = getattr(system, "text", None) or _describe(system)
    p.delay_s = float(getattr(system, "delay_s", 0.0) or 0.0)
    dc = float(system.dc_gain)
    if math.isfinite(dc):
        p.dc_gain = dc
    else:
        p.null_reasons["dc_gain"] = "H(0) is infinite (a pole at s = 0)"
    pole, basis, why = _dominant_pair(system)
    if pole is None:
        p.null_reasons["second_order"] = why
        return p
    wn = abs(pole)
    zeta = -pole.real / wn
    wd = pole.imag
    p.zeta, p.wn, p.wd, p.basis = float(zeta), float(wn), float(wd), basis
    # Ogata, Modern Control Engineering, 5th ed., sec. 5-3: Mp = exp(-pi zeta / sqrt(1 - zeta^2)),
    # tp = pi / omega_d; a dead time shifts the whole response.
    p.overshoot_pct = 100.0 * math.exp(-math.pi * zeta / math.sqrt(1.0 - zeta * zeta))
    p.peak_time_s = math.pi / wd + p.delay_s
    return p


def _row(
    quantity: str,
    measured: Any,
    predicted: Any,
    diff: float | None,
    tol: float | None,
    tol_source: str,
    flag: bool | None,
    note: str | None = None,
) -> dict:
    r = {
        "quantity": quantity,
        "measured": measured,
        "predicted": predicted,
        "difference": diff,
        "tolerance": tol,
        "tolerance_source": tol_source,
        "flag": flag,
    }
    if note:
        r["note"] = note
    return r


def _wrap_deg(x: float) -> float:
    w = math.remainder(x, 360.0)
    return 180.0 if w == -180.0 else w


def compare_rows(ch: dict, p: Predictions, o: Any) -> list[dict]:
    """Measured-vs-predicted rows for one channel's dictionary."""
    if not p.given:
        return []
    rows: list[dict] = []
    ss = ch.get("steady_state") or {}
    g = ss.get("steady_state_gain")
    if isinstance(g, float) and p.dc_gain is not None:
        if p.dc_gain != 0:
            rel_tol = 10 ** (p.tolerances(None)[2] / 20.0) - 1.0
            diff = (g - p.dc_gain) / abs(p.dc_gain)
            rows.append(
                _row(
                    "steady_state_gain (relative difference)",
                    g,
                    p.dc_gain,
                    diff,
                    rel_tol,
                    p.tol_source,
                    abs(diff) > rel_tol,
                )
            )
        else:
            rows.append(
                _row(
                    "steady_state_gain",
                    g,
                    0.0,
                    g,
                    None,
                    p.tol_source,
                    None,
                    "H(0) = 0: compared, not flagged",
                )
            )
    rows.extend(_level_gain_rows(ch, p))
    sine = ch.get("sine") or {}
    if "predicted_gain_db" in sine:
        rows.extend(_gain_phase_rows("sine", sine, p))
    for tone in ch.get("tones") or []:
        if "predicted_gain_db" in tone:
            rows.extend(_gain_phase_rows(f"tone {tone['frequency_hz']:.6g} Hz", tone, p))
    if p.overshoot_pct is not None:
        rows.extend(_second_order_rows(ch, p, o))
    return rows


def _level_gain_rows(ch: dict, p: Predictions) -> list[dict]:
    """Cross-check of the per-transition state levels against H(0): the output level change
    over the input level change, for the transition furthest from H(0). The levels are
    measured; H(0) only checks them (a level that is off shows here at once)."""
    trans = [
        t for t in ch.get("transitions") or [] if isinstance(t.get("level_change_gain"), float)
    ]
    if not trans or p.dc_gain is None or p.dc_gain == 0:
        return []
    worst = max(trans, key=lambda t: abs(t["level_change_gain"] - p.dc_gain))
    rel_tol = 10 ** (p.tolerances(None)[2] / 20.0) - 1.0
    diff = (worst["level_change_gain"] - p.dc_gain) / abs(p.dc_gain)
    established = "levels_note" not in worst
    note = None
    if not established:
        note = "a level of this transition is not established: compared, not flagged"
    elif not (worst.get("initial_level_settled", True) and worst.get("final_level_settled", True)):
        note = "a level of this transition is extrapolated from ringing (not settled)"
    return [
        _row(
            f"level_change_gain (transition {worst['index']} of {len(trans)}, relative "
            "difference)",
            worst["level_change_gain"],
            p.dc_gain,
            diff,
            rel_tol,
            p.tol_source,
            (abs(diff) > rel_tol) if established else None,
            note,
        )
    ]


def _gain_phase_rows(label: str, d: dict, p: Predictions) -> list[dict]:
    rows = []
    gain_tol, phase_tol, _ = p.tolerances(d.get("frequency_hz"))
    if d.get("gain_db") is not None:
        diff = d["gain_db"] - d["predicted_gain_db"]
        rows.append(
            _row(
                f"{label} gain_db",
                d["gain_db"],
                d["predicted_gain_db"],
                diff,
                gain_tol,
                p.tol_source,
                abs(diff) > gain_tol,
            )
        )
    if d.get("phase_deg") is not None:
        diff = _wrap_deg(d["phase_deg"] - d["predicted_phase_deg"])
        rows.append(
            _row(
                f"{label} phase_deg",
                d["phase_deg"],
                d["predicted_phase_deg"],
                diff,
                phase_tol,
                p.tol_source,
                abs(diff) > phase_tol,
            )
        )
    return rows


def _second_order_rows(ch: dict, p: Predictions, o: Any) -> list[dict]:
    """Overshoot and peak time of the first transition that has a peak, vs the formulas."""
    rows = []
    exact = p.basis is not None and p.basis.startswith("exact")
    first = next((t for t in ch.get("transitions") or [] if t.get("peak_time_s") is not None), None)
    if first is None:
        return rows
    note = None if exact else "dominant-pole approximation: compared, not flagged"
    # Overshoot is null when the transition's levels are not established (a pulse shorter
    # than the ringing): then only the peak time can be compared.
    if first.get("overshoot_pct") is not None:
        diff = first["overshoot_pct"] - p.overshoot_pct
        tol = o.overshoot_tolerance_pct
        rows.append(
            _row(
                "overshoot_pct (first transition)",
                first["overshoot_pct"],
                p.overshoot_pct,
                diff,
                tol,
                "stated tolerance (percentage points)",
                (abs(diff) > tol) if exact else None,
                note,
            )
        )
    if first.get("peak_time_s") is not None:
        rate_tol = o.time_tolerance_pct / 100.0 * p.peak_time_s
        diff = first["peak_time_s"] - p.peak_time_s
        rows.append(
            _row(
                "peak_time_s (first transition)",
                first["peak_time_s"],
                p.peak_time_s,
                diff,
                rate_tol,
                "stated tolerance (percent of the predicted peak time)",
                (abs(diff) > rate_tol) if exact else None,
                note,
            )
        )
    return rows
