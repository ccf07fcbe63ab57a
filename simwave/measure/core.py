"""simwave.measure: the stages of a measurement, in order.

:func:`measure` opens the source (output and optional reference, see
:mod:`simwave.measure.source`), applies the at-rest convention, and runs the stages of
:mod:`simwave.measure.stages` one after the other on one shared
:class:`~simwave.measure.stages.work.Work`:

0. :mod:`~simwave.measure.stages.record` — scan: count, range, sums, checks (1 pass);
1. :mod:`~simwave.measure.stages.state_levels` — state levels, staircases, the
   steady-state window (1 pass; without a reference input up to 4 more for the output's
   own state intervals);
1b. :mod:`~simwave.measure.stages.classify` — signal kind of each channel (no pass);
2. :mod:`~simwave.measure.stages.find_transitions` — transitions (1 pass);
2b. :mod:`~simwave.measure.stages.input_aligned` — with a reference input, the output's
   transition per input transition and its own levels (2 to 5 passes);
2c. :mod:`~simwave.measure.stages.output_aligned` — without one, a multi-level output's
   transitions on the levels of the settled ends beside each (2 passes);
3. :mod:`~simwave.measure.stages.transition_metrics` — per-transition metrics (1 pass);
4. :mod:`~simwave.measure.stages.steady_state` — steady state, sine and tone fits (no pass);
5. :mod:`~simwave.measure.stages.assemble` — the result dictionary (no pass).

Memory: held at once are one block per stream, one histogram of 32768 counts per channel,
the steady-state window (the last ``steady_fraction`` of the record, at most
``max_window_samples`` samples per channel), one segment per channel (at most
``max_window_samples`` samples: its last ones) and the lists of transitions and segments.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from simwave.errors import MeasurementError
from simwave.measure.options import MeasureOptions
from simwave.measure.predict import Predictions
from simwave.measure.result import MeasurementResult
from simwave.measure.source import MeasureSource
from simwave.measure.stages import (
    assemble,
    classify,
    find_transitions,
    input_aligned,
    output_aligned,
    record,
    state_levels,
    steady_state,
    transition_metrics,
)
from simwave.measure.stages.work import Work

from simwave.measure.kinds import SIGNAL_KINDS  # noqa: E402,F401 - re-exported


#: Bytes of one array allocated and freed before the first measurement of a process (see
#: :func:`_block_sized_heap`).
HEAP_PRIMER_BYTES = 8 << 20
_heap_primed = False


def _block_sized_heap() -> None:
    """Let the C allocator serve block-sized arrays from its heap.

    glibc's malloc gives every request above its mmap threshold (128 kB at start) fresh
    pages from the kernel, zeroed on first touch, and raises the threshold to the size of
    a freed mapped block only once one is freed. A measuring pass makes several
    temporaries of one 64k-sample block (512 kB each) per block: until something large
    has been freed, each of them cost a mapping and its page faults (about 0.3 s of CPU
    on a 10-minute record, measured; importing scipy.signal used to free such a block as
    a side effect). Freeing one 8 MB array first raises the threshold above the blocks.
    Harmless with other allocators.
    """
    global _heap_primed
    if not _heap_primed:
        _heap_primed = True
        primer = np.empty(HEAP_PRIMER_BYTES // 8)
        del primer


def run_stages(w: Work) -> dict:
    """Run the stages in order on ``w``; return the result dictionary."""
    record.run(w)
    state_levels.run(w)
    classify.run(w)
    find_transitions.run(w)
    input_aligned.run(w)
    output_aligned.run(w)
    transition_metrics.run(w)
    steady_state.run(w)
    return assemble.run(w)


def measure(
    waveform: Any, reference: Any = None, system: Any = None, **opts: Any
) -> MeasurementResult:
    """Measure what a waveform did: transient and steady-state metrics, and H(s) predictions.

    Parameters
    ----------
    waveform : Waveform, numpy array or path
        The record to measure, usually a system's output. A path is read block by block
        with :func:`simwave.blocks` (``read_options`` are passed on). A plain numpy array
        (1-D: one channel; 2-D: rows are samples) needs ``rate=`` (Hz), which also
        applies to a numpy array ``reference``.
    reference : Waveform, numpy array or path, optional
        The input that produced it: same rate and length; one channel (used for every
        output channel) or one per output channel. Input transitions give the time origin
        for delay, peak and settling times; input levels give steady-state gain and error;
        an input sine or multi-tone gives gain and phase.
    system : System, optional
        The continuous-time model; its predictions (H(0), H(j2 pi f), second-order
        overshoot and peak time) are set beside the measured values.
    **opts
        ``reference_levels_pct`` (10, 50, 90); ``settling_band_pct`` (2.0, percent of
        amplitude); ``harmonics`` (10: THD over harmonics 2..10); ``sine_hz`` (known sine
        frequency: three-parameter fit; else estimated: four-parameter fit); ``tones_hz``
        (tone list for multi-tone input; else detected in the input's spectrum);
        ``steady_fraction`` (0.25: the steady-state window is this last part of the
        record); ``state_level_method`` ("histogram": IEEE Std 181 histogram, with levels
        per transition from the settled ends of the input-aligned segments when a
        reference input has transitions, and checked against the ends of the output's
        own state intervals without one; "segment": those segment ends wherever found;
        "minmax": smallest and largest sample only; the method used is reported);
        ``segment_end_fraction`` (0.2: the part of a segment, at its end, whose median is
        its level; with a reference input a segment ends where the output starts to answer
        the next input transition: where the input starts to move plus the output's
        response onset delay, ``state_levels.response_onset_delay_s``);
        ``signal_kind`` ("auto",
        "transitions", "sine", "multitone", "ramp", "other"); ``reference_channel`` (take
        the input from this channel of ``waveform``); ``discrete`` (a DiscreteSystem: its
        accuracy report sets the tolerances); ``gain_tolerance_db`` (0.1),
        ``phase_tolerance_deg`` (1.0), ``overshoot_tolerance_pct`` (1.0 percentage point),
        ``time_tolerance_pct`` (2.0) for flagging measured-vs-predicted differences;
        ``block_size``; ``max_window_samples``; ``read_options`` (for a file ``waveform``,
        and for a file ``reference`` unless ``reference_read_options`` is given).

    Returns
    -------
    MeasurementResult
        ``.to_dict()``, ``.to_json()``, ``.format()``; see :mod:`simwave.measure`.

    Raises
    ------
    MeasurementError
        Empty record, NaN or infinite samples, every channel constant, a reference of
        another rate or length, levels or band outside (0, 100) %, a sine asked for where
        there is none, unknown options.

    References
    ----------
    IEEE Std 181-2011 (transitions, pulses, state levels, aberrations, settling; state
    levels by other methods than the histogram allowed when stated);
    A. C. Aitken, Proc. Roy. Soc. Edinburgh 46 (1926) (delta-squared extrapolation of
    ringing turning points, :mod:`simwave.measure.segments`);
    IEEE Std 1057-2017 (sine fits, THD, SINAD); K. Ogata, *Modern Control Engineering*,
    5th ed., sec. 5-3 (second-order step response: overshoot and peak time).
    """
    from simwave.signals.waveform import as_waveform

    rate = opts.pop("rate", None)
    waveform = as_waveform(waveform, rate, "waveform")
    reference = as_waveform(reference, rate, "reference")
    o = MeasureOptions.from_kwargs(opts)
    _block_sized_heap()
    if isinstance(system, str):
        from simwave.model.system import System

        parse = getattr(System, "parse", None)
        if parse is None:
            raise MeasurementError(
                "system text cannot be parsed in this installation; pass a System"
            )
        system = parse(system)
    src = MeasureSource(
        waveform,
        reference,
        o.reference_channel,
        o.block_size,
        o.read_options,
        o.reference_read_options,
    )
    m = Work(src, system, o)
    if o.rest_before_record and src.prepend_rest_sample():
        m.rest_sample = True
        m.t0 = src.t0
        m.notes.append(
            "at-rest convention: the input and output are 0 before the record, and the input's "
            "first sample is not, so the input steps at the first sample; one sample of 0 is "
            "counted before the record (rest_before_record=False to drop the convention)"
        )
    elif o.rest_before_record and src.prepend_output_rest_sample(output_aligned.leaves_rest):
        m.rest_sample = m.rest_output = True
        m.t0 = src.t0
        m.notes.append(
            "at-rest convention: the output is 0 before the record and leaves 0 from its "
            "first sample (no input given: a step there is answered from rest); one sample "
            "of 0 is counted before the record (rest_before_record=False to drop the "
            "convention)"
        )
    return MeasurementResult(run_stages(m))


__all__ = ["measure", "MeasureOptions", "Predictions", "run_stages"]
