"""simulate(): the one pipeline from an input waveform through H(s) to the output.

source blocks (file, Waveform or generated) -> [upsample] -> DiscreteSystem.process
with carried state -> [decimate] -> divergence check, peak/RMS accumulators ->
writer (atomic) or an in-memory Waveform.

Reading runs ahead and writing runs behind on threads (see
:mod:`simwave.pipeline`), so a long file streams in constant memory with the
three stages overlapped.
"""

from __future__ import annotations

import copy
import math
import os
import threading
import time
import warnings
from collections import OrderedDict
from dataclasses import dataclass, field
from typing import Any, Callable, Iterator, Sequence

import numpy as np

import simwave
from simwave.errors import SimwaveError
from simwave.guards import (
    measuring_failures, model_failures, null_reasons_note, with_null_reasons,
)
from simwave.model.system import System
from simwave.pipeline import WriteBehind, WriteNow, read_ahead
from simwave.signals.waveform import Waveform, as_waveform

#: Samples per block: large enough that per-block overhead is negligible,
#: small enough that a few blocks in flight stay well under 100 MB.
DEFAULT_BLOCK = 1 << 16


class DivergenceError(SimwaveError):
    """The output became NaN or infinite (an unstable system or model)."""


# --------------------------------------------------------------------------- sources
@dataclass
class Source:
    """An input stream: metadata plus a way to iterate over sample blocks."""

    rate: float
    channels: list[str]
    units: list[str]
    t0: float
    n_samples: int | None
    attrs: dict[str, Any]
    label: str
    path: str | None
    make_blocks: Callable[[int], Iterator[np.ndarray]]
    waveform: Waveform | None = None  # set when the whole input is already in memory
    close: Callable[[], None] | None = None  # releases a file opened for make_blocks

    @property
    def n_channels(self) -> int:
        return len(self.channels)


def _waveform_source(wave: Waveform, label: str, path: str | None = None) -> Source:
    def make_blocks(size: int) -> Iterator[np.ndarray]:
        for start in range(0, wave.n_samples, size):
            yield wave.data[start : start + size]

    return Source(
        wave.rate, list(wave.channels), list(wave.units), wave.t0, wave.n_samples,
        dict(wave.attrs), label, path, make_blocks, wave,
    )


def open_source(
    source: Waveform | str | os.PathLike,
    *,
    rate: float | None = None,
    channels: Sequence[int | str] | None = None,
    read_options: dict[str, Any] | None = None,
) -> Source:
    """Resolve a Waveform, a file path or a generated-signal spec into a :class:`Source`."""
    opts = dict(read_options or {})
    source = as_waveform(source, rate, "input")
    if isinstance(source, Waveform):
        wave = source.select(list(channels)) if channels else source
        return _waveform_source(wave, wave.attrs.get("source", "waveform in memory"))
    text = os.fspath(source)
    if rate is not None:
        opts.setdefault("rate", rate)
    if channels:
        opts.setdefault("channels", list(channels))
    from simwave.signals.io import open_audio_blocks

    opened = open_audio_blocks(text, **opts)
    if opened is not None:
        # An audio file is opened once: its header gives what the one-sample block and
        # info() gave (the same reader), and the run's blocks continue from it.
        if opened.n_samples == 0:
            opened.close()
            raise SimwaveError(f"{text}: the input holds no samples")
        return Source(opened.rate, opened.channels, opened.units, opened.t0,
                      opened.n_samples, opened.attrs, text, text, opened.arrays,
                      close=opened.close)
    # The readers take file paths and generated-signal specs alike. The metadata come
    # from a one-sample first block, so a CSV file or a generated signal is not read
    # through twice; the length (for the progress bar only) comes from the header where
    # the format has one.
    first_blocks = simwave.blocks(text, 1, **opts)
    try:
        head = next(first_blocks, None)
    finally:
        first_blocks.close()
    if head is None:
        raise SimwaveError(f"{text}: the input holds no samples")
    from simwave.signals.spec import is_signal_spec

    is_file = not is_signal_spec(text)
    n_samples = _cheap_length(text, opts) if is_file else _spec_length(text, head.rate)
    attrs = dict(head.attrs) if is_file else {"generated": text}

    def make_blocks(size: int) -> Iterator[np.ndarray]:
        for piece in simwave.blocks(text, size, **opts):
            yield piece.data

    return Source(
        head.rate, list(head.channels), list(head.units), head.t0, n_samples,
        attrs, text, text if is_file else None, make_blocks,
    )


def _cheap_length(path: str, opts: dict[str, Any]) -> int | None:
    """Samples in a file when its header says so (audio, HDF5); None for CSV."""
    from simwave.signals.formats import resolve_format

    family, _ = resolve_format(path, opts.get("format"))
    if family == "csv":
        return None
    n = simwave.info(path, **opts).n_samples
    return int(n) if n is not None else None


def _spec_length(spec: str, rate: float) -> int | None:
    from simwave.signals.spec import parse_signal_spec

    duration = parse_signal_spec(spec)[2]
    return int(round(float(duration) * rate)) if duration is not None else None


# --------------------------------------------------------------------------- result
@dataclass
class RunReport:
    """What a run did: sizes, model, levels, warnings, timing and provenance."""

    n_samples: int
    rate: float
    channels: list[str]
    units: list[str]
    method: str
    initial: str
    peak: list[float]
    peak_time_s: list[float]
    rms: list[float]
    elapsed_s: float
    accuracy: dict[str, Any] | None
    warnings: list[str]
    provenance: dict[str, Any]
    output: str | None = None
    oversample: dict[str, Any] | None = None
    write: dict[str, Any] | None = None
    rate_check: dict[str, Any] | None = None
    input_peak: list[float] | None = None

    @property
    def duration(self) -> float:
        return self.n_samples / self.rate

    def __repr__(self) -> str:
        where = f"{self.output}: " if self.output else ""
        return (f"RunReport({where}{self.n_samples} samples x {len(self.channels)} channel(s) "
                f"at {self.rate:g} Hz, {self.method}, {len(self.warnings)} warning(s))")

    def _repr_html_(self) -> str:
        from simwave.notebook import run_report_html

        return run_report_html(self)

    def to_dict(self) -> dict[str, Any]:
        return {
            "output": self.output,
            "samples": self.n_samples,
            "duration_s": self.duration,
            "rate_hz": self.rate,
            "method": self.method,
            "initial": self.initial,
            "channels": [
                {"name": n, "unit": u, "peak": p, "peak_time_s": pt, "rms": r, "input_peak": ip}
                for n, u, p, pt, r, ip in zip(
                    self.channels, self.units, self.peak, self.peak_time_s, self.rms,
                    self.input_peak or [None] * len(self.channels), strict=True
                )
            ],
            "accuracy": self.accuracy,
            "rate_check": self.rate_check,
            "oversample": self.oversample,
            "write": self.write,
            "warnings": list(self.warnings),
            "elapsed_s": self.elapsed_s,
            "provenance": self.provenance,
        }


#: Frames per row of the wide view that :func:`_channel_peaks` reduces.
_PEAK_ROWS = 512


def _channel_peaks(block: np.ndarray) -> np.ndarray:
    """max |x| per channel of a frame-major block (n, n_channels), without abs's temporary.

    numpy reduces axis 0 of a C-ordered (n, k) array k values at a time; for a few
    channels that inner loop is so short that the reduction cost 7-30x a contiguous one
    (stereo: 0.84 s for 16 M frames, more than filtering them). Viewing whole frames as
    rows of ``_PEAK_ROWS * k`` values gives numpy long contiguous inner loops; max and
    min are exact, so the result is the same.
    """
    n, k = block.shape
    if k == 1 or n < 2 * _PEAK_ROWS or not block.flags.c_contiguous:
        return np.maximum(block.max(axis=0), -block.min(axis=0))
    whole = (n // _PEAK_ROWS) * _PEAK_ROWS
    wide = block[:whole].reshape(-1, _PEAK_ROWS * k)
    hi = wide.max(axis=0).reshape(_PEAK_ROWS, k).max(axis=0)
    lo = wide.min(axis=0).reshape(_PEAK_ROWS, k).min(axis=0)
    if whole < n:
        hi = np.maximum(hi, block[whole:].max(axis=0))
        lo = np.minimum(lo, block[whole:].min(axis=0))
    return np.maximum(hi, -lo)


class _LevelMeter:
    """Running per-channel peak (absolute), its time, and RMS."""

    def __init__(self, n_channels: int) -> None:
        self.peak = np.zeros(n_channels)
        self.peak_index = np.zeros(n_channels, dtype=np.int64)
        self.sum_sq = np.zeros(n_channels)
        self.n = 0

    def add(self, block: np.ndarray) -> bool:
        """Take a block in; returns False when it holds a NaN or infinite sample."""
        if block.shape[0] == 0:
            return True
        # argmax/argmin walk the block without the temporary an abs() would allocate; both
        # stop at a NaN (numpy takes NaN as the extreme), so m is finite iff the block is
        cols = np.arange(block.shape[1])
        i_hi, i_lo = np.argmax(block, axis=0), np.argmin(block, axis=0)
        hi, lo = block[i_hi, cols], -block[i_lo, cols]
        m = np.maximum(hi, lo)
        finite = bool(np.isfinite(m).all())
        i = np.where(hi >= lo, i_hi, i_lo)
        better = m > self.peak
        self.peak = np.where(better, m, self.peak)
        self.peak_index = np.where(better, self.n + i, self.peak_index)
        self.sum_sq += np.einsum("ij,ij->j", block, block)
        self.n += block.shape[0]
        return finite

    def rms(self) -> np.ndarray:
        return np.sqrt(self.sum_sq / self.n) if self.n else np.zeros_like(self.sum_sq)


# --------------------------------------------------------------------------- the pipeline
def in_band_check(model) -> dict[str, Any]:
    """Cheap rate safeguard: steady-sine error (magnitude and phase) of the model.

    See :func:`simwave.discrete.accuracy.method_check` (a grid that includes every
    resonance and its half-power width; about a millisecond).
    """
    from simwave.discrete.accuracy import method_check

    return method_check(model)


def _poor_model_warning(
    check: dict[str, Any], accuracy: dict[str, Any] | None, factor: int, model=None,
    advice=None,
) -> str:
    from simwave.discrete.accuracy import method_warning

    method = model.method if model is not None else (accuracy or {}).get("method", "discrete")
    rate = model.rate if model is not None else (accuracy or {}).get("rate_hz", 0.0)
    return method_warning(
        check, accuracy, method, rate, factor,
        system=model.system if model is not None else None,
        realization=model.options if model is not None else None, advice=advice,
    )


def _as_system(system: System | str) -> System:
    if isinstance(system, System):
        return system
    if isinstance(system, str):
        return System.parse(system)
    raise SimwaveError(f"system must be a System or text H(s)/ODE, got {type(system).__name__}")


def _check_finite(block: np.ndarray, start: int, rate: float, t0: float,
                  inp: np.ndarray | None = None) -> None:
    if np.isfinite(block).all():
        return
    bad = np.argwhere(~np.isfinite(block))
    row, col = int(bad[0, 0]), int(bad[0, 1])
    t = t0 + (start + row) / rate
    where = f"at t = {t:.6g} s (sample {start + row}, channel {col})"
    # Not every overflow is instability: an input near the float64 limit (1.8e308, IEEE
    # Std 754 binary64) times a gain above 1 overflows in a stable system too.
    peak = float(np.max(np.abs(inp))) if inp is not None and inp.size else 0.0
    if inp is not None and not np.isfinite(inp).all():
        cause = "the input itself holds NaN or infinite values"
    elif peak > 1e300:
        cause = (f"the input reaches {peak:.4g}, near the largest float64 value (1.8e308), and "
                 f"the output beyond it cannot be represented; scale the input down")
    else:
        cause = "the system or its discrete model is unstable"
    verb = "diverged to" if cause.startswith("the system") else "became"
    raise DivergenceError(
        f"output {verb} {block[row, col]} {where}; {cause}. "
        "Use keep_going (--keep-going) to write it anyway"
    )


@dataclass
class _PreparedModel:
    """A discrete model with what a run learns about it once: the in-band check, the
    warnings raised while making both, and (on first need) the full accuracy report."""

    model: Any
    check: dict[str, Any]
    warnings: list[str]
    model_warnings: list[str]
    _accuracy: dict[str, Any] | None = None
    accuracy_warnings: list[str] = field(default_factory=list)
    _advice: Any = None
    advice_warnings: list[str] = field(default_factory=list)

    def full_accuracy(self) -> dict[str, Any]:
        if self._accuracy is None:
            with warnings.catch_warnings(record=True) as wlist:
                warnings.simplefilter("always")
                self._accuracy = self.model.accuracy(suggest=True).to_dict()
            self.accuracy_warnings = [str(w.message) for w in wlist]
        return copy.deepcopy(self._accuracy)

    def rate_advice(self) -> tuple[Any, list[str]]:
        """(what a poor model's warning reads from the rate search, the warnings raised
        while finding it): the full report's when made, else the shorter search's
        (`accuracy.rate_advice`: the same warning text for a fraction of the cost)."""
        from simwave.discrete.accuracy import RateAdvice, rate_advice

        if self._accuracy is None and self._advice is None:
            with warnings.catch_warnings(record=True) as wlist:
                warnings.simplefilter("always")
                self._advice = rate_advice(self.model)
            self.advice_warnings = [str(w.message) for w in wlist]
        if self._advice is None:  # the full report made, or asked for by rate_advice
            self.full_accuracy()
            return (RateAdvice.from_rates(self.model.method, self.model.rate,
                                          self._accuracy["suggested_rate_hz"]),
                    self.accuracy_warnings)
        return self._advice, self.advice_warnings


#: Recently used discrete models, by system content and discretization options. Everything
#: in a _PreparedModel depends only on the system, the rate, the method and its options, so
#: a batch of many files through one system, or repeated simulate() calls, build it once.
_PREPARED: OrderedDict[tuple, _PreparedModel] = OrderedDict()
_PREPARED_MAX = 32
_PREPARED_LOCK = threading.Lock()


def _system_key(system: System) -> tuple:
    ode = None
    if system.ode is not None:
        ode = tuple(np.asarray(part, dtype=np.float64).tobytes() for part in system.ode)
    return (np.asarray(system.zeros).tobytes(), np.asarray(system.zeros).dtype.str,
            np.asarray(system.poles).tobytes(), np.asarray(system.poles).dtype.str,
            float(system.gain), float(system.delay_s), ode)


def _prepared_model(system: System, rate: float, method: str, prewarp_hz, delay_s,
                    match_hz) -> _PreparedModel:
    """The discrete model of ``system`` for a run, made once per set of inputs (see _PREPARED).

    Warnings raised while making it are recorded, not shown: the caller re-raises them
    for every run, so a run from the cache warns exactly as the first one did.
    """
    key = (_system_key(system), float(rate), method, prewarp_hz, delay_s, match_hz)
    with _PREPARED_LOCK:
        hit = _PREPARED.get(key)
        if hit is not None:
            _PREPARED.move_to_end(key)
            return hit
    with warnings.catch_warnings(record=True) as wlist:
        warnings.simplefilter("always")
        model = system.discretize(rate, method, prewarp_hz=prewarp_hz, delay_s=delay_s,
                                  match_hz=match_hz)
        check = in_band_check(model)
    prep = _PreparedModel(model, check, [str(w.message) for w in wlist], list(model.warnings))
    with _PREPARED_LOCK:
        _PREPARED[key] = prep
        while len(_PREPARED) > _PREPARED_MAX:
            _PREPARED.popitem(last=False)
    return prep


def simulate(
    system: System | str,
    source: Waveform | str | os.PathLike,
    method: str = "ramp-invariant",
    rate: float | None = None,
    initial: str = "rest",
    *,
    output: str | os.PathLike | None = None,
    prewarp_hz: float | None = None,
    delay_s: float | None = None,
    match_hz: float | None = None,
    initial_output: Sequence[float] | None = None,
    oversample: int = 1,
    channels: Sequence[int | str] | None = None,
    read_options: dict[str, Any] | None = None,
    write_options: dict[str, Any] | None = None,
    include_input: bool = False,
    keep_going: bool = False,
    block_size: int = DEFAULT_BLOCK,
    progress: Callable[[int, int | None], None] | None = None,
    output_ics: Sequence[float] | None = None,
    _keep: dict[str, Any] | None = None,
) -> Waveform | RunReport:
    """Run a waveform through the analog system H(s) and return (or write) the output.

    Parameters
    ----------
    system : System or str
        The analog system, or any text :meth:`System.parse` accepts.
    source : Waveform, numpy array, path or generated-signal spec
        The input. A path is streamed block by block; a spec such as
        ``"step:rate=10k,duration=0.1"`` is generated block by block. A plain
        numpy array (1-D: one channel; 2-D: rows are samples) needs ``rate``.
    method : str
        Discretization method (see :func:`simwave.discrete.discretize`);
        ``ramp-invariant`` by default: exact for inputs linear between samples.
    rate : float, optional
        Sample rate in Hz for inputs that carry none (a numpy array, headerless CSV).
    initial : {"rest", "settled"}
        Initial state: at rest before the first sample, or settled at the
        first sample's value. ``initial_output`` gives y(0), y'(0), ... for
        systems entered as an ODE.
    output : path, optional
        When given, the output is streamed to this file (format from the
        extension) and a :class:`RunReport` is returned; otherwise the output
        :class:`Waveform` is returned (same rate, length, channels as the input).
    oversample : int
        Run the model at ``oversample`` x the input rate on an input
        interpolated consistently with the method, then decimate back with a
        linear-phase anti-alias FIR (see :mod:`simwave.oversample`).
    include_input : bool
        Write the input beside the output (extra CSV columns / HDF5 dataset).
    keep_going : bool
        Do not stop when the output turns NaN or infinite.
    _keep : dict, optional
        Internal (:func:`execute`): for a file run of a short record, filled with the
        input as read and the output as the file holds it (see :func:`_keep_for_measuring`),
        so that measuring needs not read either file back.

    Returns
    -------
    Waveform or RunReport
        The output waveform, ``(n_samples, n_channels)`` float64, with the
        run's provenance and report in ``attrs``; a RunReport when ``output``
        is given.
    """
    started = time.perf_counter()
    if output_ics is not None:  # the old spelling, kept for one release
        from simwave.vocabulary import warn_renamed

        warn_renamed("output_ics=", "initial_output=")
        if initial_output is not None:
            raise SimwaveError("output_ics= and initial_output= are the same option; give "
                               "initial_output= only")
        initial_output = output_ics
    output_ics = initial_output  # the discrete model's own name for it
    sys_ = _as_system(system)
    src = open_source(source, rate=rate, channels=channels, read_options=read_options)
    try:  # until the run's loop owns it, a file opened for the run is closed on errors
        factor = int(oversample)
        if factor < 1:
            raise SimwaveError(f"oversample must be a whole number >= 1, got {oversample}")
        if block_size < 1:
            raise SimwaveError(f"block size must be >= 1, got {block_size}")
        model_rate = src.rate * factor
        with model_failures(sys_, model_rate, method):
            prep = _prepared_model(sys_, model_rate, method, prewarp_hz, delay_s, match_hz)
            model, check = prep.model, _copy_check(prep.check)
            # The full report (with the suggested-rate search) costs tens of milliseconds:
            # made for file runs, whose summary prints it; a poor model's warning in an
            # in-memory run needs only part of the search (prep.rate_advice).
            accuracy = advice = None
            found: list[str] = []
            if output is not None:
                accuracy = prep.full_accuracy()
                found = prep.accuracy_warnings
            elif check["poor"]:
                advice, found = prep.rate_advice()
        caught: list[str] = list(prep.warnings) + list(found)
        for text in prep.model_warnings:
            if text not in caught:
                caught.append(text)
        if check["poor"]:
            caught.append(_poor_model_warning(check, accuracy, factor, model, advice))
        over_info = None
        if factor > 1:
            base = _prepared_model(sys_, src.rate, method, prewarp_hz, delay_s, match_hz)
            over_info = {
                "factor": factor,
                "model_rate_hz": model_rate,
                "in_band_error_at_input_rate": copy.deepcopy(base.check),
                "in_band_error_at_model_rate": check,
            }
        for text in caught:
            warnings.warn(text, stacklevel=2)

        provenance = {
            "simwave_version": simwave.__version__,
            "system": sys_.text if sys_.text is not None else repr(sys_),
            "system_name": sys_.name,
            "zeros": [_complex_text(z) for z in np.atleast_1d(sys_.zeros).tolist()],
            "poles": [_complex_text(p) for p in np.atleast_1d(sys_.poles).tolist()],
            "gain": sys_.gain,
            "dead_time_s": sys_.delay_s + (delay_s or 0.0),
            "method": method,
            "prewarp_hz": prewarp_hz,
            "model_rate_hz": model_rate,
            "oversample": factor,
            "initial": (initial if output_ics is None
                        else f"output initial conditions {list(output_ics)}"),
            "input": src.label,
            "written": _written_time(),
        }

        meter = _LevelMeter(src.n_channels)
        pieces: list[np.ndarray] = []
        if output is not None and src.n_samples:
            _check_room(output, src, factor, write_options, include_input)
        # A short file kept for measuring is read, filtered and written as one block (see
        # _Sink: the same output and report as block by block, without the copies into the
        # kept arrays or the pipeline threads, whose overlap a batch's workers do not need)
        whole = (_keep is not None and output is not None and _keepable(src)
                 and src.waveform is None and factor == 1)
        sink = _Sink(output, src, provenance, write_options, include_input, keep_going, meter,
                     pieces, max(block_size, src.n_samples) if whole else block_size,
                     meter_block=block_size if whole else None)
        kept_in: _Kept | None = None
        if _keep is not None and output is not None and _keepable(src):
            kept_in = _Kept(src.n_samples, src.n_channels)
            sink.kept = _Kept(src.n_samples, src.n_channels)
        state = None
        n_in = 0
        in_peak = np.zeros(src.n_channels)
        blocks_in = None
    except BaseException:
        if src.close is not None:
            src.close()
        raise
    try:
        up = dec = None
        if factor > 1:  # imported here: scipy.signal is slow to import, and only needed here
            from simwave.oversample import Decimator, Upsampler

            up = Upsampler(factor, hold=(method == "step-invariant"))
        # Files are read ahead on a thread; data already in memory needs no thread, nor
        # does a file of one block (see _Sink).
        if src.waveform is not None:  # already in memory: one block, no copies
            blocks_in = src.make_blocks(max(1, src.waveform.n_samples))
        elif whole:
            blocks_in = src.make_blocks(max(1, src.n_samples))
        elif sink.overlap:
            blocks_in = read_ahead(src.make_blocks(block_size))
        else:
            blocks_in = src.make_blocks(block_size)
        for block in blocks_in:
            block = np.asarray(block, dtype=np.float64)
            if block.ndim == 1:
                block = block[:, None]
            if kept_in is not None:
                kept_in.add(block)
            if block.shape[0] == 0:
                continue
            if state is None:
                with model_failures(sys_, model_rate, method):
                    state = model.initial_state(
                        block[0], initial=initial, n_channels=block.shape[1],
                        output_ics=output_ics)
            n_in += block.shape[0]
            in_peak = np.maximum(in_peak, _channel_peaks(block))
            if up is None:
                out, state = model.process(block, state)
            else:
                hi, state = model.process(up.push(block), state)
                if dec is None:
                    dec = Decimator(factor, block.shape[1], _pre_value(initial, output_ics, hi))
                out = dec.push(hi)
            sink.emit(out, block)
            if progress is not None:
                progress(sink.done, src.n_samples)
        if n_in == 0:
            raise SimwaveError(f"{src.label}: the input holds no samples")
        if up is not None:
            hi, state = model.process(up.finish(), state)
            if dec is None:
                dec = Decimator(factor, hi.shape[1], _pre_value(initial, output_ics, hi))
            out = dec.push(hi)
            out = np.concatenate([out, dec.finish(n_in, sink.done + out.shape[0])])
            sink.emit(out, None)
            over_info["decimator"] = dec.describe()
        sink.close()
    except BaseException:
        sink.abort()
        raise
    finally:
        # Stop the read-ahead thread now, not when the generator is collected: a stop
        # signal would otherwise leave it reading while the interpreter shuts down.
        close = getattr(blocks_in, "close", None)
        if close is not None:
            close()
        if src.close is not None:
            src.close()
    done = sink.done
    if kept_in is not None:
        _keep_for_measuring(_keep, src, kept_in, sink)

    if output is not None:
        return RunReport(
            n_samples=done,
            rate=src.rate,
            channels=list(src.channels),
            units=list(src.units),
            method=method,
            initial=provenance["initial"],
            peak=[float(v) for v in meter.peak],
            peak_time_s=[float(src.t0 + i / src.rate) for i in meter.peak_index],
            rms=[float(v) for v in meter.rms()],
            elapsed_s=time.perf_counter() - started,
            accuracy=accuracy,
            rate_check=check,
            warnings=caught,
            provenance=provenance,
            output=os.fspath(output),
            oversample=over_info,
            write=_write_dict(sink.write_result),
            input_peak=[float(v) for v in in_peak],
        )
    data = pieces[0] if len(pieces) == 1 else np.concatenate(pieces)  # never empty: n_in > 0
    return Waveform(
        data, src.rate, src.t0, list(src.channels), list(src.units),
        {**provenance, "rate_check": check, "warnings": caught},
    )


def _written_time() -> str:
    """UTC time for the provenance; SOURCE_DATE_EPOCH (reproducible-builds.org) overrides it,
    so that repeated runs can give byte-identical files."""
    from simwave.epoch import utc_now

    return utc_now().isoformat(timespec="seconds")


def _write_dict(result: Any) -> dict[str, Any] | None:
    if result is None:
        return None
    import dataclasses

    return {k: v for k, v in dataclasses.asdict(result).items() if k != "path"}


def _pre_value(initial: str, output_ics: Any, first_out: np.ndarray) -> np.ndarray:
    """Model output before the record, for the decimator's look-back: 0 at rest, else held."""
    if initial == "rest" and output_ics is None or first_out.shape[0] == 0:
        return np.zeros(first_out.shape[1])
    return first_out[0]


def _copy_check(check: dict[str, Any]) -> dict[str, Any]:
    """A copy of an in-band check for one run: a plain dict copy when every value is an
    immutable scalar (what method_check returns; what deepcopy would give, ~7 us less),
    else a deep copy."""
    if all(type(v) in (float, int, bool, str, type(None)) for v in check.values()):
        return dict(check)
    return copy.deepcopy(check)


def _complex_text(value: complex) -> str | float:
    value = complex(value)
    if value.imag == 0:
        return float(value.real)
    return f"{value.real:.12g}{value.imag:+.12g}j"


class _Sink:
    """Where output blocks go: checks, level meter, then a file writer (behind) or memory."""

    def __init__(self, output, src, provenance, write_options, include_input, keep_going, meter,
                 pieces, block_size: int = DEFAULT_BLOCK, meter_block: int | None = None
                 ) -> None:
        self.src = src
        # The level meter's RMS sums block by block (its rounding depends on the split):
        # a run that takes a file as one block meters it in the usual blocks' pieces
        self.meter_block = meter_block
        self.keep_going = keep_going
        self.meter = meter
        self.pieces = pieces
        self.done = 0
        self.include_input = include_input
        self.write_result = None
        self._pending_input: list[np.ndarray] = []
        self._writer = None
        self._behind: WriteBehind | WriteNow | None = None
        self.kept: _Kept | None = None  # the output, kept for measuring
        self.read_back = None  # after close: (convert, metadata) from the writer, or None
        # A file whose header says it fits in one block is read and written on this
        # thread: the two pipeline threads cost ~2-4 ms to start and hand over, which is
        # most of a short batch pair, and one block has nothing to overlap.
        self.overlap = src.waveform is None and not (
            src.n_samples is not None and src.n_samples <= block_size)
        if output is not None:
            self._writer = _open_output(output, src, provenance, write_options, include_input)
            writer = self._writer
            stage = WriteBehind if self.overlap else WriteNow
            if include_input:
                self._behind = stage(lambda pair: writer.write(pair[0], {"input": pair[1]}))
            else:
                self._behind = stage(writer.write)

    def emit(self, out: np.ndarray, inp: np.ndarray | None) -> None:
        if inp is not None and self.include_input and self._behind is not None:
            self._pending_input.append(inp)
        if out.shape[0] == 0:
            return
        if self.kept is not None:
            self.kept.add(out)
        # The meter's extremes are NaN or infinite exactly when some sample is, so the
        # search for the first bad sample runs only then (a pass over the block saved).
        # A file taken as one block is metered and written in the pieces a block-by-block
        # run has (the same RMS sums, and the same first error when one piece fails).
        step = self.meter_block or out.shape[0]
        aligned = inp is not None and inp.shape[0] == out.shape[0]
        for a in range(0, out.shape[0], step):
            whole = step >= out.shape[0]
            piece = out if whole else out[a:a + step]
            if not self.meter.add(piece) and not self.keep_going:
                _check_finite(piece, self.done, self.src.rate, self.src.t0,
                              (inp if whole else inp[a:a + step]) if aligned else None)
            if self._behind is None:
                self.pieces.append(piece)
            elif self.include_input:
                self._behind.submit((piece, self._take_input(piece.shape[0])))
            else:
                self._behind.submit(piece)
            self.done += piece.shape[0]

    def _take_input(self, n: int) -> np.ndarray:
        pending = np.concatenate(self._pending_input)
        self._pending_input = [pending[n:]] if pending.shape[0] > n else []
        return pending[:n]

    def close(self) -> None:
        if self._writer is not None:
            self._behind.close()
            self.write_result = self._writer.close()
            if self.kept is not None:
                self.read_back = self._writer.read_back()
            self._writer = None

    def abort(self) -> None:
        if self._writer is None:
            return
        self._behind.abort()
        self._writer.abort()
        self._writer = None


#: Largest record (values per stream: samples x channels) whose input and output a file run
#: keeps for measuring (16 MB of float64 each; our choice). The measuring step holds a file
#: of up to ``simwave.measure.source.IN_MEMORY_VALUES`` values in memory anyway; kept while
#: the run streams, a larger record would add to the run's own memory.
KEEP_VALUES = 1 << 21


def _keepable(src: Source) -> bool:
    """Whether a file run's input and output are short enough to keep for measuring
    (:data:`KEEP_VALUES`); :func:`_measurable_in_memory` says which jobs may ask."""
    return (src.path is not None and src.n_samples is not None
            and src.n_samples * src.n_channels <= KEEP_VALUES)


class _Kept:
    """A record's blocks gathered into one array of the length its header gave (one copy
    per block, no list of blocks to join; a single block is kept as it is)."""

    def __init__(self, n_samples: int, n_channels: int) -> None:
        self.shape = (int(n_samples), int(n_channels))
        self.data: np.ndarray | None = None
        self.n = 0
        self.ok = True

    def add(self, block: np.ndarray) -> None:
        m = block.shape[0]
        if not self.ok or self.n + m > self.shape[0] or block.shape[1] != self.shape[1]:
            self.ok = False  # not the length the header said: measure the files instead
            return
        if self.n == 0 and m == self.shape[0]:
            self.data = block
        else:
            if self.data is None:
                self.data = np.empty(self.shape)
            self.data[self.n:self.n + m] = block
        self.n += m

    def array(self) -> np.ndarray | None:
        return self.data if self.ok and self.n == self.shape[0] and self.n > 0 else None


def _keep_for_measuring(keep: dict[str, Any], src: Source, kept_in: _Kept,
                        sink: "_Sink") -> None:
    """Fill ``keep`` with the run's input and its output as the written file gives it back,
    when the writer can say exactly what reading the file would give (else leave it empty)."""
    out = sink.kept.array() if sink.kept is not None else None
    inp = kept_in.array()
    if sink.read_back is None or out is None or inp is None:
        return
    convert, meta = sink.read_back
    keep["input"] = Waveform(inp, src.rate, src.t0, list(src.channels), list(src.units))
    keep["output"] = Waveform(convert(out), meta["rate"], meta["t0"], meta["channels"],
                              meta["units"])


def _check_room(output, src: Source, factor: int, write_options, include_input: bool) -> None:
    """Fail at once when the output cannot fit the disk or the file size limit."""
    from simwave.signals.atomic import MIN_BYTES_PER_VALUE, check_room
    from simwave.signals.formats import resolve_format

    opts = write_options or {}
    family, _ = resolve_format(os.fspath(output), opts.get("format"))
    key = "csv" if family == "csv" else (opts.get("subtype") or "FLOAT") if family == "audio" \
        else None
    if family == "audio" and os.fspath(output).lower().endswith((".flac", ".ogg", ".mp3")):
        key = None  # compressed
    columns = src.n_channels * (2 if include_input else 1) + (1 if family == "csv" else 0)
    check_room(os.fspath(output), src.n_samples * columns, MIN_BYTES_PER_VALUE.get(key))


def _open_output(output, src: Source, provenance, write_options, include_input):
    """Open the streaming writer for the run's output (atomic: committed on close)."""
    opts = dict(write_options or {})
    protect = [src.path] if src.path else []
    if include_input:
        opts["extra"] = {"input": {"channels": list(src.channels), "units": list(src.units)}}
    inherited = {f"input_{k}": v for k, v in src.attrs.items() if k not in provenance}
    return simwave.open_writer(
        os.fspath(output), src.rate, list(src.channels), units=list(src.units),
        attrs={**inherited, **provenance}, t0=src.t0, protect=protect, **opts,
    )


# --------------------------------------------------------------------------- jobs
@dataclass(frozen=True)
class RunJob:
    """One (input, system) run, as plain picklable data: what ``simwave run`` and batch execute.

    ``system`` is a :class:`System` or any text :meth:`System.parse` accepts;
    ``source`` a file path or a generated-signal spec; ``output`` the file to
    write; ``metrics`` an optional JSON path for the measured metrics.
    """

    system: Any
    source: str
    output: str
    method: str = "ramp-invariant"
    initial: str = "rest"
    prewarp_hz: float | None = None
    delay_s: float | None = None
    match_hz: float | None = None
    initial_output: tuple[float, ...] | None = None
    oversample: int = 1
    channels: tuple[Any, ...] | None = None
    rate: float | None = None
    read_options: dict[str, Any] = field(default_factory=dict)
    write_options: dict[str, Any] = field(default_factory=dict)
    include_input: bool = False
    keep_going: bool = False
    metrics: str | None = None
    measure_options: dict[str, Any] = field(default_factory=dict)


def execute(job: RunJob, progress: Callable[[int, int | None], None] | None = None) -> dict:
    """Run one job: stream the output to its file, then measure it if asked.

    Returns a JSON-friendly dict: ``{"run": RunReport.to_dict(), "metrics": dict or None}``.
    The metrics file is written atomically after the output, so its presence
    (newer than the output) marks a finished job.
    """
    from simwave.signals.atomic import guard_outputs

    guard_outputs({"the output": job.output, "the metrics file": job.metrics},
                  {"the input": job.source if os.path.exists(job.source) else None})
    system = _as_system(job.system)
    kept: dict[str, Any] | None = {} if _measurable_in_memory(job) else None
    report = simulate(
        system, job.source, job.method, job.rate, job.initial,
        output=job.output, prewarp_hz=job.prewarp_hz, delay_s=job.delay_s,
        match_hz=job.match_hz, initial_output=job.initial_output, oversample=job.oversample,
        channels=job.channels, read_options=job.read_options, write_options=job.write_options,
        include_input=job.include_input, keep_going=job.keep_going, progress=progress,
        _keep=kept,
    )
    result: dict[str, Any] = {"run": report.to_dict(), "metrics": None}
    if job.metrics is not None:
        # The rule for the measuring step (README, "Exit codes"): every path was checked
        # before the run; once the output is complete, a measuring or metrics-writing
        # failure does not undo it. It becomes a warning with the reason, recorded in
        # result["metrics_error"], and no metrics file is written.
        try:
            metrics = _measure_kept(job, system, kept) if kept else None
            if metrics is None:
                metrics = measure_run(job, system, len(report.channels)).to_dict()
            write_json(job.metrics, {"run": result["run"], "metrics": metrics},
                       protect=[job.source, job.output])
        except SimwaveError as exc:
            result["metrics_error"] = str(exc)
            warnings.warn(f"{job.metrics}: metrics not written: {exc} (the output "
                          f"{job.output} is complete)", stacklevel=2)
        else:
            result["metrics"] = metrics
    return result


def input_read_options(job: RunJob) -> dict[str, Any]:
    """Reader options that give back exactly the job's input (rate, channels, dataset...)."""
    opts = dict(job.read_options)
    if job.rate is not None:
        opts.setdefault("rate", job.rate)
    if job.channels:
        opts.setdefault("channels", list(job.channels))
    return opts


def output_read_options(job: RunJob, n_channels: int) -> dict[str, Any]:
    """Reader options that give back the job's output alone (not the input written beside it)."""
    if not job.include_input:
        return {}
    from simwave.signals.formats import resolve_format

    family, _ = resolve_format(job.output, job.write_options.get("format"))
    if family == "hdf5":
        return {"dataset": job.write_options.get("dataset") or "/waveform"}
    return {"channels": list(range(n_channels))}  # the input's columns follow the output's


def measure_run(job: RunJob, system: System, n_channels: int):
    """Measure a finished job's output file against its input (both read in blocks)."""
    from simwave.measure import measure

    opts = dict(job.measure_options)
    # the at-rest convention holds only for runs that start at rest
    opts.setdefault("rest_before_record", job.initial == "rest" and job.initial_output is None)
    with measuring_failures(job.output):
        return measure(
            job.output, reference=job.source, system=system,
            read_options=output_read_options(job, n_channels),
            reference_read_options=input_read_options(job), **opts,
        )


def _measurable_in_memory(job: RunJob) -> bool:
    """Whether ``job``'s output may be measured from the arrays its run produced.

    Only where that gives exactly what measuring the two files gives: an audio input read
    without a rate override or gap filling (its reader then says nothing that reading it
    again would repeat) and an output holding the run's channels alone; the writer then
    says whether its file reads back to known values (:meth:`WaveformWriter.read_back`),
    and the run keeps short records only (:data:`KEEP_VALUES`).
    """
    from simwave.signals.formats import resolve_format
    from simwave.signals.spec import is_signal_spec

    opts = job.read_options
    if (job.metrics is None or job.include_input or job.rate is not None
            or opts.get("rate") is not None or opts.get("fill_gaps")
            or is_signal_spec(job.source)):
        return False
    return resolve_format(job.source, opts.get("format"))[0] == "audio"


def _measure_kept(job: RunJob, system: System, kept: dict[str, Any]) -> dict | None:
    """Measure a finished run from its kept input and output (see :func:`simulate`'s
    ``_keep``): the same numbers as :func:`measure_run` on the two files, which it saves
    reading back. The result names the two files, as measuring them does. None when the
    measurement fails: the caller then measures the files, so that the error reads as
    before (it names the file)."""
    from simwave.measure import measure

    if "output" not in kept:
        return None
    opts = dict(job.measure_options)
    opts.setdefault("rest_before_record", job.initial == "rest" and job.initial_output is None)
    try:
        with measuring_failures(job.output):
            measured = measure(
                kept["output"], reference=kept["input"], system=system,
                read_options=output_read_options(job, kept["output"].n_channels),
                reference_read_options=input_read_options(job), **opts,
            )
    except SimwaveError:
        return None
    # The result object is this function's alone and dropped here: its plain dictionary is
    # taken as it is, without to_dict()'s deep copy (~0.3 ms a short pair); to_dict() where
    # the result keeps it under another name.
    result = getattr(measured, "_data", None)
    if not isinstance(result, dict):
        result = measured.to_dict()
    result["source"]["output"] = os.fspath(job.output)
    result["source"]["reference"] = os.fspath(job.source)
    return result


def write_json(path: str | os.PathLike, data: Any, protect: Sequence[str] = ()) -> None:
    """Write JSON atomically (temporary file beside the target, then os.replace).

    Non-finite numbers become null with their reasons (``null_reasons``, and a warning
    naming them). The text is orjson's, indented by two spaces: a short pair's metrics
    file took 5-6 ms through the standard library's indenting encoder (pure Python),
    about a tenth of that here. Numbers are written as the shortest text that reads back
    to the same float64.
    """
    from simwave.signals.atomic import write_text_atomic

    # The rebuilt copy (with a path text per value, for the reasons) is needed only when
    # some value is not finite; otherwise the data serialise to the same text as it.
    clean, reasons = (data, {}) if _all_finite(data) else with_null_reasons(data)
    note = null_reasons_note(reasons)
    if note:
        warnings.warn(f"{path}: {note}", stacklevel=2)
    write_text_atomic(os.fspath(path), json_text(clean), protect=[p for p in protect if p])


_PLAIN_LEAVES = (str, int, bool, type(None))


def _all_finite(value: Any) -> bool:
    """True when :func:`simwave.guards.json_ready` would find no value to make null: no
    NaN or infinity among the floats, numpy floats and float arrays of ``value``."""
    t = type(value)
    if t is float:
        return math.isfinite(value)
    if t in _PLAIN_LEAVES:
        return True
    if isinstance(value, dict):
        for v in value.values():
            if not _all_finite(v):
                return False
        return True
    if isinstance(value, (list, tuple)):
        for v in value:
            if not _all_finite(v):
                return False
        return True
    if isinstance(value, (float, np.floating)):
        return math.isfinite(float(value))
    if isinstance(value, np.ndarray):
        if value.dtype.kind == "f":
            return bool(np.isfinite(value).all())
        return value.dtype.kind != "O" or _all_finite(value.tolist())
    return True


def json_text(data: Any) -> str:
    """``data`` as indented JSON text with a final newline (numpy values and complex
    numbers converted; every float already finite)."""
    from simwave.signals.atomic import stop_signals_held

    with stop_signals_held():  # a stop inside orjson's set-up crashes (see signals/csvfile.py)
        import orjson

    try:
        raw = orjson.dumps(data, default=_json_default,
                           option=orjson.OPT_INDENT_2 | orjson.OPT_NON_STR_KEYS)
    except orjson.JSONEncodeError:  # e.g. an integer beyond 64 bits: the standard library
        import json

        return json.dumps(data, indent=2, allow_nan=False, default=_json_default,
                          ensure_ascii=False) + "\n"
    return raw.decode("utf-8") + "\n"


def _json_default(value: Any) -> Any:
    if isinstance(value, (np.floating, np.integer)):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, complex):
        return _complex_text(value)
    raise TypeError(f"not JSON serializable: {type(value).__name__}")
