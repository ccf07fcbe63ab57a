"""One entry point for every file format: read, write, blocks, info, open_writer.

The format comes from the ``format`` option or the file extension
(:func:`simwave.signals.formats.resolve_format`). Reading streams: every
reader yields pieces that pass through the same stages (time-axis check or
resampling, NaN/inf check or gap filling, channel selection, re-blocking), so
``blocks()`` runs in constant memory and ``read()`` is just all blocks.
Writing is atomic: a temporary file beside the target is renamed over it only
after a clean finish (:mod:`simwave.signals.atomic`).

Reader options (all readers)
----------------------------
format : str, optional
    ``"csv"``, ``"hdf5"`` or an audio format name (``"wav"``, ``"flac"``, ...).
rate : float or str, optional
    Sample rate in Hz where the file has none; where it has one, a different
    value overrides it (with a warning).
dataset : str, optional
    HDF5 dataset path.
channels : str or sequence, optional
    Channels to keep, by name or index (``"a,b"``, ``[0, 2]``).
fill_gaps : int
    0 (default) rejects NaN/inf; N interpolates gaps of up to N samples.
time_column : str, int or False, optional (CSV)
resample : bool (CSV time column, HDF5 time dataset)
delimiter, decimal : str, optional (CSV)
    Field separator and decimal mark (``"."`` or ``","``); default detected.
header_line, skip_lines : int, optional (CSV)
    Line number of the column names (0: none) and lines to skip at the top;
    default detected. Lines above the names are kept as ``attrs["metadata"]``.
full_scale, offset : float or list, optional (audio)
    Physical value = full_scale * sample + offset, per channel.
units : str, optional (audio)
    Unit label of the scaled samples (default "V" when scaled, else "FS").
"""

from __future__ import annotations

import math
import os
import warnings
from contextlib import closing
from dataclasses import dataclass, field
from typing import Any, Callable, Iterator, Mapping, Sequence

import numpy as np

from simwave.errors import WaveformError
from simwave.signals.atomic import AtomicTarget, is_write_error, write_failure
from simwave.signals.common import WriteResult, check_readable, dbfs
from simwave.signals.formats import resolve_format
from simwave.signals.quantity import parse_quantity
from simwave.signals.stream import ChannelStats, GapFiller, rechunk
from simwave.signals.waveform import Waveform

#: Rows per block used by read() and write() internally.
BLOCK = 1 << 16


class WaveformWarning(UserWarning):
    """Something was changed or assumed while reading or writing (resampled rows, filled gaps)."""


_READER_KEYS = {"format", "rate", "dataset", "channels", "fill_gaps", "time_column", "resample",
                "delimiter", "decimal", "header_line", "skip_lines", "full_scale", "offset",
                "units"}
_CSV_KEYS = ("time_column", "delimiter", "decimal", "header_line", "skip_lines")


def _line_count(value: Any, name: str, where: str) -> int | None:
    if value is None:
        return None
    try:
        n = int(str(value).strip())
    except ValueError:
        raise WaveformError(f"{where}: {name} must be a whole number of lines, got {value!r}") \
            from None
    if n < 0:
        raise WaveformError(f"{where}: {name} must be >= 0, got {n}")
    return n


def _positive_rate(rate: Any, where: str) -> float | None:
    if rate is None:
        return None
    r = parse_quantity(rate, "rate")
    if not r > 0:
        raise WaveformError(f"{where}: sample rate must be > 0 Hz, got {r:g}")
    return r


def _open_source(path: Any, opts: dict[str, Any]) -> Any:
    unknown = set(opts) - _READER_KEYS
    if unknown:
        raise TypeError(f"unknown reader option(s): {', '.join(sorted(unknown))}")
    path = check_readable(path)
    family, _ = resolve_format(path, opts.get("format"))
    rate = _positive_rate(opts.get("rate"), path)

    def only(names: Sequence[str], fam: str) -> None:
        for n in names:
            v = opts.get(n)
            if v is not None and v is not False:
                raise WaveformError(f"{path}: option {n} applies to {fam} files only")

    if family == "audio":
        from simwave.signals.audio import AudioSource

        only(("dataset",), "HDF5")
        only(_CSV_KEYS, "CSV")
        src = AudioSource(path, full_scale=opts.get("full_scale"), offset=opts.get("offset"),
                          units=opts.get("units"))
        if rate is not None and abs(rate - src.rate) > 1e-9 * rate:
            src.notes.append(f"rate {rate:g} Hz given; the file says {src.rate:g} Hz")
            src.rate = rate
        return src
    only(("full_scale", "offset", "units"), "audio")
    if family == "csv":
        from simwave.signals.csvfile import CsvSource

        only(("dataset",), "HDF5")
        return CsvSource(path, rate=rate, time_column=opts.get("time_column"),
                         resample=bool(opts.get("resample")), delimiter=opts.get("delimiter"),
                         decimal=opts.get("decimal"),
                         header_line=_line_count(opts.get("header_line"), "header_line", path),
                         skip_lines=_line_count(opts.get("skip_lines"), "skip_lines", path) or 0)
    from simwave.signals.hdf5file import Hdf5Source

    only(_CSV_KEYS, "CSV")
    return Hdf5Source(path, dataset=opts.get("dataset"), rate=rate,
                      resample=bool(opts.get("resample")))


def _select(src: Any, channels: Any) -> list[int]:
    if channels is None:
        return list(range(len(src.channels)))
    if isinstance(channels, (str, int, np.integer)):
        channels = [c.strip() for c in str(channels).split(",") if c.strip()]
    probe = Waveform(np.zeros((0, len(src.channels))), 1.0, channels=src.channels)
    idx = []
    for c in channels:
        try:
            idx.append(probe.channel_index(c))
        except WaveformError as exc:
            raise WaveformError(f"{src.path}: {exc}") from None
    if not idx:
        raise WaveformError(f"{src.path}: no channels selected")
    return idx


class _Pipeline:
    """Source -> time axis -> gap filler -> arrays, with the counts for reporting."""

    def __init__(self, path: Any, opts: dict[str, Any]) -> None:
        opts = dict(opts)
        fill = opts.get("fill_gaps") or 0
        try:
            self.fill = int(fill)
        except (TypeError, ValueError):
            raise WaveformError(f"fill_gaps must be a whole number of samples, got {fill!r}") \
                from None
        if self.fill < 0:
            raise WaveformError(f"fill_gaps must be >= 0, got {self.fill}")
        self.src = _open_source(path, opts)
        try:
            self.sel = _select(self.src, opts.get("channels"))
        except BaseException:
            self.src.close()
            raise
        self.channels = [self.src.channels[i] for i in self.sel]
        self.units = [self.src.units[i] for i in self.sel]
        self.where = getattr(self.src, "where", self.src.path)
        self.filler = GapFiller(self.where, self.fill, self.channels)

    def arrays(self) -> Iterator[np.ndarray]:
        axis = self.src.time_axis
        for rows in self.src.rows(self.sel):
            if axis is not None:
                rows = axis.feed(rows)
            rows = self.filler.feed(rows)
            if len(rows):
                yield rows.values
        self.filler.finish()

    def counts(self) -> dict[str, Any]:
        out: dict[str, Any] = {}
        axis = self.src.time_axis
        if axis is not None and axis.resample:
            out["resampled_rows"] = axis.off_grid
        if self.filler.filled:
            out["filled_samples"] = self.filler.filled
        return out

    def attrs(self) -> dict[str, Any]:
        a = dict(self.src.attrs)
        a.update(self.counts())
        return a

    def report(self) -> None:
        """Warnings for what was changed or assumed while reading."""
        for note in self.src.notes:
            warnings.warn(f"{self.where}: {note}", WaveformWarning, stacklevel=3)
        c = self.counts()
        if c.get("resampled_rows"):
            warnings.warn(f"{self.where}: {c['resampled_rows']} row(s) off the uniform grid; "
                          f"resampled by linear interpolation", WaveformWarning, stacklevel=3)
        if c.get("filled_samples"):
            warnings.warn(f"{self.where}: {c['filled_samples']} non-finite sample(s) filled by "
                          f"linear interpolation", WaveformWarning, stacklevel=3)

    def close(self) -> None:
        self.src.close()


def _spec_source(path: Any) -> tuple | None:
    if not isinstance(path, str):
        return None
    from simwave.signals.spec import is_signal_spec, parse_signal_spec

    if is_signal_spec(path):
        return parse_signal_spec(path)
    return None


def _spec_rate(spec: tuple, opts: dict[str, Any]) -> tuple[float, float]:
    kind, rate, duration, _ = spec
    rate = rate if rate is not None else _positive_rate(opts.get("rate"), kind)
    if rate is None or duration is None:
        raise WaveformError(f"signal {kind}: give rate= and duration= in the signal text")
    return rate, duration


def blocks(path: Any, size: int, **opts: Any) -> Iterator[Waveform]:
    """Read a waveform file piece by piece, in constant memory.

    Parameters
    ----------
    path : str or path-like
        Audio, CSV or HDF5 file, or a generated-signal text such as
        ``"sine:rate=48k,duration=1,frequency=1k"`` (see :mod:`simwave.signals.spec`).
    size : int
        Samples per block (the last block may be shorter).
    **opts
        Reader options, the same as :func:`read` (see the module docs).

    Yields
    ------
    Waveform
        ``size`` samples x selected channels, float64, with ``t0`` the time of
        its first sample. Its ``attrs`` hold the file's attributes and the
        running counts ``resampled_rows`` / ``filled_samples`` (totals on the
        last block).

    Raises
    ------
    WaveformError
        Missing, empty, unreadable or invalid file, naming the file and place.
    """
    size = int(size)
    if size < 1:
        raise WaveformError(f"block size must be >= 1 sample, got {size}")
    spec = _spec_source(path)
    if spec is not None:
        from simwave.signals.generate import generate_blocks

        rate, duration = _spec_rate(spec, opts)
        yield from generate_blocks(spec[0], rate, duration, size, **spec[3])
        return
    pipe = _Pipeline(path, opts)
    with closing(pipe):
        src = pipe.src
        index = 0
        for block in rechunk(pipe.arrays(), size):
            yield Waveform(block, src.rate, src.t0 + index / src.rate, list(pipe.channels),
                           list(pipe.units), pipe.attrs())
            index += block.shape[0]
        pipe.report()


class OpenedAudio:
    """An audio file opened once for a run: its header's description and its blocks.

    :func:`open_audio_blocks` gives it. ``rate``, ``t0``, ``channels``, ``units`` and
    ``attrs`` are what the first block of :func:`blocks` carries, ``n_samples`` what
    :func:`info` says; :meth:`arrays` yields the sample arrays of :func:`blocks` (the
    first call from the file opened here, a later one from the file opened again).
    """

    def __init__(self, path: str, opts: dict[str, Any]) -> None:
        self.path, self.opts = path, opts
        self._pipe: _Pipeline | None = _Pipeline(path, opts)
        src = self._pipe.src
        self.rate, self.t0, self.n_samples = src.rate, src.t0, int(src.n_samples)
        self.channels, self.units = list(self._pipe.channels), list(self._pipe.units)
        self.attrs = self._pipe.attrs()

    def arrays(self, size: int) -> Iterator[np.ndarray]:
        """The samples in blocks of ``size`` rows, as :func:`blocks` gives their data."""
        pipe, self._pipe = self._pipe, None
        if pipe is None:
            pipe = _Pipeline(self.path, self.opts)
        if int(size) > getattr(pipe.src, "read_chunk", int(size)):
            # blocks longer than the reader's reads: read them whole (one array each, not
            # pieces joined into a copy; the same samples)
            pipe.src.read_chunk = int(size)
        with closing(pipe):
            yield from rechunk(pipe.arrays(), int(size))
            pipe.report()

    def close(self) -> None:
        """Close the file if :meth:`arrays` never read it."""
        pipe, self._pipe = self._pipe, None
        if pipe is not None:
            pipe.close()


def open_audio_blocks(path: Any, **opts: Any) -> OpenedAudio | None:
    """Open an audio file once for reading it whole in blocks (``simulate``), or None
    where that would not give exactly what :func:`blocks` and :func:`info` give: another
    format, a generated signal, gap filling (whose counts the first block carries)."""
    if _spec_source(path) is not None or opts.get("fill_gaps"):
        return None
    if resolve_format(os.fspath(path), opts.get("format"))[0] != "audio":
        return None
    return OpenedAudio(os.fspath(path), dict(opts))


def read(path: Any, **opts: Any) -> Waveform:
    """Read a whole waveform file.

    Parameters
    ----------
    path : str or path-like
        ``.wav .flac .aiff .ogg ...`` (audio, via soundfile), ``.csv .txt .tsv
        .dat`` (delimited text), ``.h5 .hdf5`` (HDF5), or a generated-signal text.
    **opts
        Reader options (see the module docs): ``format``, ``rate``,
        ``dataset``, ``channels``, ``fill_gaps``, ``time_column``,
        ``resample``, ``delimiter``, ``decimal``, ``header_line``, ``skip_lines``,
        ``full_scale``, ``offset``, ``units``.

    Returns
    -------
    Waveform
        data ``(n_samples, n_channels)`` float64.

    Examples
    --------
    >>> import simwave, numpy as np, tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "x.csv")
    >>> _ = simwave.write(p, simwave.Waveform(np.arange(4.0), rate=10.0))
    >>> simwave.read(p).data[:, 0]
    array([0., 1., 2., 3.])
    """
    spec = _spec_source(path)
    if spec is not None:
        from simwave.signals.generate import generate

        rate, duration = _spec_rate(spec, opts)
        return generate(spec[0], rate, duration, **spec[3])
    pipe = _Pipeline(path, opts)
    with closing(pipe):
        src = pipe.src
        n = src.n_samples
        if n is not None and src.time_axis is None:
            out = np.empty((n, len(pipe.sel)))
            i = 0
            for arr in pipe.arrays():
                out[i:i + arr.shape[0]] = arr
                i += arr.shape[0]
            out = out[:i]
        else:
            parts = list(pipe.arrays())
            out = np.concatenate(parts) if parts else np.empty((0, len(pipe.sel)))
        pipe.report()
        return Waveform(out, src.rate, src.t0, pipe.channels, pipe.units, pipe.attrs())


@dataclass
class WaveformInfo:
    """What a waveform file holds, from :func:`info`.

    Attributes
    ----------
    path, format, subtype : str
        ``format`` is ``"WAV"``, ``"FLAC"``, ..., ``"CSV"`` or ``"HDF5"``;
        ``subtype`` the sample encoding (``"PCM_24"``, ``"float32"``, ``"text"``).
    rate : float
        Sample rate in Hz as read (after the ``rate`` option).
    n_samples, n_channels : int
    channels, units : list of str
    t0, duration : float
        Seconds; ``duration = n_samples / rate``.
    attrs : dict
    dataset : str or None
        HDF5 dataset path.
    stats : list of dict or None
        Per channel ``min``, ``max``, ``mean``, ``rms`` (with ``stats=True``).
    notes : list of str
    """

    path: str
    format: str
    subtype: str
    rate: float
    n_samples: int
    n_channels: int
    channels: list[str]
    units: list[str]
    t0: float
    duration: float
    attrs: dict[str, Any] = field(default_factory=dict)
    dataset: str | None = None
    stats: list[dict[str, float]] | None = None
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: quantities under keys that carry their unit (``rate_hz``,
        ``duration_s``, ``t0_s``); the unitless ``rate``, ``duration``, ``t0`` are
        repeated for one release (old spellings, see :mod:`simwave.vocabulary`)."""
        from simwave.signals.common import to_jsonable

        d = dict(self.__dict__)
        out = {"path": d.pop("path"), "format": d.pop("format"), "subtype": d.pop("subtype"),
               "rate_hz": self.rate, "duration_s": self.duration, "t0_s": self.t0}
        for old in ("rate", "duration", "t0"):
            d.pop(old)
        out.update(d)
        out.update(rate=self.rate, duration=self.duration, t0=self.t0)
        return to_jsonable(out)


def info(path: Any, *, stats: bool = False,
         progress: Callable[[int, int | None], None] | None = None, **opts: Any) -> WaveformInfo:
    """Describe a waveform file without loading its samples.

    Audio and HDF5 answer from their headers. CSV needs one streaming pass
    (rows are counted and checked). With ``stats=True`` every format makes one
    streaming pass and adds min, max, mean and RMS per channel.

    Parameters
    ----------
    path : str or path-like
    stats : bool
        Also compute per-channel statistics (one pass, constant memory).
    progress : callable, optional
        ``progress(samples_done, samples_total_or_None)`` during a pass over the
        samples (a pass can be long; Ctrl-C or SIGTERM stops it).
    **opts
        Reader options as for :func:`read`.

    Returns
    -------
    WaveformInfo
    """
    spec = _spec_source(path)
    if spec is not None:
        from simwave.signals.generate import _n_samples, generate_blocks

        rate, duration = _spec_rate(spec, opts)
        total = _n_samples(rate, duration)[2]
        if total < 1:
            raise WaveformError(f"{path}: the signal holds no samples (duration x rate < 0.5)")
        acc = None
        n = 0
        first = None
        # Without statistics only the first sample is made: the length is known from the text.
        size = BLOCK if stats else 1
        for b in generate_blocks(spec[0], rate, duration, size, **spec[3]):
            first = first or b
            n += b.n_samples
            if not stats:
                n = total
                break
            acc = acc or ChannelStats(b.n_channels)
            acc.add(b.data)
            if progress is not None:
                progress(n, total)
        return WaveformInfo(path, "generated", spec[0], rate, n, first.n_channels,
                            first.channels, first.units, 0.0, n / rate, first.attrs,
                            stats=acc.result() if acc else None)
    pipe = _Pipeline(path, opts)
    with closing(pipe):
        src = pipe.src
        n = src.n_samples
        acc = ChannelStats(len(pipe.sel)) if stats else None
        notes_extra: list[str] = []
        sparse = _sparse_hdf5(src, pipe)
        if sparse is not None:
            notes_extra.append(sparse)
            if acc is not None:
                _sparse_stats(src, pipe.sel, acc, progress)
                stats = False  # done from the stored chunks and the fill value
        if stats or n is None or src.time_axis is not None:
            n = 0
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", WaveformWarning)
                for arr in pipe.arrays():
                    n += arr.shape[0]
                    if acc is not None:
                        acc.add(arr)
                    if progress is not None:
                        progress(n, src.n_samples)
        notes = list(src.notes) + notes_extra
        for k, v in pipe.counts().items():
            notes.append(f"{k.replace('_', ' ')}: {v}")
        result = acc.result() if acc else None
        if result and src.family == "audio":  # levels of full-scale samples in dBFS
            for s, unit in zip(result, pipe.units, strict=True):
                if unit == "FS":
                    s["peak_dbfs"] = dbfs(max(abs(s["min"]), abs(s["max"])))
                    s["rms_dbfs"] = dbfs(s["rms"])
        return WaveformInfo(
            src.path, src.format, src.subtype, src.rate, n, len(pipe.sel), pipe.channels,
            pipe.units, src.t0, n / src.rate, pipe.attrs(), getattr(src, "dataset", None),
            result, notes,
        )


def _sparse_hdf5(src: Any, pipe: Any) -> str | None:
    """A note when an HDF5 dataset stores under 1 % of its chunks (the rest is fill value).

    Such a file can be a few kilobytes and declare 1e12 samples; statistics are then
    computed exactly from the stored chunks plus the fill value (:func:`_sparse_stats`)
    instead of reading every sample.
    """
    ds = getattr(src, "ds", None)
    if (ds is None or src.time_axis is not None or ds.chunks is None or ds.ndim != 2
            or ds.dtype.kind != "f"):
        return None
    n = int(ds.shape[0])
    stored = ds.id.get_num_chunks()
    rows = stored * ds.chunks[0]
    if n < 1 << 24 or rows * 100 >= n:
        return None
    return (f"sparse dataset: {stored} chunk(s) of {ds.chunks[0]} rows stored, the other "
            f"{n - min(rows, n)} samples are the fill value {_fill_value(ds):g}")


def _sparse_stats(src: Any, sel: Sequence[int], acc: ChannelStats,
                  progress: Callable[[int, int | None], None] | None) -> None:
    ds = src.ds
    n, rows = int(ds.shape[0]), ds.chunks[0]
    starts = sorted({ds.id.get_chunk_info(i).chunk_offset[0]
                     for i in range(ds.id.get_num_chunks())})
    covered = 0
    for r0 in starts:
        block = np.asarray(ds[r0:min(r0 + rows, n)], dtype=np.float64)[:, list(sel)]
        acc.add(block)
        covered += block.shape[0]
        if progress is not None:
            progress(covered, None)
    acc.add_constant(np.full(len(sel), _fill_value(ds)), n - covered)


def _fill_value(ds: Any) -> float:
    value = np.asarray(ds.fillvalue).ravel()
    return float(value[0]) if value.size else 0.0


# ---------------------------------------------------------------- writing ----

def _stream_spec(name: str, spec: Any) -> dict[str, Any]:
    if isinstance(spec, Waveform):
        return {"channels": list(spec.channels), "units": list(spec.units),
                "attrs": dict(spec.attrs)}
    if isinstance(spec, int):
        return {"channels": [f"ch{i}" for i in range(spec)], "units": [""] * spec, "attrs": {}}
    if isinstance(spec, Mapping):
        ch = spec.get("channels")
        if isinstance(ch, int):
            ch = [f"ch{i}" for i in range(ch)]
        if not ch:
            raise WaveformError(f"extra stream {name!r}: give its channels")
        units = spec.get("units") or [""] * len(ch)
        if len(units) != len(ch):
            raise WaveformError(f"extra stream {name!r}: {len(units)} units for {len(ch)} channels")
        return {"channels": [str(c) for c in ch], "units": [str(u) for u in units],
                "attrs": dict(spec.get("attrs") or {})}
    raise WaveformError(f"extra stream {name!r}: give a Waveform, a channel count or a dict "
                        f"with channels/units/attrs")


class WaveformWriter:
    """Streaming, atomic writer returned by :func:`open_writer`.

    Use as a context manager; call :meth:`write` with blocks of
    ``(n, n_channels)`` float64 (or Waveforms). A clean exit commits the file
    (temporary file renamed over the target); an exception deletes the
    temporary file and leaves any existing target untouched. After commit,
    :attr:`result` is a :class:`~simwave.signals.common.WriteResult`.
    """

    def __init__(self, path: Any, rate: Any, channels: Any, units: Sequence[str] | None = None,
                 attrs: Mapping[str, Any] | None = None, t0: float = 0.0,
                 format: str | None = None, *, protect: Sequence[Any] | None = None,
                 extra: Mapping[str, Any] | None = None, dataset: str | None = None,
                 mode: str = "create", subtype: str | None = None, on_clip: str = "error",
                 full_scale: Any = None, offset: Any = None, compression: str | None = None,
                 dtype: str = "float64", delimiter: str = ",", time_column: bool = True,
                 peak_hint: float | None = None,
                 normalize_level_dbfs: float | None = None) -> None:
        path = os.fspath(path)
        self.path = path
        r = _positive_rate(rate, path)
        if r is None or not math.isfinite(r):
            raise WaveformError(f"{path}: a sample rate is needed to write")
        main = _stream_spec("main", {"channels": channels, "units": units, "attrs": attrs})
        self.n_channels = len(main["channels"])
        self.family, audio_format = resolve_format(path, format)
        extra = dict(extra or {})
        self.extra = {k: _stream_spec(k, v) for k, v in extra.items()}

        def only(fam: str, **given: Any) -> None:
            for n, (v, default) in given.items():
                if v != default:
                    raise WaveformError(f"{path}: option {n} applies to {fam} files only")

        if self.family != "audio":
            only("audio", subtype=(subtype, None), on_clip=(on_clip, "error"),
                 normalize_level_dbfs=(normalize_level_dbfs, None),
                 full_scale=(full_scale, None), offset=(offset, None))
        if self.family != "hdf5":
            only("HDF5", dataset=(dataset, None), mode=(mode, "create"))
        if self.family != "csv":
            only("CSV", delimiter=(delimiter, ","), time_column=(time_column, True))
        self.target = AtomicTarget(path, protect)
        try:
            if self.family == "audio":
                from simwave.signals.audio import AudioSink

                names, unit_list = list(main["channels"]), list(main["units"])
                for k, s in self.extra.items():
                    names += [f"{k}/{c}" for c in s["channels"]]
                    unit_list += s["units"]
                self.sink = AudioSink(self.target.tmp, audio_format, r, names, unit_list, t0,
                                      main["attrs"], subtype=subtype, on_clip=on_clip,
                                      full_scale=full_scale, offset=offset, peak_hint=peak_hint,
                                      target=path, **({} if normalize_level_dbfs is None else
                                                      {"normalize_level_dbfs":
                                                       normalize_level_dbfs}))
            elif self.family == "csv":
                from simwave.signals.csvfile import CsvSink

                names, unit_list = list(main["channels"]), list(main["units"])
                for k, s in self.extra.items():
                    names += [f"{k}/{c}" for c in s["channels"]]
                    unit_list += s["units"]
                self.sink = CsvSink(self.target.tmp, r, t0, names, unit_list, main["attrs"],
                                    delimiter=delimiter, time_column=time_column, target=path)
            else:
                from simwave.signals.hdf5file import Hdf5Sink

                main_name = dataset or "/waveform"
                parent = main_name.rstrip("/").rsplit("/", 1)[0]
                streams = {main_name: main}
                for k, s in self.extra.items():
                    streams[k if k.startswith("/") else f"{parent}/{k}"] = s
                if len(streams) != 1 + len(self.extra):
                    raise WaveformError(f"{path}: an extra stream has the main dataset's path")
                self.h5_names = list(streams)
                original = path if (mode == "add" and os.path.exists(path)) else None
                self.sink = Hdf5Sink(self.target.tmp, streams, r, t0, mode=mode,
                                     original=original, compression=compression, dtype=dtype,
                                     target=path)
        except BaseException as exc:
            self.target.abort()
            if is_write_error(exc):
                raise write_failure(path, exc) from None
            raise
        self.result: WriteResult | None = None
        self._closed = False

    def _as_block(self, block: Any, n_channels: int, what: str) -> np.ndarray:
        data = block.data if isinstance(block, Waveform) else np.asarray(block, dtype=np.float64)
        if data.ndim == 1:
            data = data[:, np.newaxis]
        if data.ndim != 2 or data.shape[1] != n_channels:
            raise WaveformError(f"{self.path}: {what} block has shape {data.shape}; "
                                f"expected (n, {n_channels})")
        return data

    def write(self, block: Any, extra: Mapping[str, Any] | None = None) -> None:
        """Append samples.

        Parameters
        ----------
        block : array_like (n, n_channels) or Waveform
        extra : dict, optional
            Name -> block of the same length ``n`` for each extra stream
            declared in :func:`open_writer` (all of them, every call).
        """
        if self._closed:
            raise WaveformError(f"{self.path}: writer already closed")
        data = self._as_block(block, self.n_channels, "main")
        parts = {}
        for k, s in self.extra.items():
            if not extra or k not in extra:
                raise WaveformError(f"{self.path}: no block given for extra stream {k!r}")
            b = self._as_block(extra[k], len(s["channels"]), repr(k))
            if b.shape[0] != data.shape[0]:
                raise WaveformError(f"{self.path}: extra stream {k!r} block has {b.shape[0]} "
                                    f"rows, the main block {data.shape[0]}")
            parts[k] = b
        try:
            if self.family == "hdf5":
                blocks_ = {self.h5_names[0]: data}
                for name, b in zip(self.h5_names[1:], parts.values(), strict=False):
                    blocks_[name] = b
                self.sink.write(blocks_)
            else:
                if parts:
                    data = np.hstack([data] + list(parts.values()))
                self.sink.write(data)
        except BaseException as exc:
            self.abort()
            if is_write_error(exc):
                raise write_failure(self.path, exc) from None
            raise

    def close(self) -> WriteResult:
        """Finish the file and rename it over the target."""
        if self._closed:
            return self.result
        try:
            result = self.sink.close()
            self.target.commit()
        except BaseException as exc:
            self.abort()
            if is_write_error(exc):
                raise write_failure(self.path, exc) from None
            raise
        self._closed = True
        result.path = self.path
        if self.family != "hdf5":
            result.n_channels = self.n_channels
        self.result = result
        return result

    def read_back(self) -> tuple[Callable[[np.ndarray], np.ndarray], dict[str, Any]] | None:
        """After :meth:`close`: what :func:`read` of the file would give, where the writer
        knows it exactly without reading (``(convert, metadata)``, see
        :meth:`simwave.signals.audio.AudioSink.read_back`); None otherwise (CSV, HDF5,
        extra streams, codings that change the samples)."""
        if self.family != "audio" or self.extra or not self._closed or self.result is None:
            return None
        return self.sink.read_back()

    def abort(self) -> None:
        """Drop everything written; the target is left as it was."""
        if self._closed:
            return
        self._closed = True
        try:
            self.sink.abort()
        except Exception:  # noqa: BLE001, S110 - the failure being handled is the one to report
            pass
        finally:
            self.target.abort()

    def __enter__(self) -> "WaveformWriter":
        return self

    def __exit__(self, exc_type: Any, exc: Any, tb: Any) -> None:
        if exc_type is None:
            self.close()
        else:
            self.abort()


def open_writer(path: Any, rate: Any, channels: Any, units: Sequence[str] | None = None,
                attrs: Mapping[str, Any] | None = None, t0: float = 0.0,
                format: str | None = None, **opts: Any) -> WaveformWriter:
    """Open a streaming, atomic writer.

    Parameters
    ----------
    path : str or path-like
        Target file; format from ``format`` or the extension.
    rate : float
        Sample rate in Hz.
    channels : int or list of str
        Channel count or names of the main waveform.
    units : list of str, optional
    attrs : dict, optional
        Attributes (provenance): HDF5 ``attrs_json``, CSV ``# simwave:`` line,
        audio comment chunk (dropped when over ~2 kB).
    t0 : float
        Time of the first sample in seconds.
    format : str, optional
        ``"csv"``, ``"hdf5"``, ``"wav"``, ``"flac"``, ``"rf64"``, ...
    **opts
        protect : list of paths
            Inputs: a target that is the same file is refused.
        extra : dict
            Name -> Waveform / channel count / ``{"channels", "units", "attrs"}``:
            further streams written beside the main one, one block per
            :meth:`WaveformWriter.write` call, same length. HDF5: one dataset
            each, at ``name`` (absolute) or next to the main dataset (relative).
            CSV and audio: extra columns/channels named ``name/channel``.
        dataset : str (HDF5)
            Main dataset path, default ``/waveform``.
        mode : {"create", "add"} (HDF5)
            "add" keeps the datasets of an existing target: the file is copied
            beside itself, the new datasets are added to the copy, the copy
            replaces the original (atomic, at the cost of one file copy).
        compression : {None, "gzip", "lzf"}, dtype : {"float64", "float32"} (HDF5)
            No compression by default: sampled float data hardly compresses and
            gzip made runs write-bound (see ``benchmarks/bench_writers.py``).
        subtype : str (audio)
            ``"FLOAT"`` (default where possible), ``"DOUBLE"``, ``"PCM_16"``,
            ``"PCM_24"``, ``"PCM_32"``, ``"PCM_U8"``, ``"ULAW"``, ``"ALAW"``, ...
        on_clip : {"error", "clip", "normalize"} (audio)
            For integer-coded subtypes when |sample| > 1 after scaling; ``normalize``
            scales a record whose peak is beyond full scale (float subtypes too) to
            ``normalize_level_dbfs`` (default -1 dBFS) and reports the gain.
        full_scale, offset : float or list (audio)
            ``sample = (value - offset) / full_scale``; stored so read() scales back.
        delimiter : str, time_column : bool (CSV)

    Returns
    -------
    WaveformWriter

    Examples
    --------
    >>> import simwave, numpy as np, tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "y.h5")
    >>> with simwave.open_writer(p, 1000.0, ["v"], ["V"]) as w:
    ...     w.write(np.ones((10, 1)))
    >>> simwave.info(p).n_samples
    10
    """
    return WaveformWriter(path, rate, channels, units, attrs, t0, format, **opts)


def write(path: Any, waveform: Waveform, **opts: Any) -> WriteResult:
    """Write a whole waveform atomically.

    Parameters
    ----------
    path : str or path-like
    waveform : Waveform
    **opts
        As for :func:`open_writer`, except ``extra`` maps names to Waveforms
        of the same length (written beside the main one).

    Returns
    -------
    WriteResult
        Samples written, peak (and peak in dBFS for audio), clipped count, gain.
    """
    if not isinstance(waveform, Waveform):
        raise WaveformError("write() needs a Waveform")
    extra = dict(opts.pop("extra", None) or {})
    for k, w in extra.items():
        if not isinstance(w, Waveform) or w.n_samples != waveform.n_samples:
            raise WaveformError(f"{path}: extra stream {k!r} must be a Waveform of "
                                f"{waveform.n_samples} samples")
    if opts.get("on_clip") == "normalize":
        fs = opts.get("full_scale")
        off = opts.get("offset")
        from simwave.signals.common import per_channel

        n = waveform.n_channels
        scaled = (waveform.data - per_channel(0.0 if off is None else off, n, "offset", path)) \
            / per_channel(1.0 if fs is None else fs, n, "full_scale", path)
        peaks = [float(np.max(np.abs(scaled)))] if scaled.size else [0.0]
        for w in extra.values():
            if w.data.size:
                peaks.append(float(np.max(np.abs(w.data))))
        opts["peak_hint"] = max(peaks)
    with open_writer(path, waveform.rate, waveform.channels, waveform.units, waveform.attrs,
                     waveform.t0, extra={k: w for k, w in extra.items()}, **opts) as out:
        for i in range(0, max(waveform.n_samples, 1), BLOCK):
            out.write(waveform.data[i:i + BLOCK],
                      extra={k: w.data[i:i + BLOCK] for k, w in extra.items()} or None)
    return out.result


__all__ = ["read", "write", "blocks", "info", "open_writer", "WaveformInfo", "WaveformWriter",
           "WriteResult", "WaveformWarning", "dbfs"]
