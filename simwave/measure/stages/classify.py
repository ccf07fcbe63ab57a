"""Stage 1b, signal kind: what each channel is (transitions, sine, multitone, ramp,
other, constant), which decides which metrics the later stages measure.

In: a :class:`~simwave.measure.stages.work.Work` after :mod:`.state_levels` (each
channel's levels, ``two_state_fraction``, ``established``, ``multilevel``, ``window``).
No pass over the record: the steady-state window is enough. Out: each channel's ``kind``
and ``kind_source`` (an option, the input's kind, or the output's own); a sine or tones
asked for but absent is refused with a :class:`MeasurementError`. Next:
:mod:`.find_transitions`.
"""

from __future__ import annotations

import numpy as np

from simwave.errors import MeasurementError
from simwave.measure import steady as st
from simwave.measure.options import MIN_WINDOW
from simwave.measure.stages.state_levels import TWO_STATE_FRACTION
from simwave.measure.stages import work
from simwave.measure.stages.work import Channel, Work

#: A sine (or a set of tones) is taken as present when the fit accounts for this
#: fraction of the AC power (auto detection) ...
SINE_AUTO_EXPLAINED = 0.9
#: ... and at least this fraction when a sine fit is asked for (SINAD >= 0 dB).
SINE_MIN_EXPLAINED = 0.5
#: A window is a ramp when a straight line explains this fraction of its variance.
RAMP_R2 = 0.999
#: Cheap screen before the (costly, iterative) four-parameter fit: a window whose Hann
#: spectrum holds less than this fraction of its energy in any 17 consecutive bins
#: (:func:`~simwave.measure.steady.tone_concentration`) is no sine, and the fit is skipped.
#: Our choice, set well below what a fit passing SINE_AUTO_EXPLAINED implies: at the
#: least-squares optimum the residual is orthogonal to the sine and the offset, so the
#: sine holds >= 0.9 of the AC energy; Hann-weighted it keeps >= 3/8 of that in its band
#: (the window's mean square), the residual at most 0.1 (the window's peak is 1), so the
#: band holds at least (sqrt(0.9 * 3/8) - sqrt(0.1))^2 = 0.07 of the windowed energy
#: even for a residual placed to cancel it. White noise over 65,536 samples: about 0.001.
SINE_MIN_CONCENTRATION = 0.02
#: ... the screen decides nothing when that band is centred this close to DC (fewer than
#: about 10 cycles in the window: the sine's lobe and the offset's overlap there).
SCREEN_MIN_BIN = 10


def run(w: Work) -> None:
    o = w.o
    forced = o.signal_kind != "auto"
    if o.tones_hz is not None and not forced:
        forced, kind_opt = True, "multitone"
    elif o.sine_hz is not None and not forced:
        forced, kind_opt = True, "sine"
    else:
        kind_opt = o.signal_kind
    for r in w.refs:
        r.kind = kind_opt if forced else auto_kind(w, r, True)
        r.kind_source = "option" if forced else "input"
    for c, ch in enumerate(w.outs):
        ri = w.ref_for(c)
        if forced:
            ch.kind, ch.kind_source = kind_opt, "option"
        elif ri is not None:
            ch.kind, ch.kind_source = w.refs[ri].kind, "input"
        else:
            ch.kind, ch.kind_source = auto_kind(w, ch, False), "output"
        if ch.kind == "constant" and ri is None:
            ch.kind = "other"
    if forced and kind_opt in ("sine", "multitone"):
        # a sine asked for: it must be there (in the input, else in the output)
        for ch in w.refs or w.outs:
            require_sine(w, ch, kind_opt)


def auto_kind(w: Work, ch: Channel, is_reference: bool) -> str:
    if ch.constant:
        return "constant"
    if (
        ch.two_state_fraction >= TWO_STATE_FRACTION
        or ch.established
        or ch.multilevel
        or ch.own_levels
    ):
        return "transitions"
    y = ch.fit_window
    if y.size >= MIN_WINDOW and np.ptp(y) > 0:
        t = w.window_t(y.size)
        # a straight line first: a slow sine fits a short stretch of ramp too
        if st.line_fit(y, t)[2] >= RAMP_R2:
            return "ramp"
        kind = tone_kind(w, y, t, is_reference)
        if kind != "sine":
            # a level change in the window hides a sine, or makes a false low tone: the
            # part without it decides (simwave.measure.steady_parts)
            part = work.steady_part_of(w, ch)
            if not part.whole and part.hi - part.lo >= MIN_WINDOW:
                lo, hi = part.lo, part.hi
                kind = tone_kind(w, y[lo:hi], t[lo:hi], is_reference)
        return kind
    return "other"


def tone_kind(w: Work, y: np.ndarray, t: np.ndarray, is_reference: bool) -> str:
    """ "sine", "multitone" or "other" from the tones in ``y`` (times ``t``)."""
    if np.ptp(y) > 0:
        if is_reference:
            tones = st.find_tones(y, w.rate)
            if len(tones) >= 2:
                fit = st.fit_tones(y, t, tones, refine=True)
                if fit.explained >= SINE_AUTO_EXPLAINED:
                    return "multitone"
        if could_be_sine(spec := st.hann_magnitude(y)):
            try:
                f0 = st.peak_hz_of(spec, y.size, w.rate)
                fit = st.fit_tones(y, t, [f0], refine=True)
                if fit.explained >= SINE_AUTO_EXPLAINED and fit.tones[0].frequency_hz > 0:
                    return "sine"
            except MeasurementError:
                pass
        if not is_reference:
            tones = st.find_tones(y, w.rate)
            if len(tones) >= 2:
                fit = st.fit_tones(y, t, tones, refine=True)
                if fit.explained >= SINE_AUTO_EXPLAINED:
                    return "multitone"
    return "other"


def could_be_sine(spec: np.ndarray) -> bool:
    """False when the Hann spectrum ``spec`` rules a sine out (SINE_MIN_CONCENTRATION):
    one FFT instead of the four-parameter fit's iterations over the window."""
    share, centre = st.tone_concentration(spec)
    return centre < SCREEN_MIN_BIN or share >= SINE_MIN_CONCENTRATION


def require_sine(w: Work, ch: Channel, kind: str) -> None:
    y = ch.fit_window
    if y.size < MIN_WINDOW or ch.constant or np.ptp(y) == 0:
        raise MeasurementError(
            f"channel {ch.name!r}: no sine: the steady-state window is flat or too short"
        )
    t = w.window_t(y.size)
    part = work.steady_part_of(w, ch)
    if not part.whole:
        if part.hi - part.lo < MIN_WINDOW:
            return  # a level change leaves no part to fit: the steady-state stage says so
        y, t = y[part.lo : part.hi], t[part.lo : part.hi]  # the part without a level change
    if kind == "sine":
        f = w.o.sine_hz or st.spectrum_peak_hz(y, w.rate)
        fit = st.fit_tones(y, t, [f], refine=w.o.sine_hz is None)
    elif w.o.tones_hz is not None:
        return  # a given tone list is measured as it is
    else:
        tones = st.find_tones(y, w.rate)
        if not tones:
            raise MeasurementError(f"channel {ch.name!r}: no tones found in its spectrum")
        fit = st.fit_tones(y, t, tones, refine=True)
    if fit.explained < SINE_MIN_EXPLAINED:
        what = "sine" if kind == "sine" else "tones"
        raise MeasurementError(
            f"channel {ch.name!r}: no {what} present: the fit accounts for only "
            f"{100 * fit.explained:.1f} % of its AC power in the steady-state window"
        )
