"""Test signals: steps, pulses, pulse trains, square, ramp, sine, multi-tone,
swept sine, white and pink noise, piecewise linear.

Every kind is evaluated tile by tile (:data:`TILE` samples, tiles aligned to
sample 0), and both :func:`generate` and :func:`generate_blocks` assemble the
same tiles, so a streamed block is bit-identical to the same slice of the whole
signal whatever SIMD path numpy takes. Noise uses one seeded PCG64 stream
consumed tile after tile, so a seed gives the same samples on every run.

Times given for edges are the 50 % reference-level instants, and ``rise`` /
``fall`` are transition durations between the 10 % and 90 % reference levels,
as IEEE Std 181-2011 defines them (secs. 3.1 and 5.3; pulse duration between
the 50 % instants). A finite edge is a straight line, so it spans
``rise / 0.8`` from 0 % to 100 %, centred on its 50 % instant.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable, Iterator

import numpy as np

from simwave.errors import WaveformError
from simwave.signals.quantity import parse_quantity
from simwave.signals.stream import rechunk
from simwave.signals.waveform import Waveform

def _signal():
    """scipy.signal, imported on first use: only pink noise needs it, and it takes a second
    or more to import (which a batch's planning process and every help screen would pay)."""
    import scipy.signal

    return scipy.signal


#: Samples per tile (see module docs).
TILE = 1 << 16
#: Largest in-memory result of generate(); longer signals: generate_blocks().
MEMORY_LIMIT = 2 * 1024 ** 3
_SNAP = 1e-9


@dataclass(frozen=True)
class Param:
    """One generator parameter: type, default and a one-line description."""

    type: str  # "q" quantity, "int", "qlist", "points", "choice", "text"
    default: Any = None
    help: str = ""
    choices: tuple[str, ...] = ()
    required: bool = False


_LEVELS = {
    "level": Param("q", 1.0, "final (pulse: top) state level"),
    "base": Param("q", 0.0, "initial (pulse: base) state level"),
}
_EDGES = {
    "rise": Param("q", None, "leading-edge 10-90 % transition duration, s (default 0: ideal)"),
    "fall": Param("q", None, "trailing-edge 10-90 % transition duration, s (default: rise)"),
    "edge": Param("q", 0.0, "both transition durations, s"),
}
_SINE = {
    "amplitude": Param("q", 1.0, "peak amplitude"),
    "phase": Param("q", 0.0, "phase at t = 0, degrees"),
    "offset": Param("q", 0.0, "added constant"),
}
_NOISE = {
    "amplitude": Param("q", 1.0, "RMS value (standard deviation)"),
    "offset": Param("q", 0.0, "added constant (mean)"),
    "seed": Param("int", 0, "random seed (same seed, same samples)"),
}

#: kind -> (description, parameters)
KINDS: dict[str, tuple[str, dict[str, Param]]] = {
    "step": ("base before `time`, level from `time` on", {
        "time": Param("q", 0.0, "50 % instant of the step, s"), **_LEVELS,
        "rise": _EDGES["rise"], "edge": _EDGES["edge"]}),
    "impulse": ("one sample of value area*rate (unit area by default) at `time`", {
        "time": Param("q", 0.0, "instant, s (rounded to the nearest sample)"),
        "area": Param("q", 1.0, "area (value x seconds)")}),
    "pulse": ("one rectangular or trapezoidal pulse", {
        "width": Param("q", None, "pulse duration between 50 % instants, s", required=True),
        "delay": Param("q", 0.0, "50 % instant of the leading edge, s"), **_LEVELS, **_EDGES}),
    "pulse-train": ("`count` pulses, one every `period`", {
        "width": Param("q", None, "pulse duration, s (or give duty)"),
        "period": Param("q", None, "pulse repetition period, s (or give duty)"),
        "duty": Param("q", None, "width / period (0..1 or 25%)"),
        "count": Param("int", None, "number of pulses (default: all that start in the record)"),
        "delay": Param("q", 0.0, "leading edge of the first pulse, s"), **_LEVELS, **_EDGES}),
    "square": ("offset +/- amplitude, high for the first `duty` of each period", {
        "frequency": Param("q", None, "Hz", required=True),
        "amplitude": Param("q", 1.0, "half the peak-to-peak value"),
        "duty": Param("q", 0.5, "fraction of the period at the high level"),
        "phase": Param("q", 0.0, "degrees"), "offset": Param("q", 0.0, "added constant")}),
    "ramp": ("base until `time`, then rising at `slope` per second", {
        "slope": Param("q", 1.0, "units per second"), "time": Param("q", 0.0, "start, s"),
        "base": Param("q", 0.0, "value before the start"),
        "level": Param("q", None, "hold once this value is reached (default: no limit)")}),
    "sine": ("offset + amplitude*sin(2*pi*frequency*t + phase)", {
        "frequency": Param("q", None, "Hz", required=True), **_SINE}),
    "multitone": ("sum of sines", {
        "frequencies": Param("qlist", None, "Hz, e.g. 100,1k,3k", required=True),
        "amplitude": Param("qlist", None, "per tone (one value or one per tone; default 1/N)"),
        "phases": Param("text", "schroeder",
                        "schroeder (low crest factor), zero, or degrees per tone"),
        "offset": Param("q", 0.0, "added constant")}),
    "sweep": ("swept sine from f0 to f1 over the record (linear or logarithmic law)", {
        "f0": Param("q", None, "start frequency, Hz", required=True),
        "f1": Param("q", None, "end frequency, Hz", required=True),
        "law": Param("choice", "linear", "frequency law", choices=("linear", "log")),
        **_SINE}),
    "white-noise": ("Gaussian (or uniform) white noise", {
        **_NOISE, "distribution": Param("choice", "normal", "amplitude distribution",
                                        choices=("normal", "uniform"))}),
    "pink-noise": ("Gaussian noise with a 1/f power spectrum above fmin", {
        **_NOISE, "fmin": Param("q", None, "lower corner, Hz (default rate*1e-5)")}),
    "pwl": ("piecewise linear through (time, value) points, held outside them", {
        "points": Param("points", None, "time:value pairs, e.g. 0:0,1m:1,3m:1,4m:0",
                        required=True)}),
}
_COMMON = {"units": Param("text", "", "unit of the samples (e.g. V)")}


def kind_name(kind: str) -> str:
    """Canonical kind name (``pulse_train`` -> ``pulse-train``) or an error listing the kinds."""
    k = str(kind).strip().lower().replace("_", "-")
    aliases = {"pulsetrain": "pulse-train", "chirp": "sweep", "white": "white-noise",
               "pink": "pink-noise", "noise": "white-noise", "tones": "multitone"}
    k = aliases.get(k, k)
    if k not in KINDS:
        raise WaveformError(f"unknown signal kind {kind!r}; kinds: {', '.join(KINDS)}")
    return k


def _points(value: Any, name: str) -> list[tuple[float, float]]:
    if isinstance(value, str):
        pairs = [p for p in value.replace(";", ",").replace("/", ",").split(",") if p.strip()]
        out = []
        for p in pairs:
            if ":" not in p:
                raise WaveformError(f"{name}: {p!r} is not time:value")
            t, v = p.split(":", 1)
            out.append((parse_quantity(t, f"{name} time"), parse_quantity(v, f"{name} value")))
    else:
        try:
            out = [(parse_quantity(t, f"{name} time"), parse_quantity(v, f"{name} value"))
                   for t, v in value]
        except (TypeError, ValueError):
            raise WaveformError(f"{name}: give (time, value) pairs") from None
    if not out:
        raise WaveformError(f"{name}: no points")
    times = [t for t, _ in out]
    if any(b < a for a, b in zip(times, times[1:], strict=False)):
        raise WaveformError(f"{name}: times must not decrease")
    return out


def _qlist(value: Any, name: str) -> list[float]:
    if isinstance(value, str):
        items = [v for v in value.replace(";", ",").replace("/", ",").split(",") if v.strip()]
    elif isinstance(value, (list, tuple, np.ndarray)):
        items = list(value)
    else:
        items = [value]
    if not items:
        raise WaveformError(f"{name}: empty list")
    return [parse_quantity(v, name) for v in items]


def coerce_params(kind: str, params: dict[str, Any]) -> dict[str, Any]:
    """Check names and convert values (engineering suffixes, lists, points) for ``kind``.

    Returns the full parameter set with defaults filled in.
    """
    kind = kind_name(kind)
    schema = {**KINDS[kind][1], **_COMMON}
    out: dict[str, Any] = {}
    for key, value in params.items():
        k = key.strip().lower().replace("-", "_")
        if k not in schema:
            raise WaveformError(
                f"{kind}: unknown parameter {key!r}; parameters: {', '.join(schema)}"
            )
        p = schema[k]
        where = f"{kind} {k}"
        if value is None:
            out[k] = None
        elif p.type == "q":
            out[k] = parse_quantity(value, where)
        elif p.type == "int":
            try:
                f = parse_quantity(value, where)
            except WaveformError:
                raise WaveformError(f"{where}: {value!r} is not a whole number") from None
            if f != int(f):
                raise WaveformError(f"{where}: {value!r} is not a whole number")
            out[k] = int(f)
        elif p.type == "qlist":
            out[k] = _qlist(value, where)
        elif p.type == "points":
            out[k] = _points(value, where)
        elif p.type == "choice":
            v = str(value).strip().lower()
            v = {"logarithmic": "log", "exponential": "log", "lin": "linear",
                 "gaussian": "normal"}.get(v, v)
            if v not in p.choices:
                raise WaveformError(f"{where}: {value!r}; choose {', '.join(p.choices)}")
            out[k] = v
        else:
            out[k] = value if isinstance(value, (list, tuple)) else str(value)
    for k, p in schema.items():
        if k not in out:
            if p.required:
                raise WaveformError(f"{kind}: parameter {k!r} is required ({p.help})")
            out[k] = p.default
    return out


def _snap(pos: Any) -> Any:
    """Positions within 1e-9 (relative) of a whole sample are that sample: 1m * 10k = 10."""
    r = np.rint(pos)
    return np.where(np.abs(pos - r) <= _SNAP * np.maximum(1.0, np.abs(pos)), r, pos)


def _edge(k: np.ndarray, pos: Any, span: float) -> np.ndarray:
    """0 before, 1 after a transition whose 50 % instant is at sample ``pos``.

    ``span`` is the 0-100 % duration in samples (0: ideal step, value 1 at ``pos``).
    """
    if span <= 0:
        return (k >= pos).astype(np.float64)
    return np.clip((k - pos) / span + 0.5, 0.0, 1.0)


def _n_samples(rate: Any, duration: Any) -> tuple[float, float, int]:
    r = parse_quantity(rate, "rate")
    if not r > 0:
        raise WaveformError(f"rate must be > 0 Hz, got {r:g}")
    d = parse_quantity(duration, "duration")
    if not d > 0:
        raise WaveformError(f"duration must be > 0 s, got {d:g}")
    n = int(round(d * r))
    if n < 1:
        raise WaveformError(f"duration {d:g} s is shorter than one sample at {r:g} Hz")
    return r, d, n


class _Tiles:
    """Evaluates one kind over [k0, k1) sample indices, tile by tile, in order."""

    def __init__(self, kind: str, rate: float, n: int, p: dict[str, Any]) -> None:
        self.kind, self.rate, self.n, self.p = kind, rate, n, p
        self.prepare = getattr(self, "_prep_" + kind.replace("-", "_"), None)
        self.evaluate: Callable[[np.ndarray], np.ndarray] = getattr(
            self, "_" + kind.replace("-", "_"))
        if self.prepare:
            self.prepare()

    def __iter__(self) -> Iterator[np.ndarray]:
        for k0 in range(0, self.n, TILE):
            k = np.arange(k0, min(k0 + TILE, self.n), dtype=np.float64)
            yield self.evaluate(k)

    # ---- edges ---------------------------------------------------------------
    def _spans(self) -> tuple[float, float]:
        p = self.p
        edge = p.get("edge") or 0.0
        rise = p.get("rise") if p.get("rise") is not None else edge
        fall = p.get("fall") if p.get("fall") is not None else rise
        if rise < 0 or fall < 0:
            raise WaveformError(f"{self.kind}: transition durations must be >= 0")
        # linear edge: 10-90 % duration is 0.8 of the 0-100 % span (IEEE Std 181-2011, 5.3)
        return rise / 0.8 * self.rate, fall / 0.8 * self.rate

    def _step(self, k: np.ndarray) -> np.ndarray:
        p = self.p
        span, _ = self._spans()
        pos = _snap(p["time"] * self.rate)
        return p["base"] + (p["level"] - p["base"]) * _edge(k, pos, span)

    def _prep_impulse(self) -> None:
        self.i_imp = int(round(self.p["time"] * self.rate))
        if not 0 <= self.i_imp < self.n:
            raise WaveformError(f"impulse: time {self.p['time']:g} s is outside the record")

    def _impulse(self, k: np.ndarray) -> np.ndarray:
        # discrete stand-in for the Dirac impulse: area * rate over one sample interval
        return np.where(k == self.i_imp, self.p["area"] * self.rate, 0.0)

    def _prep_pulse(self) -> None:
        p = self.p
        if not p["width"] > 0:
            raise WaveformError(f"pulse: width must be > 0 s, got {p['width']:g}")
        rs, fs = self._spans()
        if p["width"] * self.rate < (rs + fs) / 2:
            raise WaveformError("pulse: width is shorter than its edges (width >= (rise+fall)/1.6)")

    def _pulse(self, k: np.ndarray) -> np.ndarray:
        p = self.p
        rs, fs = self._spans()
        lead = _snap(p["delay"] * self.rate)
        trail = _snap((p["delay"] + p["width"]) * self.rate)
        return p["base"] + (p["level"] - p["base"]) * (_edge(k, lead, rs) - _edge(k, trail, fs))

    def _prep_pulse_train(self) -> None:
        p = self.p
        width, period, duty = p["width"], p["period"], p["duty"]
        given = sum(v is not None for v in (width, period, duty))
        if given < 2:
            raise WaveformError("pulse-train: give two of width, period and duty")
        if duty is not None and not 0 < duty < 1:
            raise WaveformError(f"pulse-train: duty must be between 0 and 1, got {duty:g}")
        if period is None:
            period = width / duty
        elif width is None:
            width = duty * period
        elif duty is not None and abs(width - duty * period) > 1e-9 * period:
            raise WaveformError(
                "pulse-train: width, period and duty disagree (width = duty*period)")
        if not period > 0 or not width > 0:
            raise WaveformError("pulse-train: width and period must be > 0")
        rs, fs = self._spans()
        self.P = _snap(period * self.rate)
        self.W = width * self.rate
        self.D = p["delay"] * self.rate
        if self.W < (rs + fs) / 2 or self.W + (rs + fs) / 2 > self.P:
            raise WaveformError("pulse-train: pulses and their edges do not fit in one period "
                                "((rise+fall)/1.6 <= width <= period - (rise+fall)/1.6)")
        if p["count"] is None:
            self.count = max(0, int(math.ceil((self.n - self.D) / self.P - _SNAP)))
        else:
            self.count = int(p["count"])
            if self.count < 0:
                raise WaveformError("pulse-train: count must be >= 0")
        self.rs, self.fs = rs, fs
        self.p.update(width=width, period=period, duty=width / period)

    def _pulse_train(self, k: np.ndarray) -> np.ndarray:
        p = self.p
        if self.count == 0:
            return np.full(k.shape, p["base"])
        j = np.floor((k - self.D + self.rs / 2) / self.P)
        j = np.clip(j, 0, self.count - 1)
        lead = _snap(self.D + j * self.P)
        trail = _snap(self.D + j * self.P + self.W)
        shape = _edge(k, lead, self.rs) - _edge(k, trail, self.fs)
        return p["base"] + (p["level"] - p["base"]) * shape

    def _prep_square(self) -> None:
        p = self.p
        if not p["frequency"] > 0:
            raise WaveformError("square: frequency must be > 0 Hz")
        if not 0 < p["duty"] < 1:
            raise WaveformError("square: duty must be between 0 and 1")

    def _square(self, k: np.ndarray) -> np.ndarray:
        p = self.p
        u = k * p["frequency"] / self.rate + p["phase"] / 360.0
        fr = u - np.floor(u)
        fr = np.where(fr > 1 - _SNAP, 0.0, fr)
        high = fr < p["duty"] - _SNAP
        return p["offset"] + p["amplitude"] * np.where(high, 1.0, -1.0)

    def _ramp(self, k: np.ndarray) -> np.ndarray:
        p = self.p
        t = k / self.rate
        x = p["base"] + p["slope"] * np.maximum(0.0, t - p["time"])
        if p["level"] is not None:
            x = np.minimum(x, p["level"]) if p["slope"] >= 0 else np.maximum(x, p["level"])
        return x

    @staticmethod
    def _sin_cycles(cycles: np.ndarray, phase_deg: float) -> np.ndarray:
        # keep the argument of sin small: whole cycles dropped before scaling by 2*pi
        fr = cycles - np.floor(cycles)
        return np.sin(2.0 * np.pi * fr + math.radians(phase_deg))

    def _prep_sine(self) -> None:
        if not self.p["frequency"] >= 0:
            raise WaveformError("sine: frequency must be >= 0 Hz")

    def _sine(self, k: np.ndarray) -> np.ndarray:
        p = self.p
        return p["offset"] + p["amplitude"] * self._sin_cycles(k * p["frequency"] / self.rate,
                                                               p["phase"])

    def _prep_multitone(self) -> None:
        p = self.p
        f = p["frequencies"]
        n = len(f)
        amp = p["amplitude"] or [1.0 / n]
        if len(amp) == 1:
            amp = amp * n
        if len(amp) != n:
            raise WaveformError(f"multitone: {len(amp)} amplitudes for {n} frequencies")
        ph = p["phases"]
        if isinstance(ph, (list, tuple)):
            phases = [parse_quantity(v, "multitone phases") for v in ph]
        elif str(ph).lower() == "schroeder":
            # M. R. Schroeder, "Synthesis of low-peak-factor signals and binary sequences with
            # low autocorrelation", IEEE Trans. Inf. Theory 16(1), 1970: phi_k = -pi k(k-1)/N
            # (formula quoted from memory), in degrees here
            phases = [-180.0 * kk * (kk - 1) / n for kk in range(1, n + 1)]
        elif str(ph).lower() == "zero":
            phases = [0.0] * n
        else:
            phases = _qlist(ph, "multitone phases")
        if len(phases) != n:
            raise WaveformError(f"multitone: {len(phases)} phases for {n} frequencies")
        self.tones = list(zip(f, amp, phases, strict=False))

    def _multitone(self, k: np.ndarray) -> np.ndarray:
        x = np.full(k.shape, self.p["offset"])
        for f, a, ph in self.tones:
            x += a * self._sin_cycles(k * f / self.rate, ph)
        return x

    def _prep_sweep(self) -> None:
        p = self.p
        if p["law"] == "log" and not (p["f0"] > 0 and p["f1"] > 0):
            raise WaveformError("sweep: a logarithmic sweep needs f0 > 0 and f1 > 0")
        self.T = self.n / self.rate

    def _sweep(self, k: np.ndarray) -> np.ndarray:
        p = self.p
        t = k / self.rate
        f0, f1, T = p["f0"], p["f1"], self.T
        if p["law"] == "linear" or f0 == f1:
            # phase = integral of f(t) = f0 + (f1-f0) t/T  (Farina, AES 108th Conv., 2000;
            # also the 'linear' law of scipy.signal.chirp)
            cycles = f0 * t + (f1 - f0) * t * t / (2.0 * T)
        else:
            # f(t) = f0 (f1/f0)^(t/T); phase = f0 T/ln(f1/f0) ((f1/f0)^(t/T) - 1) cycles
            # (Farina 2000, exponential sweep; scipy.signal.chirp 'logarithmic')
            L = T / math.log(f1 / f0)
            cycles = f0 * L * np.expm1(t / L)
        return p["offset"] + p["amplitude"] * self._sin_cycles(cycles, p["phase"])

    def _prep_white_noise(self) -> None:
        self.rng = np.random.Generator(np.random.PCG64(self.p["seed"]))

    def _white_noise(self, k: np.ndarray) -> np.ndarray:
        p = self.p
        if p["distribution"] == "uniform":
            # uniform on [-a*sqrt(3), a*sqrt(3)] has RMS a
            x = self.rng.uniform(-math.sqrt(3.0), math.sqrt(3.0), k.size)
        else:
            x = self.rng.standard_normal(k.size)
        return p["offset"] + p["amplitude"] * x

    def _prep_pink_noise(self) -> None:
        p = self.p
        fmin = p["fmin"] if p["fmin"] is not None else self.rate * 1e-5
        if not self.rate * 1e-7 <= fmin < self.rate / 20:
            raise WaveformError(f"pink-noise: fmin must be within rate*1e-7 .. rate/20, "
                                f"got {fmin:g} Hz")
        self.sos, gain2 = pink_filter(self.rate, fmin)
        self.scale = p["amplitude"] / math.sqrt(gain2)
        self.rng = np.random.Generator(np.random.PCG64(p["seed"]))
        self.zi = np.zeros((self.sos.shape[0], 2))
        # start in the steady state: run 5 time constants of the lowest pole and discard
        warm = int(math.ceil(5 * self.rate / (2 * math.pi * fmin)))
        for i in range(0, warm, TILE):
            w = self.rng.standard_normal(min(TILE, warm - i))
            _, self.zi = _signal().sosfilt(self.sos, w, zi=self.zi)

    def _pink_noise(self, k: np.ndarray) -> np.ndarray:
        w = self.rng.standard_normal(k.size)
        y, self.zi = _signal().sosfilt(self.sos, w, zi=self.zi)
        return self.p["offset"] + self.scale * y

    def _prep_pwl(self) -> None:
        pts = self.p["points"]
        self.pt_t = np.array([t for t, _ in pts]) * self.rate
        self.pt_v = np.array([v for _, v in pts])

    def _pwl(self, k: np.ndarray) -> np.ndarray:
        t, v = self.pt_t, self.pt_v
        i = np.searchsorted(t, k, side="right") - 1  # right-continuous at equal times (jumps)
        inside = (i >= 0) & (i < t.size - 1)
        ic = np.clip(i, 0, max(t.size - 2, 0))
        if t.size >= 2:
            seg = t[ic + 1] - t[ic]
            frac = np.where(seg > 0, (k - t[ic]) / np.where(seg > 0, seg, 1.0), 1.0)
            mid = v[ic] + (v[ic + 1] - v[ic]) * frac
        else:
            mid = np.full(k.shape, v[0])
        return np.where(inside, mid, np.where(i < 0, v[0], v[-1]))


def pink_filter(rate: float, fmin: float, per_decade: int = 3) -> tuple[np.ndarray, float]:
    """Second-order sections shaping white noise to a 1/f power spectrum above ``fmin``.

    Real pole-zero pairs spaced geometrically, ``per_decade`` pairs per
    decade, each zero half a spacing above its pole: the magnitude alternates
    between -20 dB/decade and flat, averaging -10 dB/decade (-3.01 dB/octave).
    Poles and zeros map to z by the matched pole-zero rule ``z = exp(s T)``.

    Returns
    -------
    sos : ndarray (n_sections, 6)
    gain2 : float
        Output variance for unit-variance white input (noise power gain).

    References
    ----------
    M. S. Keshner, "1/f noise", Proc. IEEE 70(3), 1982 (1/f spectra as sums of
    geometrically spaced relaxation processes). Franklin, Powell & Workman,
    *Digital Control of Dynamic Systems*, 3rd ed., ch. 6 (matched pole-zero).
    """
    ratio = 10.0 ** (1.0 / per_decade)
    poles, zeros = [], []
    fp = fmin
    while fp < rate / 2:
        poles.append(math.exp(-2 * math.pi * fp / rate))
        zeros.append(math.exp(-2 * math.pi * fp * math.sqrt(ratio) / rate))
        fp *= ratio
    sos = _signal().zpk2sos(zeros, poles, 1.0)
    # noise power gain = (1/pi) * integral_0^pi |H(e^jw)|^2 dw  (Parseval), on a grid
    # dense in log(w) where the response changes, linear near pi
    w = np.concatenate([np.geomspace(2 * math.pi * fmin / rate * 1e-3, 0.5, 40000)[:-1],
                        np.linspace(0.5, math.pi, 4000)])
    _, h = _signal().sosfreqz(sos, worN=w)
    h2 = np.abs(h) ** 2
    integral = np.trapezoid(h2, w) + h2[0] * w[0]
    return sos, float(integral / math.pi)


def _build(kind: str, rate: Any, duration: Any, params: dict[str, Any]) -> tuple:
    kind = kind_name(kind)
    r, d, n = _n_samples(rate, duration)
    p = coerce_params(kind, params)
    tiles = _Tiles(kind, r, n, p)
    attrs = {"generator": {"kind": kind, "rate": r, "duration": d,
                           "params": {k: v for k, v in p.items() if v is not None}}}
    return kind, r, n, p, tiles, attrs


def generate(kind: str, rate: float | str, duration: float | str, **params: Any) -> Waveform:
    """Make a test signal.

    Parameters
    ----------
    kind : str
        ``step``, ``impulse``, ``pulse``, ``pulse-train``, ``square``,
        ``ramp``, ``sine``, ``multitone``, ``sweep``, ``white-noise``,
        ``pink-noise`` or ``pwl`` (see :data:`KINDS` for each one's parameters).
    rate : float or str
        Sample rate in Hz (``"48k"`` accepted).
    duration : float or str
        Record length in seconds; ``round(duration*rate)`` samples at
        ``t = k / rate``.
    **params
        Parameters of the kind, numbers or text with engineering suffixes
        (``width="1m"``), plus ``units``.

    Returns
    -------
    Waveform
        One channel named after the kind, float64, ``t0 = 0``; ``attrs["generator"]``
        records kind, rate, duration and parameters.

    Raises
    ------
    WaveformError
        Unknown kind or parameter, bad value, rate or duration <= 0, or a
        result larger than :data:`MEMORY_LIMIT` (use :func:`generate_blocks`).

    References
    ----------
    IEEE Std 181-2011 (pulse and transition terms; 10-90 % transition
    duration, 50 % instants). A. Farina, "Simultaneous measurement of impulse
    response and distortion with a swept-sine technique", AES 108th
    Convention, 2000 (swept sines). M. S. Keshner, "1/f noise", Proc. IEEE
    70(3), 1982 (pink noise).

    Examples
    --------
    >>> w = generate("pulse", "10k", 0.01, width="1m", delay="2m")
    >>> int(w.data.sum())
    10
    """
    kind, r, n, p, tiles, attrs = _build(kind, rate, duration, params)
    if n * 8 > MEMORY_LIMIT:
        raise WaveformError(
            f"{kind}: {n} samples need {n * 8 / 2 ** 30:.1f} GiB in memory (limit "
            f"{MEMORY_LIMIT / 2 ** 30:.0f} GiB); stream it with generate_blocks() or `simwave gen`"
        )
    out = np.empty((n, 1))
    i = 0
    for tile in tiles:
        out[i:i + tile.size, 0] = tile
        i += tile.size
    return Waveform(out, r, 0.0, [kind], [str(p.get("units") or "")], attrs)


def generate_blocks(kind: str, rate: float | str, duration: float | str, size: int,
                    **params: Any) -> Iterator[Waveform]:
    """Make a test signal piece by piece, in constant memory.

    Same parameters as :func:`generate`, plus ``size`` (samples per block).
    Each block is bit-identical to the same slice of ``generate(...)`` and
    carries its own ``t0``.
    """
    size = int(size)
    if size < 1:
        raise WaveformError(f"block size must be >= 1 sample, got {size}")
    kind, r, n, p, tiles, attrs = _build(kind, rate, duration, params)
    units = [str(p.get("units") or "")]
    index = 0
    for block in rechunk((t[:, np.newaxis] for t in tiles), size):
        yield Waveform(block, r, index / r, [kind], units, attrs)
        index += block.shape[0]
