"""How far each transition's numbers can be trusted: its disturbance, the uncertainty of its
levels and instants, bounds and cautions.

Per transition (one row of the result) this adds:

* ``disturbance_rms`` and ``disturbance_peak``: the noise and hum about the levels, measured
  in the end windows of the settled segments before and after it (RMS and largest deviation
  from the window median); where neither segment settled, the channel's quiet-window span
  (:func:`simwave.measure.plateaus.quiet_span`) stands in, converted to an RMS without
  understating it.
* ``uncertainty``: standard uncertainties of ``initial_level`` and ``final_level`` and of the
  50 % instant ``crossing_50_s``, and the bracket the overshoot's peak reading may be off by:

  - a level read as the median of an end window of n samples: the larger of the standard
    error of a median, 1.2533 sigma / sqrt(n) (asymptotic variance of the median of normal
    samples, pi sigma^2 / (2 n); common practice) and the batch-means estimate from the
    window's four quarters, std(quarter medians) / sqrt(4) (which counts correlated
    disturbance such as hum that a white-noise formula would understate; the method of batch
    means, e.g. A. M. Law, *Simulation Modeling and Analysis*, chapter on output analysis;
    from memory);
  - an instant: the amplitude uncertainty at the crossing divided by the slope there,
    u(t) = sqrt(d^2 + u(ref level)^2) / |dy/dt|, with the slope taken as the mean slope
    between the low and high reference levels and d the disturbance's peak (the crossing
    found is the last the disturbance makes near the level). A transition duration: twice
    the peak over a quarter of that slope (the 90 % level of a first-order approach is
    crossed at 0.27 of the mean slope). This is the usual first-order propagation of
    amplitude noise into a crossing instant; IEEE Std 181-2011 discusses noise in its
    reference level instants and state levels in its uncertainty annex (quoted from memory;
    the clause and formula numbering not checked);
  - overshoot: the peak is read off single samples, so it can be off by the disturbance's
    peak plus the final level's uncertainty: 100 (peak + u(final)) / amplitude percentage
    points.
* ``cautions``: ``{metric: text}`` where the disturbance is comparable to what the metric is
  measured against: the settling band (three RMS beyond a fifth of its half-width), the
  reference levels (three RMS beyond a tenth of the amplitude, the distance from a state to
  its 10 % level), or the overshoot and undershoot themselves (their uncertainty beyond half
  the value shown and beyond 0.1 percentage point).
* Settling within a band the disturbance alone leaves (its peak beyond the band's half-width)
  cannot be measured: null, with that reason.
* ``bounds``/``bound_reasons``: when the final level is still approaching at the end of its
  segment (the record ends first), the amplitude is a lower bound and so are the rise/fall
  time and the delay (the far reference levels lie farther on); the settling time is at least
  the time to the end of the segment; the overshoot is not known (null).
"""

from __future__ import annotations

import math

from simwave.measure import segments as seg

#: Fraction of the 10-90 % mean slope taken as the slope at the 10 and 90 % levels for the
#: uncertainty of a transition duration (our choice; covers the first-order approach).
SLOPE_FLOOR = 0.25
#: Disturbance RMS, times this, beyond a fraction of the band or of the amplitude: a caution.
CAUTION_SIGMAS = 3.0
BAND_FRACTION = 0.2
LEVEL_FRACTION = 0.1
#: An overshoot or undershoot whose reading may be off by more than this fraction of its
#: value (and by more than OFF_BY_FLOOR_PCT percentage points) gets a caution saying by how
#: much (our choice: half the value, so a value shown is at least twice its uncertainty or
#: cautioned; the floor keeps clean records' round-off-level peaks quiet).
OFF_BY_FRACTION = 0.5
OFF_BY_FLOOR_PCT = 0.1


def level_uncertainty(s: seg.Segment | None) -> float | None:
    """Standard uncertainty of a segment's level (see the module notes); 0 for the at-rest
    convention; None when the level is extrapolated or not settled (no estimate)."""
    if s is None:
        return None
    if s.method == seg.METHOD_REST:
        return 0.0
    if s.method != seg.METHOD_END or s.n_window <= 0:
        return None
    u = 1.2533 * s.rms_dev / math.sqrt(s.n_window)
    q = list(s.quarters)
    if len(q) == 4:
        mean = sum(q) / 4.0
        sd = math.sqrt(sum((v - mean) ** 2 for v in q) / 3.0)
        u = max(u, sd / 2.0)
    return u


def disturbance(before: seg.Segment | None, after: seg.Segment | None,
                fallback_rms: float) -> tuple[float, float, str]:
    """(RMS, peak, where from) of the disturbance about a transition's levels."""
    quiet = [s for s in (before, after)
             if s is not None and s.method == seg.METHOD_END and s.n_window >= seg.MIN_END_WINDOW]
    if quiet:
        return (max(s.rms_dev for s in quiet), max(s.peak_dev for s in quiet),
                "end windows of the settled segments beside it")
    return fallback_rms, 3.0 * fallback_rms, "quiet windows of the channel (no settled segment)"


def annotate(row: dict, amp: float, band_pct: float, rate: float, before, after,
             fallback_rms: float, segment_end_s: float | None, n_post: int = 2) -> None:
    """Add disturbance, uncertainty, cautions and bounds to one transition row (in place).
    ``n_post``: samples in the transition's post-transition region, where its overshoot
    and settling are read (the disturbance's extreme grows with it)."""
    reasons = row.setdefault("null_reasons", {})
    rms, peak, basis = disturbance(before, after, fallback_rms)
    # the largest excursion normal noise of this RMS makes over the post-transition region:
    # sqrt(2 ln N) deviations (the expected extreme of N normal samples, common practice;
    # from memory), when that is more than the end windows showed
    peak = max(peak, rms * math.sqrt(2.0 * math.log(max(n_post, 2))))
    row["disturbance_rms"] = rms
    row["disturbance_peak"] = peak
    row["disturbance_basis"] = basis
    u_i, u_f = level_uncertainty(before), level_uncertainty(after)
    unc: dict = {"initial_level": u_i, "final_level": u_f}
    dur = row.get("transition_duration_s")
    refs = row.get("reference_levels") or {}
    if dur and amp and refs.get("low") is not None:
        slope = abs(refs["high"] - refs["low"]) / dur  # mean slope, units per second
        u_ref = 0.5 * math.hypot(u_i or 0.0, u_f or 0.0)  # mid level = (initial + final) / 2
        # the crossing found is the last of those the disturbance makes near the level: off
        # by up to its peak over the slope, not only its RMS
        unc["crossing_50_s"] = math.hypot(peak, u_ref) / slope if slope > 0 else None
        # the 10 and 90 % crossings: where a first-order approach is slowest, its slope at 90 %
        # is 0.27 of the 10-90 % mean slope (from 1 - e^(-t/tau)); SLOPE_FLOOR of it is used
        unc["transition_duration_s"] = 2.0 * peak / (SLOPE_FLOOR * slope) if slope > 0 else None
    else:
        unc["crossing_50_s"] = None
        unc["transition_duration_s"] = None
    if amp:
        unc["overshoot_pct"] = 100.0 * (peak + (u_f or 0.0)) / abs(amp)
    row["uncertainty"] = unc
    cautions: dict = {}
    tol = band_pct / 100.0 * abs(amp) if amp else 0.0
    measured = basis.startswith("end windows")
    earlier = reasons.get("settling_time_s", "")
    too_big = (
        f"the disturbance alone (peak {peak:.3g}, RMS {rms:.3g}) reaches beyond the "
        f"±{band_pct:g} % band (±{tol:.3g}): settling within it cannot be measured; a band "
        f"of more than {100.0 * peak / abs(amp):.3g} % can"
    ) if amp else ""
    if amp and peak > tol and row.get("settling_time_s") is not None:
        row["settling_time_s"] = None
        row["settled_at_s"] = None
        reasons["settling_time_s"] = too_big
    elif amp and peak > tol and earlier.startswith("never"):
        # measured where the channel is quiet, or in the settled segments beside it
        reasons["settling_time_s"] = too_big if measured else f"{earlier}; and {too_big}"
    elif amp and CAUTION_SIGMAS * rms > BAND_FRACTION * tol and row.get("settling_time_s"):
        cautions["settling_time_s"] = (
            f"disturbance RMS {rms:.3g} is comparable to the ±{band_pct:g} % band (±{tol:.3g})"
        )
    if amp and CAUTION_SIGMAS * rms > LEVEL_FRACTION * abs(amp):
        for key in ("transition_duration_s", "delay_s", "overshoot_pct"):
            if row.get(key) is not None:
                cautions[key] = (
                    f"disturbance RMS {rms:.3g} is comparable to the distance from the levels "
                    f"to the 10/90 % reference levels ({LEVEL_FRACTION * abs(amp):.3g})"
                )
    for key in ("overshoot_pct", "undershoot_pct"):
        # a peak read off single samples: off by up to the disturbance's peak (and the final
        # level's uncertainty); say so when that is more than half what is shown
        v, u = row.get(key), unc.get("overshoot_pct")
        if (v is not None and u is not None and u > OFF_BY_FLOOR_PCT
                and u > OFF_BY_FRACTION * abs(v) and key not in cautions):
            cautions[key] = (
                f"could be off by \u00b1{u:.2g} percentage points (the disturbance's peak "
                f"{peak:.3g} and the final level's uncertainty, on a step of {abs(amp):.3g})"
            )
    if cautions:
        row["cautions"] = cautions
    _approach_bounds(row, after, reasons, segment_end_s)
    if not reasons:
        row.pop("null_reasons", None)


def _approach_bounds(row: dict, after, reasons: dict, segment_end_s: float | None) -> None:
    if after is None or after.method != seg.METHOD_APPROACHING:
        return
    rising = row.get("direction") == "rising"
    bounds = {"final_level": "lower" if rising else "upper"}
    why = {"final_level": "still approaching at the end of its segment: the last value reached"}
    for key in ("rise_time_s", "fall_time_s", "transition_duration_s", "delay_s"):
        if row.get(key) is not None:
            bounds[key] = "lower"
            why[key] = "the final level is a bound, so the far reference levels lie farther on"
    gain = row.get("level_change_gain")
    if gain:
        # the output moves on away from its initial level: its level change only grows
        bounds["level_change_gain"] = "lower" if gain > 0 else "upper"
        why["level_change_gain"] = (
            "the final level is a bound, so the level change is at least this in size")
    for key in ("overshoot_pct", "undershoot_pct"):
        if row.get(key) is not None:
            row[key] = None
            reasons[key] = "the output is still approaching its final level when the segment ends"
    if segment_end_s is not None and row.get("time_origin_s") is not None:
        row["settling_time_s"] = max(0.0, segment_end_s - row["time_origin_s"])
        row["settled_at_s"] = None
        reasons.pop("settling_time_s", None)
        bounds["settling_time_s"] = "lower"
        why["settling_time_s"] = "not settled when its segment ends (the record gives it no more)"
    row["bounds"] = bounds
    row["bound_reasons"] = why
