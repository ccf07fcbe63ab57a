"""What the output did: transient (IEEE Std 181-2011) and steady-state (IEEE Std 1057-2017)
metrics, set against what H(s) predicts.

``measure(waveform, reference=None, system=None, **opts)`` returns a
:class:`MeasurementResult`; its ``to_dict()`` layout::

    measurement, schema, source{output, reference, reference_channel},
    record{rate_hz, t0_s, n_samples, duration_s, n_channels}, options{...},
    steady_window_s, predicted{system, dc_gain, second_order{...}, ...},
    input[ {name, kind, state_levels, reference_levels, transitions[...]} ],
    channels[ {name, unit, input_channel, kind, min, max, mean, rms,
               state_levels{low, high, amplitude, method, note, basis,
                            response_onset_delay_s},
               reference_levels{low_pct, mid_pct, high_pct, low, mid, high},
               transitions[ {index, direction, start_s, crossing_50_s, end_s,
                             rise_time_s | fall_time_s, transition_duration_s,
                             initial_level, final_level,
                             state_levels{low, high, amplitude, method},
                             reference_levels{...}, levels_note,
                             initial_level_detail{method, settled, segment_s, window_s,
                                                  end_median, end_drift_pct, ...},
                             final_level_detail{...}, initial_level_settled,
                             final_level_settled, level_change_gain,
                             input_transition,
                             input_crossing_50_s, delay_s, time_origin, time_origin_s,
                             overshoot_pct, undershoot_pct, preshoot_pct, peak_value,
                             peak_time_s, settling_band_pct, settling_time_s,
                             settled_at_s, null_reasons} ],
               unmatched_input_transitions[ {input_transition, input_crossing_50_s,
                                             reason} ],
               transition_summary{metric: {count, min, mean, max, worst, missing}},
               pulses[ {index, polarity, start_s, pulse_duration_s, period_s, duty_pct} ],
               pulse_summary{metric: {count, min, mean, max, std}},
               steady_state{window_start_s, window_end_s, window_samples, mean, rms,
                            ripple_pp, final_value, input_final_value,
                            steady_state_gain, steady_state_error, ...},
               sine{frequency_hz, fit, amplitude, gain_db, phase_deg,
                    predicted_gain_db, predicted_phase_deg, thd_pct, thd_db,
                    sinad_db, harmonics[...]},
               tones[ {frequency_hz, gain_db, phase_deg, predicted_gain_db,
                       predicted_phase_deg} ],
               comparison[ {quantity, measured, predicted, difference, tolerance,
                            tolerance_source, flag} ],
               null_reasons{key: why} } ],
    notes[...]

A missing value is ``None`` (JSON ``null``) with its reason under ``null_reasons``
in the same dictionary.

State levels (``state_levels.method``): with a reference input whose transitions cut
the record, every transition has its own initial and final level, read at the settled
end of the segment before it and of its own segment ("segment end (input-aligned)"),
extrapolated from the turning points of ringing that has not died out
("turning-point extrapolation"), the last value of a still-approaching end (flagged,
a lower bound) or, failing all, not established (its percentages, duration and
settling null). Such a segment ends where the output starts to answer the next input
transition: where the input starts to move plus the output's response onset delay
(``state_levels.response_onset_delay_s``, measured on the transitions that start from a
settled state). Without one, the IEEE Std 181 histogram is checked against the ends of
the output's own state intervals and replaced by them where it is fooled. See
:mod:`simwave.measure.segments`.
"""

from simwave.lazy import lazy_exports

__all__ = ["measure", "MeasurementResult", "MeasureOptions", "key_metrics"]

lazy_exports(__name__, {
    "measure": "simwave.measure.core",
    "MeasureOptions": "simwave.measure.options",
    "MeasurementResult": "simwave.measure.result",
    "key_metrics": "simwave.measure.result",
})
