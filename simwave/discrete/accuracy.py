"""How far a discrete model is from the analog H(j 2 pi f), and what rate would do.

The report compares the discrete model *without* its dead time against H(s)
*without* its dead time, so that a long delay does not swamp the model error
with a trivial phase ramp; the dead time is then reported on its own (a whole
number of samples is exact; a fraction is exact at the samples for the hold
methods and approximated for the others, with the approximation's error).

Band: by default from a low frequency up to 0.45 times the rate, or up to the
frequency (above the peak) where |H| has fallen 60 dB below its peak in that
range, whichever is lower. Errors are only evaluated where |H| is within
60 dB of its peak: deep in a stopband the relative error of a tiny response
says nothing about the output.
"""

from __future__ import annotations

import math
import sys
from dataclasses import dataclass, field, fields
from typing import Any

import numpy as np

from simwave.errors import DiscretizationError
from simwave.discrete.methods import METHODS, _hold_design, _impulse_design, design, peak_frequency
from simwave.discrete.realization import analog_state_space, increment_response

__all__ = ["AccuracyReport", "accuracy_report", "DEFAULT_LIMIT_DB", "method_check",
           "method_warning", "SINE_ERROR_LIMIT", "check_frequencies"]

#: Default magnitude-error limit for the suggested sample rate (dB).
DEFAULT_LIMIT_DB = 0.1

#: |H| this far below its peak ends the default band and the evaluated region.
_FLOOR_DB = 60.0

#: A model is called poor (and warned about) when a steady sine somewhere comes out
#: off by more than this fraction of the largest steady output, magnitude and phase
#: together: |H_d - H| / max|H|. simwave's choice: 1 %, about 0.09 dB or 0.6 deg at
#: the peak.
SINE_ERROR_LIMIT = 0.01

#: The older magnitude-only rule, kept as a second trigger: more than this many dB
#: off where |H| is within IN_BAND_DB of its peak.
POOR_MODEL_DB = 1.0
IN_BAND_DB = 20.0

#: Offsets, in half-power half-widths, around every resonance put on the grid.
_WIDTHS = (-4.0, -2.0, -1.0, -0.5, -0.25, 0.0, 0.25, 0.5, 1.0, 2.0, 4.0)
_WIDTHS_ARRAY = np.array(_WIDTHS)


#: Log grids made by check_frequencies, by (lo, hi, n): the default run's low edge is
#: 1e-4 of the rate for most systems, so a new system at a rate seen before reuses its grid.
_LOG_GRIDS: dict[tuple[float, float, int], np.ndarray] = {}


def _log_grid(lo: float, hi: float, n: int) -> np.ndarray:
    """``np.geomspace(lo, hi, n)``, made once per value of (lo, hi, n) (read-only)."""
    key = (float(lo), float(hi), int(n))
    grid = _LOG_GRIDS.get(key)
    if grid is None:
        grid = np.geomspace(lo, hi, n)
        grid.flags.writeable = False
        if len(_LOG_GRIDS) >= 64:
            _LOG_GRIDS.clear()
        _LOG_GRIDS[key] = grid
    return grid


def check_frequencies(system, rate: float, lo: float, hi: float, discrete_poles=None,
                      n_log: int = 96) -> np.ndarray:
    """Frequencies (Hz) that cannot step over a narrow resonance, within [lo, hi].

    ``n_log`` log-spaced points plus, for every analog pole and zero, its natural
    frequency f_n and the points f_n (1 + c zeta) for c in +-0.25 ... +-4 half-power
    half-widths (zeta f_n is the half-power half-width of a resonance, Q = 1/(2 zeta):
    Ogata, *Modern Control Engineering*, 5th ed., sec. 8-2, from memory), its damped
    frequency; and the same around the discrete poles (angle theta and radius r:
    centre theta/(2 pi T), half-width about (1 - r)/(2 pi T)), which is where a method
    that moves a resonance puts it.
    """
    pts = [_log_grid(lo, hi, n_log)]
    roots = np.concatenate([np.atleast_1d(system.poles), np.atleast_1d(system.zeros)])
    # every root at once: the same elementwise operations as one root at a time (|r| by
    # the scalar abs: numpy's array abs of complex128 can differ from it in the last bit)
    roots = np.asarray(roots, dtype=np.complex128)
    wn = np.array([abs(r) for r in roots], dtype=np.float64)
    keep = wn != 0
    roots, wn = roots[keep], wn[keep]
    if roots.size:
        zeta = np.minimum(1.0, np.abs(roots.real) / wn)
        fn = wn / (2 * math.pi)
        pts.append(fn[:, None] * (1.0 + _WIDTHS_ARRAY[None, :] * np.maximum(zeta, 1e-12)[:, None]))
        pts.append(np.abs(roots.imag) / (2 * math.pi))
    if discrete_poles is not None:
        centre, half_width = [], []
        for q in np.atleast_1d(discrete_poles):
            rad = abs(q)
            if rad == 0 or q.imag < 0:
                continue
            centre.append(math.atan2(q.imag, q.real) * rate / (2 * math.pi))
            half_width.append(max(abs(1.0 - rad), 1e-15) * rate / (2 * math.pi))
        if centre:  # fc + widths * half for every pole at once: the same products and sums
            pts.append(np.array(centre)[:, None]
                       + _WIDTHS_ARRAY[None, :] * np.array(half_width)[:, None])
    f = np.concatenate([np.ravel(p) for p in pts])
    return np.unique(f[(f >= lo) & (f <= hi)])


def _responses(model, f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(analog, discrete) complex responses at f; dead time: the fraction only, both sides."""
    system = model.system
    ha = system.frequency_response(f)
    if system.delay_s:
        ha = ha * np.exp(2j * np.pi * f * system.delay_s)  # take the dead time out...
    frac = model.delay_samples - model.delay_line
    ha = ha * np.exp(-2j * np.pi * f * frac / model.rate)  # ...and put its fraction back
    hd = model.frequency_response(f, dead_time=False)
    return ha, hd


def method_check(model) -> dict[str, Any]:
    """What the model gets wrong for steady sines, magnitude and phase (the rate safeguard).

    On :func:`check_frequencies` up to 0.45 x rate: the steady-sine error
    |H_d - H| / max|H| (the error of the steady output for a unit sine at that
    frequency, as a fraction of the largest steady output any unit sine gets), and
    the magnitude (dB) and phase (deg) errors behind it. ``poor`` when that error
    exceeds :data:`SINE_ERROR_LIMIT` or the magnitude is off by more than
    :data:`POOR_MODEL_DB` where |H| is within :data:`IN_BAND_DB` of its peak.
    Costs about a millisecond (a few hundred frequencies).
    """
    system = model.system
    rate = model.rate
    lo = _low_edge(system, rate, 1e-4)
    f = check_frequencies(system, rate, lo, 0.45 * rate, model.zpk[1])
    ha, hd = _responses(model, f)
    aa = np.abs(ha)
    finite = np.isfinite(aa)
    peak = float(aa[finite].max()) if finite.any() else 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        sine = np.where(finite, np.abs(hd - ha) / peak, 0.0) if peak > 0 else np.zeros(f.size)
        keep = finite & (aa >= peak * 10 ** (-IN_BAND_DB / 20))
        err_db = 20 * np.log10(np.abs(hd[keep]) / aa[keep])
        ph = _wrap_deg(np.angle(hd) - np.angle(ha))
    sine = np.where(np.isfinite(sine), sine, np.inf)
    err_db = np.where(np.isfinite(err_db), err_db, np.inf)
    i = int(np.argmax(np.abs(err_db)))
    j = int(np.argmax(sine))
    with np.errstate(divide="ignore"):
        mag_j = float(20 * np.log10(abs(hd[j]) / aa[j])) if aa[j] > 0 else math.inf
    worst_db = float(err_db[i])
    worst_sine = float(sine[j])
    return {
        "max_in_band_mag_error_db": worst_db,
        "at_hz": float(f[keep][i]),
        "band_top_hz": float(f[keep].max()),
        "limit_db": POOR_MODEL_DB,
        "max_sine_error": worst_sine,
        "sine_error_at_hz": float(f[j]),
        "sine_mag_error_db": mag_j,
        "sine_phase_error_deg": float(ph[j]),
        "sine_error_limit": SINE_ERROR_LIMIT,
        "frequencies_checked": int(f.size),
        "poor": bool(abs(worst_db) > POOR_MODEL_DB or worst_sine > SINE_ERROR_LIMIT),
    }


def _nearest_resonance(system, f_hz: float) -> tuple[float, float] | None:
    """(f_n Hz, Q) of the lightly damped analog pole pair nearest f_hz (Q > 2), if any."""
    best = None
    for p in np.atleast_1d(system.poles):
        if p.imag <= 0 or abs(p) == 0:
            continue
        zeta = -p.real / abs(p)
        if zeta <= 0 or zeta >= 0.25:
            continue
        fn = abs(p) / (2 * math.pi)
        d = abs(math.log(fn / f_hz)) if f_hz > 0 else math.inf
        if best is None or d < best[0]:
            best = (d, fn, 1 / (2 * zeta))
    return None if best is None else (best[1], best[2])


#: What a method's error means for an input, by method.
_MEANING = {
    "step-invariant": "exact at the samples for inputs held constant between samples; "
                      "smooth inputs (sines, recorded continuous signals) come out lagging "
                      "by about half a sample",
    "ramp-invariant": "exact at the samples for inputs linear between samples; content near "
                      "this frequency is not close to linear over one sample at this rate",
    "bilinear": "the bilinear map warps the frequency axis, so content near this frequency "
                "is shaped as the analog system would shape a different frequency",
    "impulse-invariant": "the response above the Nyquist frequency folds back (aliasing)",
    "matched-z": "mapping poles and zeros one by one does not keep the response between them",
}


def method_warning(check: dict[str, Any], accuracy: dict[str, Any] | None, method: str,
                   rate: float, factor: int = 1, system=None,
                   realization: dict[str, Any] | None = None,
                   advice: RateAdvice | None = None) -> str:
    """The one-paragraph warning for a poor model: how far off, what it means, what to do.

    The suggested rates come from ``accuracy`` (a report's dict) or, when given,
    ``advice`` (:func:`rate_advice`: the same text, from a shorter search).
    """
    f = check["sine_error_at_hz"]
    text = (
        f"the {method} model is off by {100 * check['max_sine_error']:.3g} % of the largest "
        f"steady output for a steady sine at {f:.6g} Hz (magnitude "
        f"{check['sine_mag_error_db']:+.3g} dB, phase {check['sine_phase_error_deg']:+.3g} deg "
        f"there; limit {100 * check['sine_error_limit']:g} %)"
    )
    if abs(check["max_in_band_mag_error_db"]) > check["limit_db"]:
        text += (
            f", and the magnitude by {check['max_in_band_mag_error_db']:+.2f} dB at "
            f"{check['at_hz']:.6g} Hz"
        )
    text += f"; for your input: {_MEANING.get(method, 'the discrete response differs')}"
    remedies = []
    sec = (realization or {}).get("sections_round_off_level")
    if (realization or {}).get("realization") == "sections" and sec and sec >= 0.1 * \
            check["max_sine_error"]:
        remedies.append("the error is round-off of the second-order sections at this rate, "
                        "not the method: use the incremental realization or a lower rate")
    res = _nearest_resonance(system, f) if system is not None else None
    if method == "bilinear" and res is not None:
        remedies.append(f"prewarp at the resonance ({res[0]:.6g} Hz, Q = {res[1]:.3g})")
    if advice is None and accuracy is not None:
        advice = RateAdvice.from_rates(method, rate, accuracy.get("suggested_rate_hz") or {})
    own, others = (advice.own_hz, list(advice.within)) if advice is not None else (None, [])
    if own and own > rate:
        step = f"raise the rate to {own:.6g} Hz or more"
        if method in ("bilinear", "impulse-invariant", "matched-z"):
            step += f" (or oversample >= {int(np.ceil(own / rate)) * factor})"
        remedies.append(step)
    elif own is None and advice is not None:
        remedies.append("no rate up to 1e6 x the band edge brings this method within the "
                        "limit")
    if others:
        remedies.append(f"use {' or '.join(others)} (within the limit at this rate)")
    elif method == "step-invariant":
        remedies.append("for smooth inputs use ramp-invariant")
    if remedies:
        text += "; remedy: " + "; or ".join(remedies)
    return text


def _log_response(zeros, poles, gain, pts) -> tuple[np.ndarray, np.ndarray]:
    """(log|H|, arg H) of gain*prod(x - z)/prod(x - p) at points x, without overflow."""
    pts = np.asarray(pts, dtype=np.complex128)
    with np.errstate(divide="ignore", invalid="ignore"):
        dz = pts[:, None] - np.asarray(zeros, dtype=np.complex128)[None, :]
        dp = pts[:, None] - np.asarray(poles, dtype=np.complex128)[None, :]
        logm = math.log(abs(gain)) if gain != 0 else -np.inf
        logm = logm + np.sum(np.log(np.abs(dz)), axis=1) - np.sum(np.log(np.abs(dp)), axis=1)
        ang = np.sum(np.angle(dz), axis=1) - np.sum(np.angle(dp), axis=1)
        ang = ang + (math.pi if gain < 0 else 0.0)
    return logm, ang


def _analog(system, f: np.ndarray):
    return _log_response(system.zeros, system.poles, system.gain, 2j * np.pi * f)


def _digital(zpk, rate: float, f: np.ndarray):
    z, p, k = zpk
    return _log_response(z, p, k, np.exp(2j * np.pi * f / rate))


def _wrap_deg(rad: np.ndarray) -> np.ndarray:
    return np.degrees((rad + np.pi) % (2 * np.pi) - np.pi)


def _low_edge(system, rate: float, fraction: float = 1e-5) -> float:
    """Low edge (Hz) of a check grid: ``fraction`` of the rate, or a tenth of the lowest
    root's frequency when that is lower."""
    roots = np.abs(np.concatenate([np.atleast_1d(system.zeros), np.atleast_1d(system.poles)]))
    roots = roots[roots > 0]
    lo = rate * fraction
    if roots.size:
        lo = min(lo, 0.1 * float(np.min(roots)) / (2 * math.pi))
    # a root at a subnormal frequency (5e-324 rad/s) would put the edge at 0 Hz, where no
    # log grid starts: the smallest normal float instead (the response is flat below it)
    return max(lo, sys.float_info.min)


def default_band(system, rate: float) -> tuple[float, float]:
    """(low, high) Hz: high = min(0.45 rate, where |H| has fallen 60 dB below its peak)."""
    lo = _low_edge(system, rate)
    hi = 0.45 * rate
    f = np.geomspace(lo, hi, 2000)
    logm, _ = _analog(system, f)
    logm = np.where(np.isfinite(logm), logm, -np.inf)
    ipk = int(np.argmax(logm))
    floor = logm[ipk] - _FLOOR_DB * math.log(10) / 20
    below = np.nonzero(logm[ipk:] < floor)[0]
    if below.size:
        hi = float(f[ipk + below[0]])
    return lo, hi


def _check_band(band_hz: Any, system, rate: float) -> tuple[float, float]:
    if band_hz is None:
        return default_band(system, rate)
    try:
        vals = [float(v) for v in np.atleast_1d(np.asarray(band_hz, dtype=np.float64))]
    except (TypeError, ValueError):
        raise DiscretizationError(
            f"band must be a frequency or (low, high) in Hz, got {band_hz!r}"
        ) from None
    if len(vals) == 1:
        lo, hi = _low_edge(system, rate), vals[0]
    elif len(vals) == 2:
        lo, hi = vals
        if lo <= 0:
            lo = _low_edge(system, rate)
    else:
        raise DiscretizationError(f"band must be a frequency or (low, high) in Hz, got {band_hz!r}")
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo or hi > rate / 2:
        raise DiscretizationError(
            f"band ({lo:g}, {hi:g}) Hz must have low < high <= Nyquist ({rate / 2:g} Hz)"
        )
    return lo, hi


def _grid(system, lo: float, hi: float, rate: float, discrete_poles=None) -> np.ndarray:
    dense = np.concatenate([np.geomspace(lo, hi, 1200), np.linspace(lo, hi, 600)[1:], [hi]])
    return np.unique(np.concatenate([
        dense, check_frequencies(system, rate, lo, hi, discrete_poles, n_log=2)]))


@dataclass
class AccuracyReport:
    """Errors of a discrete model against H(j 2 pi f) over a band.

    All magnitude errors are discrete minus analog, in dB, with their sign;
    phase errors in degrees (discrete minus analog, wrapped to +-180).
    """

    method: str
    rate_hz: float
    band_hz: tuple[float, float]
    max_mag_error_db: float
    max_mag_error_at_hz: float
    max_phase_error_deg: float
    max_phase_error_at_hz: float
    dc_gain_error_db: float | None
    dead_time_s: float
    dead_time_samples: float
    dead_time_handling: str
    dead_time_max_phase_error_deg: float
    dead_time_max_mag_error_db: float
    error_limit_db: float
    suggested_rate_hz: dict[str, float | None]
    warnings: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    max_sine_error: float | None = None
    max_sine_error_at_hz: float | None = None
    realization: str | None = None
    round_off_level: float | None = None

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> AccuracyReport:
        """The report back from :meth:`to_dict` output (e.g. to format it)."""
        kw = {f.name: d.get(f.name) for f in fields(cls)}
        band = d["band_hz"]
        if np.ndim(band) == 0:
            band = (d.get("band_low_hz", 0.0), band)
        kw["band_hz"] = (float(band[0]), float(band[1]))
        kw["warnings"] = list(d.get("warnings") or [])
        kw["notes"] = list(d.get("notes") or [])
        return cls(**kw)

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-friendly dict (floats, strings, lists, None)."""
        return {
            "method": self.method,
            "rate_hz": self.rate_hz,
            "band_hz": self.band_hz[1],
            "band_low_hz": self.band_hz[0],
            "max_mag_error_db": self.max_mag_error_db,
            "max_mag_error_at_hz": self.max_mag_error_at_hz,
            "max_phase_error_deg": self.max_phase_error_deg,
            "max_phase_error_at_hz": self.max_phase_error_at_hz,
            "dc_gain_error_db": self.dc_gain_error_db,
            "dead_time_s": self.dead_time_s,
            "dead_time_samples": self.dead_time_samples,
            "dead_time_handling": self.dead_time_handling,
            "dead_time_max_phase_error_deg": self.dead_time_max_phase_error_deg,
            "dead_time_max_mag_error_db": self.dead_time_max_mag_error_db,
            "error_limit_db": self.error_limit_db,
            "suggested_rate_hz": dict(self.suggested_rate_hz),
            "warnings": list(self.warnings),
            "notes": list(self.notes),
            "max_sine_error": self.max_sine_error,
            "max_sine_error_at_hz": self.max_sine_error_at_hz,
            "realization": self.realization,
            "round_off_level": self.round_off_level,
        }

    def format(self) -> str:
        """A readable text block."""
        lo, hi = self.band_hz
        dc = (
            "n/a (H(0) is 0 or infinite)"
            if self.dc_gain_error_db is None
            else _db(self.dc_gain_error_db)
        )
        mag_at = _hz(self.max_mag_error_at_hz)
        ph_at = _hz(self.max_phase_error_at_hz)
        lines = [
            f"Discrete model: {self.method} at {_hz(self.rate_hz)}",
            f"  band checked            {_hz(lo)} to {_hz(hi)} "
            "(where |H| is within 60 dB of its peak)",
            f"  largest magnitude error {_db(self.max_mag_error_db)} at {mag_at}",
            f"  largest phase error     {_deg(self.max_phase_error_deg)} at {ph_at}",
            f"  DC gain error           {dc}",
        ]
        if self.max_sine_error is not None:
            lines.append(
                f"  steady-sine error       {100 * self.max_sine_error:.3g} % of the largest "
                f"steady output, at {_hz(self.max_sine_error_at_hz)} (magnitude and phase)"
            )
        if self.realization is not None:
            lines.append(
                f"  realization             {self.realization}, expected round-off about "
                f"{self.round_off_level:.1e} of the signal (estimate)"
            )
        if self.dead_time_s > 0:
            lines.append(
                f"  dead time               {self.dead_time_s:.6g} s = "
                f"{self.dead_time_samples:.6g} samples; {self.dead_time_handling}"
            )
            lines.append(
                f"  dead-time error         {_deg(self.dead_time_max_phase_error_deg)}, "
                f"{_db(self.dead_time_max_mag_error_db)} (largest in the band)"
            )
        lines.append(
            f"  lowest rate for a steady-sine error within {self.error_limit_db:g} dB "
            "(magnitude and phase) in this band:"
        )
        for name, rate in self.suggested_rate_hz.items():
            mark = " (this model)" if name == self.method else ""
            text = "not reached below 1e6 x the band edge" if rate is None else _hz(rate)
            lines.append(f"    {name:<18} {text}{mark}")
        for note in self.notes:
            lines.append(f"  note: {note}")
        for w in self.warnings:
            lines.append(f"  warning: {w}")
        return "\n".join(lines)


def _db(x: float) -> str:
    """dB to 4 significant digits; below 1e-9 dB (round-off) shown as 0."""
    return "0 dB" if abs(x) < 1e-9 else f"{x:+.4g} dB"


def _deg(x: float) -> str:
    return "0 deg" if abs(x) < 1e-9 else f"{x:+.4g} deg"


def _hz(f: float) -> str:
    if f >= 1e6:
        return f"{f / 1e6:.4g} MHz"
    if f >= 1e3:
        return f"{f / 1e3:.4g} kHz"
    return f"{f:.4g} Hz"


def _errors(logd, angd, loga, anga, f, mask):
    mag_db = (logd - loga) * 20 / math.log(10)
    ph = _wrap_deg(angd - anga)
    mag_db = np.where(mask, mag_db, 0.0)
    ph = np.where(mask, ph, 0.0)
    im = int(np.argmax(np.abs(mag_db)))
    ip = int(np.argmax(np.abs(ph)))
    return float(mag_db[im]), float(f[im]), float(ph[ip]), float(f[ip])


#: Methods whose discrete model is a state space before it becomes zeros, poles and
#: gain: the rate search evaluates that state space directly.
_STATE_SPACE_METHODS = ("impulse-invariant", "step-invariant", "ramp-invariant")


def _increment_model(system, method: str, rate: float, prewarp_hz, match_hz):
    """(E, G, C, D) of ``method`` at ``rate`` in increment form, E = Phi - I.

    For the hold and impulse-invariant methods straight from the state space
    (Franklin, Powell & Workman, 3rd ed., ch. 6), without the generalized-
    eigenvalue zeros and the gain matching that make up most of a design's
    cost: the rate search evaluates ~60 candidate models per report.
    """
    if method in _STATE_SPACE_METHODS:
        A, B, C, D = analog_state_space(system.zeros, system.poles, system.gain)
        T = 1.0 / rate
        if method == "impulse-invariant":
            return _impulse_design(A, B, C, D, T)
        return _hold_design(A, B, C, D, T, method, 0.0)[:4]
    des = design(system.zeros, system.poles, system.gain, rate, method,
                 prewarp_hz=prewarp_hz, match_hz=match_hz)
    return des.increment


def _method_error(system, method, rate, f, ha, floor, prewarp_hz, match_hz) -> float:
    """Largest steady-sine error of ``method`` at ``rate`` on the points f.

    |H_d - H| / max(|H|, floor): relative where |H| is above the floor (magnitude
    and phase together), relative to the floor below it. H_d is evaluated from the
    model's increment form, exact near z = 1, so a high rate never looks worse
    than a low one through round-off of the evaluation.
    """
    pw = mh = None
    if method == "bilinear" and prewarp_hz is not None and prewarp_hz < rate / 2:
        pw = prewarp_hz
    if method == "matched-z" and match_hz is not None and match_hz < rate / 2:
        mh = match_hz
    try:
        E, G, C, D = _increment_model(system, method, rate, pw, mh)
    except DiscretizationError:
        return math.inf
    hd = increment_response(E, G, C, D, np.expm1(2j * np.pi * f / rate))
    err = np.abs(hd - ha) / np.maximum(np.abs(ha), floor)
    err = err[np.isfinite(err)]
    return float(np.max(err)) if err.size else math.inf


def suggest_rates(
    system, band, mask_f, limit_db, prewarp_hz=None, match_hz=None
) -> dict[str, float | None]:
    """Lowest rate per method whose steady-sine error stays within ``limit_db``.

    The limit in dB is read as a complex relative error 10^(limit/20) - 1
    (0.1 dB: 1.16 %), magnitude and phase together, where |H| is within 20 dB
    of its peak (relative to that level below it). Rates are in Hz, rounded up
    to 3 significant figures.

    The band is fixed in hertz and must lie below 0.45 times the candidate
    rate. Search: doubling from band_high/0.45 until the error is under the
    limit (up to 2^20 times), then 8 bisection steps on a log scale; this
    assumes the error falls as the rate rises, as it does for all five methods
    once the rate is well above the system's frequencies. Each search stops as
    soon as its rounded result is decided (:func:`_search_rate`): the same rates.
    """
    f, ha, floor, x, r0 = _search_inputs(system, band, mask_f, limit_db)
    out: dict[str, float | None] = {}
    for method in METHODS:
        def err(r: float, method: str = method) -> float:
            return _method_error(system, method, r, f, ha, floor, prewarp_hz, match_hz)

        out[method] = _search_rate(err, r0, x)
    return out


def _advise(system, band, mask_f, limit_db, prewarp_hz, match_hz, method: str,
            rate: float) -> RateAdvice:
    """:class:`RateAdvice` from :func:`suggest_rates`' searches on these arguments: the
    own method's to its rate, the others' until within ``rate`` or not is decided."""
    f, ha, floor, x, r0 = _search_inputs(system, band, mask_f, limit_db)

    def search(m: str, within_hz: float | None):
        def err(r: float) -> float:
            return _method_error(system, m, r, f, ha, floor, prewarp_hz, match_hz)

        return _search_rate(err, r0, x, within_hz)

    own = search(method, None) if method in METHODS else None
    within = tuple(m for m in METHODS if m != method and search(m, rate))
    return RateAdvice(method, rate, own, within)


def _search_inputs(system, band, mask_f, limit_db):
    """(f, H(j 2 pi f), floor, relative limit, first candidate rate) of the rate search."""
    f = mask_f
    if f.size > 160:
        keep = np.linspace(0, f.size - 1, 160).astype(int)
        f = np.unique(np.concatenate([f[keep], check_frequencies(
            system, 1.0, f[0], f[-1], None, n_log=2)]))
    ha = _analog_h(system, f)
    peak = float(np.max(np.abs(ha[np.isfinite(ha)]))) if np.any(np.isfinite(ha)) else 1.0
    floor = 0.1 * peak
    x = 10 ** (limit_db / 20) - 1
    r0 = band[1] / 0.45
    return f, ha, floor, x, r0


#: _search_rate's bracket does not decide the answer yet.
_OPEN = object()


def _search_rate(err, r0: float, x: float, within_hz: float | None = None):
    """One method's rate search (see :func:`suggest_rates`): the lowest rate found with
    ``err(rate) <= x``, rounded up (:func:`_round_up`), or None when not reached; with
    ``within_hz``, whether that rate is found and at or below ``within_hz``.

    With ``within_hz`` the search stops as soon as that is decided, having evaluated the
    same rates in the same order as the full search up to there. Why that gives the
    full search's answer: the rate found (the bisection's final upper end) always lies
    above every rate that failed (``lo``; a bisection point equal to ``lo`` fails
    again, err being a function of the rate) and at or below every rate that passed
    (``hi``); and the rounding up is monotone (:func:`_rounding_range`). So once every
    rate above lo rounds above ``within_hz``, the answer is False whatever follows (not
    reached counts as not within); once hi rounds to ``within_hz`` or below, True.
    Neither needs err to fall as the rate rises. (Stopping the full search once all of
    (lo, hi] rounds to one value saved 0.4 % of its evaluations on the test systems: the
    bisection ends at a ratio of 2^(1/256), under most rounding steps; not done.)
    """
    def decided(lo: float, hi: float | None):
        low, high = _rounding_range(lo, hi)
        if low is not None and low > within_hz:
            return False
        if high is not None and high <= within_hz:
            return True
        return _OPEN

    def answer(rounded):
        if within_hz is None:
            return rounded
        return rounded is not None and rounded <= within_hz

    if err(r0) <= x:
        return answer(_round_up(r0))
    lo, hi = r0, None
    r = r0
    for _ in range(20):
        if within_hz is not None:
            d = decided(lo, None)
            if d is not _OPEN:
                return d
        r *= 2
        if err(r) <= x:
            hi = r
            break
        lo = r
    if hi is None:
        return answer(None)
    for _ in range(8):
        if within_hz is not None:
            d = decided(lo, hi)
            if d is not _OPEN:
                return d
        mid = math.sqrt(lo * hi)
        if err(mid) <= x:
            hi = mid
        else:
            lo = mid
    return answer(_round_up(hi))


def _rounding_range(lo: float, hi: float | None) -> tuple[Any, Any]:
    """(least, greatest) value :func:`_round_up` gives any rate in (lo, hi], each None
    where it cannot be told (hi None: no greatest). The rounding is monotone wherever
    its arithmetic is exact: from 100 Hz on it is Python integer arithmetic on one
    float division by a power of ten (ceil(x / 10^e) * 10^e, e >= 0; at a decade's
    edge both sides give 10^k). Below 100 Hz (a float 10^e) monotonicity is only
    claimed within one decade, where the scale is one fixed float; so there the range
    is told only when both ends share a decade."""
    below = math.nextafter(lo, math.inf)  # the least rate above lo
    low = _round_up(below)
    high = None if hi is None else _round_up(hi)
    if below >= 100.0:
        return low, high
    if hi is not None and _decade(below) == _decade(hi):
        return low, high
    return None, None


def _decade(x: float) -> int:
    return math.floor(math.log10(x))


def _analog_h(system, f: np.ndarray) -> np.ndarray:
    """H(j 2 pi f) without the dead time (complex)."""
    h = system.frequency_response(f)
    if system.delay_s:
        h = h * np.exp(2j * np.pi * f * system.delay_s)
    return h


def _round_up(x: float) -> float:
    e = math.floor(math.log10(x)) - 2
    return math.ceil(x / 10**e) * 10**e


def accuracy_report(
    model, band_hz: Any = None, limit_db: float = DEFAULT_LIMIT_DB, suggest: bool = True
) -> AccuracyReport:
    """Accuracy report of a DiscreteSystem against its analog H(s).

    Parameters
    ----------
    model : DiscreteSystem
    band_hz : float or (float, float), optional
        Upper edge, or (low, high), in Hz; default: see module notes.
    limit_db : float
        Magnitude-error limit for the suggested sample rates (default 0.1 dB).
    suggest : bool
        Search for the suggested sample rates (most of the report's cost); when
        False, ``suggested_rate_hz`` is empty.

    Returns
    -------
    AccuracyReport

    References
    ----------
    .. [1] Oppenheim & Schafer, *Discrete-Time Signal Processing*, 3rd ed.,
           sec. 7.2 (the errors each method makes: warping, aliasing).
    .. [2] Franklin, Powell & Workman, *Digital Control of Dynamic Systems*,
           3rd ed., sec. 6.3 (comparison of the hold equivalents and matched z).
    """
    report, search_args = _report_without_rates(model, band_hz, limit_db)
    if suggest:
        report.suggested_rate_hz = suggest_rates(*search_args)
    return report


def _report_without_rates(model, band_hz: Any, limit_db: float):
    """(the accuracy report with no suggested rates, suggest_rates' arguments)."""
    limit = float(limit_db)
    if not (math.isfinite(limit) and limit > 0):
        raise DiscretizationError(f"error limit must be a positive number of dB, got {limit_db!r}")
    system = model.system
    rate = model.rate
    lo, hi = _check_band(band_hz, system, rate)
    f = _grid(system, lo, hi, rate, model.zpk[1])
    loga, anga = _analog(system, f)
    finite = np.isfinite(loga)
    peak = np.max(loga[finite]) if np.any(finite) else 0.0
    mask = finite & (loga >= peak - _FLOOR_DB * math.log(10) / 20)

    opts = model.options
    fractional = opts.get("fractional_delay_samples", 0.0) > 0
    if fractional:
        des0 = design(system.zeros, system.poles, system.gain, rate, model.method,
                      prewarp_hz=opts.get("prewarp_hz"), match_hz=opts.get("match_hz"))
        zpk0 = (des0.zeros, des0.poles, des0.gain)
    else:
        zpk0 = model.zpk
    if fractional or model.n_sections == 0:
        logd, angd = _digital(zpk0, rate, f)
    else:
        h = model.frequency_response(f, dead_time=False)
        with np.errstate(divide="ignore"):
            logd, angd = np.log(np.abs(h)), np.angle(h)
    mag, mag_at, ph, ph_at = _errors(logd, angd, loga, anga, f, mask)
    # Steady-sine error, magnitude and phase together, relative to the peak |H|.
    with np.errstate(over="ignore", invalid="ignore"):
        sine = np.abs(np.exp(logd + 1j * angd) - np.exp(loga + 1j * anga)) / math.exp(peak)
    sine = np.where(finite & np.isfinite(sine), sine, 0.0)
    i_sine = int(np.argmax(sine))

    dc_err = None
    dc_a = system.dc_gain
    if math.isfinite(dc_a) and dc_a != 0:
        ld, _ = _digital(zpk0, rate, np.array([0.0]))
        if np.isfinite(ld[0]):
            dc_err = float((ld[0] - math.log(abs(dc_a))) * 20 / math.log(10))

    # Dead time on its own: whole samples are exact; compare the fractional part's
    # realization with a pure delay e^{-j w frac T}.
    dt_ph = dt_mag = 0.0
    handling = opts.get("fractional_delay_handling", "none")
    if fractional:
        logf, angf = _digital(model.zpk, rate, f)
        w = 2 * np.pi * f / rate
        delay_in_sos = model.delay_samples - model.delay_line
        d_mag = (logf - logd) * 20 / math.log(10)
        d_ph = _wrap_deg(angf - angd + w * delay_in_sos)
        d_mag = np.where(mask, d_mag, 0.0)
        d_ph = np.where(mask, d_ph, 0.0)
        dt_mag = float(d_mag[int(np.argmax(np.abs(d_mag)))])
        dt_ph = float(d_ph[int(np.argmax(np.abs(d_ph)))])

    notes = []
    if model.method == "matched-z":
        notes.append(f"gain matched at {opts.get('gain_matched_at')}")
    if model.method == "bilinear" and opts.get("prewarp_hz"):
        notes.append(f"prewarped at {_hz(opts['prewarp_hz'])}")
    if model.method == "impulse-invariant":
        notes.append("h[0] = T h(0+)/2 (half-sample correction, Jackson 2000)")
    if model.method in ("step-invariant", "ramp-invariant"):
        reading = "held constant" if model.method == "step-invariant" else "linear"
        notes.append(
            f"exact at the samples for inputs {reading} between samples; the frequency "
            "errors show what other inputs see"
        )
    search_args = (system, (lo, hi), f[mask], limit, opts.get("prewarp_hz"),
                   opts.get("match_hz") if model.method == "matched-z" else None)
    report = AccuracyReport(
        method=model.method,
        rate_hz=rate,
        band_hz=(float(lo), float(hi)),
        max_mag_error_db=mag,
        max_mag_error_at_hz=mag_at,
        max_phase_error_deg=ph,
        max_phase_error_at_hz=ph_at,
        dc_gain_error_db=dc_err,
        dead_time_s=float(opts.get("dead_time_s", 0.0)),
        dead_time_samples=float(model.delay_samples),
        dead_time_handling=handling,
        dead_time_max_phase_error_deg=dt_ph,
        dead_time_max_mag_error_db=dt_mag,
        error_limit_db=limit,
        suggested_rate_hz={},
        warnings=list(model.warnings),
        notes=notes,
        max_sine_error=float(sine[i_sine]),
        max_sine_error_at_hz=float(f[i_sine]),
        realization=getattr(model, "realization", None),
        round_off_level=getattr(model, "round_off_level", None),
    )
    return report, search_args


@dataclass(frozen=True)
class RateAdvice:
    """What a poor model's warning reads from the rate search (:func:`method_warning`).

    ``own_hz``: the model's own method's suggested rate (None: not reached);
    ``within``: the other methods whose suggested rate is at or below the model's
    rate, in :data:`METHODS` order.
    """

    method: str
    rate_hz: float
    own_hz: float | None
    within: tuple[str, ...]

    @classmethod
    def from_rates(cls, method: str, rate: float, rates: dict[str, Any]) -> RateAdvice:
        """The advice a full report's ``suggested_rate_hz`` gives."""
        return cls(method, rate, rates.get(method) or None,
                   tuple(m for m, r in rates.items() if m != method and r and r <= rate))


def rate_advice(model, limit_db: float = DEFAULT_LIMIT_DB) -> RateAdvice | None:
    """:class:`RateAdvice` for ``model`` (default band), as the full report's rates give
    it, at a fraction of its cost: the model's own method is searched to its rounded
    rate, the others only until whether theirs is at or below the model's rate is
    decided (:func:`_search_rate`).

    Everything the report computes besides the rates is computed as the report does it,
    so a warning it raises (numpy's, on a response value) is raised here too. Returns
    None when the searches raise a warning: the full search might raise more in the
    rates this one skips, so the caller makes the full report instead (no test system
    does; see tests/test_rate_advice.py).
    """
    import warnings as _w

    _, args = _report_without_rates(model, None, limit_db)
    with _w.catch_warnings(record=True) as caught:
        _w.simplefilter("always")
        advice = _advise(*args, model.method, model.rate)
    return None if caught else advice


__all__ += ["default_band", "suggest_rates", "peak_frequency", "RateAdvice", "rate_advice"]


def discrete_section(
    system,
    rate_hz: float,
    method: str | None = None,
    *,
    prewarp_hz: float | None = None,
    match_hz: float | None = None,
    band_hz: Any = None,
    limit_db: float = DEFAULT_LIMIT_DB,
) -> dict[str, Any]:
    """Discretize and report, as one JSON-ready dict (the ``inspect --rate`` section).

    The accuracy report's fields (:meth:`AccuracyReport.to_dict`) plus
    ``sections`` (number of second-order sections) and ``delay_line_samples``.
    """
    from simwave.discrete.methods import DEFAULT_METHOD, discretize

    model = discretize(system, rate_hz, method or DEFAULT_METHOD,
                       prewarp_hz=prewarp_hz, match_hz=match_hz)
    out = model.accuracy(band_hz=band_hz, limit_db=limit_db).to_dict()
    out["sections"] = model.n_sections
    out["delay_line_samples"] = model.delay_line
    out["realization_reason"] = model.options.get("realization_reason")
    check = method_check(model)
    out["method_check"] = check
    if check["poor"]:
        text = method_warning(check, out, model.method, model.rate, 1, system, model.options)
        out["warnings"].append(text)
        import warnings as _w

        _w.warn(text, stacklevel=2)
    return out


def format_discrete_section(d: dict[str, Any]) -> list[str]:
    """Text lines for :func:`discrete_section` output."""
    lines = AccuracyReport.from_dict(d).format().splitlines()
    lines.insert(1, f"  second-order sections   {d.get('sections')}")
    if d.get("realization_reason"):
        at = next(i for i, line in enumerate(lines) if line.startswith("  realization"))
        lines.insert(at + 1, f"    why: {d['realization_reason']}")
    return lines


__all__ += ["discrete_section", "format_discrete_section"]
