"""Stage 4, steady state: what the output settled to over the steady-state window (the
last ``steady_fraction`` of the record): mean, ripple, final value, steady-state gain and
error (step or ramp), and for a sine or tones the IEEE Std 1057 fits (gain, phase, THD,
SINAD).

In: a :class:`~simwave.measure.stages.work.Work` after :mod:`.transition_metrics` (each
channel's ``kind``, ``window``, ``edges``, ``levels``; ``w.pre_step_value``). No pass over
the record: the windows were kept by :mod:`.state_levels`. Out: ``w.steady[c]`` per output
channel: {"steady_state": ..., and "sine" or "tones" by kind, "null_reasons": ...}.
Next: :mod:`.assemble`.
"""

from __future__ import annotations

import math

import numpy as np

from simwave.measure import steady as st
from simwave.measure.options import MIN_WINDOW
from simwave.measure.stages.classify import SINE_MIN_EXPLAINED
from simwave.measure.stages import work
from simwave.measure.stages.work import Channel, Work


def run(w: Work) -> None:
    """The steady-state part of the result of every output channel."""
    for c, ch in enumerate(w.outs):
        ri = w.ref_for(c)
        ref = w.refs[ri] if ri is not None else None
        part: dict = {"steady_state": steady_section(w, c, ch, ref)}
        reasons: dict = {}
        if ch.kind == "sine":
            part["sine"] = sine_section(w, ch, ref)
        elif ch.kind == "multitone":
            part["tones"], reasons, window = tones_section(w, ch, ref)
            if window:
                part["fit_window"] = window
        w.steady[c] = (part, reasons)


def steady_section(w: Work, c: int, ch: Channel, ref: Channel | None) -> dict:
    y = ch.window
    d: dict = {
        "window_start_s": w.t(w.w_start),
        "window_end_s": w.t(w.n - 1),
        "window_samples": int(y.size),
    }
    reasons: dict = {}
    if y.size < MIN_WINDOW:
        for k in ("mean", "rms", "ripple_pp", "final_value"):
            d[k] = None
            reasons[k] = (
                f"record too short for steady state: the window holds {y.size} samples "
                f"(at least {MIN_WINDOW} needed)"
            )
        d["null_reasons"] = reasons
        return d
    d.update(st.window_stats(y))
    x = ref.window if ref is not None else None
    t = w.window_t(y.size)
    if ch.kind in ("transitions", "constant"):
        steady_step(w, c, ch, ref, y, x, d, reasons)
    elif ch.kind == "ramp" and x is not None:
        steady_ramp(w, y, x, t, d, reasons)
    if reasons:
        d["null_reasons"] = reasons
    return d


def steady_step(w: Work, c, ch, ref, y, x, d, reasons) -> None:
    d["final_value"] = float(np.mean(y))
    edges_in_window = [e for e in ch.edges if e.j >= w.w_start]
    blocked = None
    if edges_in_window:
        blocked = (
            f"the steady-state window contains {len(edges_in_window)} output transition(s), "
            f"the first at {w.t(edges_in_window[0].j):.6g} s"
        )
    elif ch.levels is not None and ch.kind == "transitions":
        band_abs = w.o.settling_band_pct / 100.0 * ch.levels.amplitude
        dev = float(np.max(np.abs(y - d["final_value"])))
        d["settled_in_window"] = bool(dev <= band_abs)
        if dev > band_abs:
            blocked = (
                f"output not settled in the steady-state window: it deviates up to "
                f"{100.0 * dev / ch.levels.amplitude:.3g} % of amplitude from its mean, "
                f"outside the ±{w.o.settling_band_pct:g} % band"
            )
    if x is None:
        for k in ("steady_state_gain", "steady_state_error"):
            d[k] = None
            reasons[k] = "no reference input given"
        if blocked:
            d["final_value"] = None
            reasons["final_value"] = blocked
        return
    ref_edges_in_window = [e for e in ref.edges if e.j >= w.w_start]
    if ref_edges_in_window and not blocked:
        blocked = "the steady-state window contains an input transition"
    if blocked:
        for k in ("final_value", "steady_state_gain", "steady_state_error"):
            d[k] = None
            reasons[k] = blocked
        return
    x_final = float(np.mean(x))
    d["input_final_value"] = x_final
    y_final = d["final_value"]
    if ref.edges and ref.levels is not None and c in w.pre_step_value:
        last_in = ref.edges[-1]
        x_init = ref.levels.low if last_in.direction > 0 else ref.levels.high
        if last_in.initial_level is not None:
            x_init = last_in.initial_level
        y_init = w.pre_step_value[c]
        if ch.level_mode == "input-aligned" and len(ch.segments) >= 2:
            # the settled end of the segment before the last input transition
            before = ch.segments[-2]
            y_init = before.level
            d["initial_output_level_method"] = before.method
        elif ch.levels is not None:
            # snap to the output state level it sits at (noise), if it is near one
            near = min((ch.levels.low, ch.levels.high), key=lambda v: abs(v - y_init))
            if abs(near - y_init) <= 0.1 * ch.levels.amplitude:
                y_init = near
        d["initial_output_level"] = y_init
        dx = x_final - x_init
        d["steady_state_gain"] = (y_final - y_init) / dx
        d["steady_state_gain_basis"] = (
            "step: (final output - output before the input step) / (input step size)"
        )
        d["steady_state_error"] = x_final - y_final
        d["steady_state_error_pct"] = 100.0 * (x_final - y_final) / abs(dx)
    else:
        if x_final == 0:
            d["steady_state_gain"] = None
            reasons["steady_state_gain"] = "input final value is 0: no gain to form"
        else:
            d["steady_state_gain"] = y_final / x_final
            d["steady_state_gain_basis"] = "final output value / final input value"
        d["steady_state_error"] = x_final - y_final
    d["error_definition"] = "input - output, averaged over the steady-state window"


def steady_ramp(w: Work, y, x, t, d, reasons) -> None:
    sx, _, r2x = st.line_fit(x, t)
    sy, _, _ = st.line_fit(y, t)
    err = x - y
    se, e_end, _ = st.line_fit(err, t)
    d["input_slope_per_s"] = sx
    d["output_slope_per_s"] = sy
    d["steady_state_error"] = e_end
    d["error_trend_per_s"] = se
    d["error_definition"] = "input - output at the end of the window (straight-line fit)"
    if sx == 0:
        d["steady_state_gain"] = None
        d["ramp_lag_s"] = None
        reasons["steady_state_gain"] = reasons["ramp_lag_s"] = "input slope is 0"
    else:
        d["steady_state_gain"] = sy / sx
        d["steady_state_gain_basis"] = "ramp: output slope / input slope"
        d["ramp_lag_s"] = e_end / sx


def fit_arrays(w: Work, ch: Channel, ref: Channel | None, what: str):
    """The samples a sine or tone fit uses: (output, input or None, times, about), from the
    fit window, or from its part without a level change (:mod:`simwave.measure.steady_parts`,
    searched in the input when there is one, else in the output). ``about`` is None for the
    whole window, else ``{"fit_window": {...}}`` saying which part and why, or
    ``{"reason": ...}`` when no part will do (the fit's values are then not given)."""
    y = ch.fit_window
    x = ref.fit_window if ref is not None else None
    t = w.window_t(y.size)
    basis = ref if ref is not None and np.ptp(x) > 0 else ch
    if y.size < MIN_WINDOW or not np.ptp(basis.fit_window) > 0:
        return y, x, t, None
    part = work.steady_part_of(w, basis)
    if part.whole:
        return y, x, t, None
    first = w.n - y.size  # the fit window's first sample in the record
    where = "input" if basis is ref else "output"
    changes = [{"time_s": w.t(first + c.at), "change": c.height} for c in part.changes]
    at = ", ".join(f"{c['time_s']:.6g} s ({c['change']:+.3g} in the {where})" for c in changes)
    if part.lo == part.hi:
        reason = (
            f"the steady-state window holds a level change at {at}, and no part of it "
            f"without the change is long enough for the {what} fit ({part.need} samples "
            "needed: two periods of the lowest tone and the inverse of the closest tone "
            "spacing); a fit across it would mix the answer to the change into the tones"
        )
        if w.system is None:
            reason += (
                " (without a system the part after it is not used: how long the output "
                "takes to answer the change is not known)"
            )
        return y, x, t, {"reason": reason}
    lo, hi = part.lo, part.hi
    side = "before it" if hi < y.size else "after it, once H(s) has answered it"
    start, end = w.t(first + lo), w.t(first + hi - 1)
    note = (
        f"channel {ch.name!r}: the steady-state window holds a level change at {at}; the "
        f"{what} fit uses {start:.6g} s to {end:.6g} s, the part {side}"
    )
    about = {"start_s": start, "end_s": end, "level_changes": changes, "note": note}
    if note not in w.notes:
        w.notes.append(note)
    return y[lo:hi], (x[lo:hi] if x is not None else None), t[lo:hi], {"fit_window": about}


def estimate_frequency(w: Work, y: np.ndarray, t: np.ndarray) -> float:
    """Four-parameter fit from an interpolated FFT peak, then the same fit with the
    harmonics tied to the fundamental, so distortion cannot pull the frequency."""
    f0 = st.fit_tones(y, t, [st.spectrum_peak_hz(y, w.rate)], refine=True).tones[0]
    hfit, _ = st.harmonic_fit(
        y, t, f0.frequency_hz, w.rate, int(w.o.harmonics), refine=True
    )
    return hfit.tones[0].frequency_hz


def sine_section(w: Work, ch: Channel, ref: Channel | None) -> dict:
    o = w.o
    y, x, t, about = fit_arrays(w, ch, ref, "sine")
    d: dict = {}
    reasons: dict = {}
    if y.size < MIN_WINDOW or np.ptp(y) == 0:
        d["frequency_hz"] = None
        reasons["frequency_hz"] = "steady-state window too short or flat for a sine fit"
        d["null_reasons"] = reasons
        return d
    if about and "reason" in about:
        for k in ("frequency_hz", "amplitude", "gain_db", "phase_deg", "thd_pct", "thd_db",
                  "sinad_db"):
            d[k] = None
            reasons[k] = about["reason"]
        d["null_reasons"] = reasons
        return d
    if about:
        d["fit_window"] = about["fit_window"]
    if o.sine_hz is not None:
        f, fsrc, d["fit"] = o.sine_hz, "given", "three-parameter"
    elif x is not None and x.size >= MIN_WINDOW and np.ptp(x) > 0:
        f, fsrc = estimate_frequency(w, x, t), "four-parameter fit of the input"
        d["fit"] = "four-parameter"
    else:
        f, fsrc = estimate_frequency(w, y, t), "four-parameter fit of this channel"
        d["fit"] = "four-parameter"
    cycles = f * y.size / w.rate
    d["frequency_hz"] = f
    d["frequency_source"] = fsrc
    d["cycles_in_window"] = cycles
    if cycles < 1.0:
        for k in ("amplitude", "gain_db", "phase_deg", "thd_pct", "thd_db", "sinad_db"):
            d[k] = None
            reasons[k] = (
                f"record too short: the steady-state window holds {cycles:.2f} cycles "
                "(at least 1 needed)"
            )
        d["null_reasons"] = reasons
        return d
    # IEEE Std 1057: the sine fit at the (given or estimated) frequency; its residual
    # is the noise and distortion for SINAD
    out_fit = st.fit_tones(y, t, [f])
    # fundamental and harmonics fitted together: amplitude, phase and THD free of the
    # harmonics' leakage into a fundamental-only fit
    hfit, top = st.harmonic_fit(y, t, f, w.rate, int(o.harmonics))
    tone = hfit.tones[0]
    d["amplitude"] = tone.amplitude
    d["offset"] = hfit.offset
    d["output_phase_deg"] = math.degrees(tone.phase_rad)
    d["fit_explains_pct"] = 100.0 * out_fit.explained
    if x is not None:
        it = st.harmonic_fit(x, t, f, w.rate, int(o.harmonics))[0].tones[0]
        d["input_amplitude"] = it.amplitude
        d["input_phase_deg"] = math.degrees(it.phase_rad)
        if it.amplitude == 0 or tone.amplitude == 0:
            d["gain_db"] = d["phase_deg"] = None
            reasons["gain_db"] = reasons["phase_deg"] = "zero fundamental amplitude"
        else:
            ratio = tone.amplitude / it.amplitude
            d["gain"] = ratio
            d["gain_db"] = 20.0 * math.log10(ratio)
            d["phase_deg"] = math.degrees(st._wrap(tone.phase_rad - it.phase_rad))
    else:
        d["gain_db"] = d["phase_deg"] = None
        reasons["gain_db"] = reasons["phase_deg"] = "no reference input given"
    add_prediction(w, f, d)
    if out_fit.explained < SINE_MIN_EXPLAINED:
        for k in ("thd_pct", "thd_db", "sinad_db"):
            d[k] = None
            reasons[k] = (
                f"no sine present in this channel: the fit accounts for only "
                f"{100 * out_fit.explained:.1f} % of its AC power"
            )
    else:
        d["harmonics_counted"] = top
        if top < 2:
            d["thd_pct"] = d["thd_db"] = None
            reasons["thd_pct"] = reasons["thd_db"] = "no harmonic below the Nyquist frequency"
        else:
            thd = st.thd_ratio(hfit)
            d["thd_pct"] = 100.0 * thd
            d["thd_db"] = 20.0 * math.log10(thd) if thd > 0 else None
            if thd == 0:
                reasons["thd_db"] = "no harmonic content at all (THD = 0)"
            d["harmonics"] = [
                {
                    "order": k + 1,
                    "frequency_hz": h.frequency_hz,
                    "amplitude": h.amplitude,
                    "relative_pct": 100.0 * h.amplitude / tone.amplitude,
                }
                for k, h in enumerate(hfit.tones)
                if k >= 1
            ]
        sd = st.sinad_db(out_fit)
        d["sinad_db"] = sd if math.isfinite(sd) else None
        if not math.isfinite(sd):
            reasons["sinad_db"] = "the fit residual is exactly 0"
    if reasons:
        d["null_reasons"] = reasons
    return d


def tones_section(
    w: Work, ch: Channel, ref: Channel | None
) -> tuple[list, dict, dict | None]:
    """Gain and phase per tone (IEEE Std 1057 multi-tone fit), the null reasons, and which
    part of the window the fit used when not all of it (``fit_window``)."""
    o = w.o
    y, x, t, about = fit_arrays(w, ch, ref, "tone")
    reasons: dict = {}
    if y.size < MIN_WINDOW:
        reasons["tones"] = "record too short for steady state"
        return [], reasons, None
    if about and "reason" in about:
        reasons["tones"] = about["reason"]
        return [], reasons, None
    window = about["fit_window"] if about else None
    basis = x if x is not None else y
    if o.tones_hz is not None:
        freqs = list(o.tones_hz)
    else:
        found = st.find_tones(basis, w.rate) if np.ptp(basis) > 0 else []
        if not found:
            reasons["tones"] = "no tones found in the " + (
                "input" if ref is not None else "output"
            )
            return [], reasons, window
        freqs = [tn.frequency_hz for tn in st.fit_tones(basis, t, found, refine=True).tones]
    freqs = [f for f in freqs if f < 0.5 * w.rate]
    out_fit = st.fit_tones(y, t, freqs)
    in_fit = st.fit_tones(x, t, freqs) if x is not None else None
    rows = []
    for k, f in enumerate(freqs):
        row: dict = {
            "frequency_hz": f,
            "amplitude": out_fit.tones[k].amplitude,
            "output_phase_deg": math.degrees(out_fit.tones[k].phase_rad),
        }
        rr: dict = {}
        if in_fit is not None:
            it = in_fit.tones[k]
            row["input_amplitude"] = it.amplitude
            if it.amplitude > 0 and out_fit.tones[k].amplitude > 0:
                row["gain_db"] = 20.0 * math.log10(out_fit.tones[k].amplitude / it.amplitude)
                row["phase_deg"] = math.degrees(
                    st._wrap(out_fit.tones[k].phase_rad - it.phase_rad)
                )
            else:
                row["gain_db"] = row["phase_deg"] = None
                rr["gain_db"] = rr["phase_deg"] = "zero amplitude at this tone"
        else:
            row["gain_db"] = row["phase_deg"] = None
            rr["gain_db"] = rr["phase_deg"] = "no reference input given"
        add_prediction(w, f, row)
        if rr:
            row["null_reasons"] = rr
        rows.append(row)
    return rows, reasons, window


def add_prediction(w: Work, f: float, d: dict) -> None:
    """H(j 2 pi f) of the system, if one was given, as predicted gain (dB) and phase (deg)."""
    if w.system is None:
        return
    h = complex(w.system.frequency_response(f))
    if h != 0:
        d["predicted_gain_db"] = 20.0 * math.log10(abs(h))
        d["predicted_phase_deg"] = math.degrees(math.atan2(h.imag, h.real))
