"""Block sources for measurement: a Waveform in memory or a file read in blocks.

A measurement makes several passes over the record (range, histogram, transitions,
regions). Each pass asks :class:`MeasureSource` for aligned blocks of the measured
channels and the reference channels. A file of at most ``IN_MEMORY_VALUES`` values
(samples x channels) is read once, when the source is opened, and every pass is given
the blocks read then; a longer file is read again in blocks through :func:`simwave.blocks`
by every pass, so nothing but one block per stream is held. Either way the passes see the
same blocks.
"""

from __future__ import annotations

import itertools
import os
from dataclasses import dataclass
from typing import Any, Iterator

import numpy as np

from simwave.errors import MeasurementError
from simwave.measure.joining import array_root, c_rows, joined_rows
from simwave.signals.waveform import Waveform

PathLike = (str, os.PathLike)

#: A file holding at most this many values (samples x channels, 64 MB as float64: 2.9
#: minutes of one 48 kHz channel) is read into memory once, as the blocks every pass would
#: read, instead of once per pass (our choice: its 5 to 7 passes would each decode the
#: whole file again, while a measurement holds some 70 MB besides, so a record this size
#: stays near 140 MB, under the 200 MB a 10-minute record may take; a longer one must
#: stream to keep memory bounded). The blocks read to find out are the first pass's.
IN_MEMORY_VALUES = 1 << 23


def _read_module():
    import simwave

    return simwave


def _file_blocks(path: Any, size: int, read_options: dict) -> Iterator[Waveform]:
    sw = _read_module()
    blocks = getattr(sw, "blocks", None)
    if blocks is not None:
        yield from blocks(path, size, **read_options)
        return
    read = getattr(sw, "read", None)
    if read is None:
        raise MeasurementError(
            f"{path}: reading waveform files needs simwave.read or simwave.blocks, "
            "which this installation does not have"
        )
    yield read(path, **read_options)


@dataclass
class StreamInfo:
    """What the first block of a stream says about it."""

    label: str  # for messages: a file name or "output waveform"
    rate: float
    t0: float
    channels: list[str]
    units: list[str]
    path: str | None


class _Stream:
    """One stream of 2-D sample blocks: a Waveform sliced, or a file read in blocks."""

    def __init__(
        self,
        obj: Any,
        label: str,
        block_size: int,
        read_options: dict,
        columns: list[int] | None = None,
    ) -> None:
        self.obj = obj
        self.block_size = block_size
        self.read_options = read_options
        self.columns = columns
        self.memory: list[np.ndarray] | None = None  # a short file's blocks, read once
        # a long file: the blocks read while finding out, and the open reader after them
        # (the first pass continues from there instead of reading them again)
        self._pending: tuple[list, Iterator[Waveform]] | None = None
        if isinstance(obj, Waveform):
            first = obj
            path = None
        elif isinstance(obj, PathLike):
            path = os.fspath(obj)
            label = path
            pieces = _file_blocks(path, block_size, read_options)
            first = next(pieces, None)
            if first is None:
                raise MeasurementError(f"{path}: the file holds no samples")
            long_ = np.shape(first.data)[0] >= block_size  # a file of one block is short
            if long_ and _frames(path) > IN_MEMORY_VALUES:
                # too long to hold, known without reading on: the first pass continues
                self._pending = ([_as_2d(first)], pieces)
            else:
                self.memory, self._pending = _read_if_short(first, pieces)
        else:
            raise MeasurementError(
                f"{label} must be a Waveform or a file path, got {type(obj).__name__}"
            )
        self.info = StreamInfo(
            label, first.rate, first.t0, list(first.channels), list(first.units), path
        )
        data = np.asarray(first.data, dtype=np.float64)
        data = data.reshape(data.shape[0], -1) if data.size else np.zeros((1, len(first.channels)))
        self.first_row = data[0]
        self.first_rows = data[:8].copy()
        self.rest_sample = False  # yield one sample of 0 before the record (at-rest convention)

    def select(self, columns: list[int]) -> "_Stream":
        s = _Stream.__new__(_Stream)
        s.__dict__.update(self.__dict__)
        s._pending = None  # two selections cannot share one open reader
        s.columns = columns
        s.first_row = self.first_row[columns]
        s.first_rows = self.first_rows[:, columns]
        s.info = StreamInfo(
            self.info.label,
            self.info.rate,
            self.info.t0,
            [self.info.channels[i] for i in columns],
            [self.info.units[i] for i in columns],
            self.info.path,
        )
        return s

    def head(self) -> np.ndarray | None:
        """The first block's samples (at most ``block_size`` rows) without consuming the
        stream; None when they are not at hand."""
        if self.memory is not None:
            data = self.memory[0] if isinstance(self.memory, list) else self.memory
        else:
            data = getattr(self.obj, "data", None)
        if data is None and self._pending is not None:
            data = self._pending[0][0]
        if data is None:
            return None
        blk = np.asarray(data[: self.block_size], dtype=np.float64)
        blk = blk[:, None] if blk.ndim == 1 else blk
        return blk if self.columns is None else blk[:, self.columns]

    def lasting_arrays(self) -> list[np.ndarray]:
        """The arrays this stream's blocks are views of and that outlive a pass (a
        Waveform's data, a short file's blocks), when its blocks are such views (no channel
        selection, which copies); else none."""
        if self.columns is not None:
            return []
        if self.memory is not None:
            return [array_root(b) for b in self.memory]
        data = getattr(self.obj, "data", None)
        return [array_root(data)] if isinstance(data, np.ndarray) else []

    def arrays(self) -> Iterator[np.ndarray]:
        if self.rest_sample:
            yield np.zeros((1, len(self.info.channels)))
        if self.memory is not None:
            for blk in self.memory:
                yield blk if self.columns is None else blk[:, self.columns]
            return
        data = getattr(self.obj, "data", None)
        if data is not None:
            for a in range(0, data.shape[0], self.block_size):
                blk = data[a : a + self.block_size]
                yield blk if self.columns is None else blk[:, self.columns]
            return
        if self._pending is not None:
            read, rest = self._pending
            self._pending = None
            pieces: Iterator = itertools.chain(read, (_as_2d(p) for p in rest))
        else:
            pieces = (_as_2d(p) for p in _file_blocks(self.obj, self.block_size, self.read_options))
        for blk in pieces:
            yield blk if self.columns is None else blk[:, self.columns]


def _frames(path: str) -> int:
    """Samples per channel of an audio file as its header gives them (cheap), or 0 when it
    is no file soundfile knows (CSV, HDF5: their length is known only by reading them)."""
    try:
        import soundfile

        return int(soundfile.info(path).frames)
    except Exception:  # not an audio file, or none soundfile reads: decide by reading
        return 0


def _as_2d(piece: Waveform) -> np.ndarray:
    blk = np.asarray(piece.data, dtype=np.float64)
    return blk[:, None] if blk.ndim == 1 else blk


def _read_if_short(
    first: Waveform, rest: Iterator[Waveform]
) -> tuple[list[np.ndarray] | None, tuple[list, Iterator[Waveform]] | None]:
    """``(blocks, None)``: the whole file as the ``(n, n_channels)`` float64 blocks a pass
    reads (kept as they are: no joined copy, whose making would hold the file twice) when it
    holds at most ``IN_MEMORY_VALUES`` values; else ``(None, (blocks read, open reader))``
    for the first pass to continue from."""
    parts = [_as_2d(first)]
    total = parts[0].size
    for piece in rest:
        parts.append(_as_2d(piece))
        total += parts[-1].size
        if total > IN_MEMORY_VALUES:
            return None, (parts, rest)
    return parts, None


def _take(parts: list[np.ndarray], m: int) -> tuple[np.ndarray, list[np.ndarray]]:
    """The first ``m`` rows of the pieces joined (as the first ``m`` rows of their
    concatenation: the same values and memory order) and the pieces left after them.
    Where the first piece holds them and every piece is in plain C order (so a
    concatenation would be too), no copy: its own first rows."""
    p0 = parts[0]
    if len(parts) > 1 and p0.shape[0] >= m and all(c_rows(p) for p in parts):
        rest = ([p0[m:]] if p0.shape[0] > m else []) + parts[1:]
        return p0[:m], rest
    joined = joined_rows(parts)
    return joined[:m], _rest(parts, joined, m)


def _rest(parts: list[np.ndarray], joined: np.ndarray, m: int) -> list[np.ndarray]:
    """What is left of the pieces after their first ``m`` rows (``joined``: their
    :func:`joined_rows` array): the pieces' own rows where a copy joined them and they are
    C-ordered (a copy's rows would hold the same values in the same order, and the pieces
    may join a later piece without copying), else the rows of ``joined``."""
    if joined.shape[0] <= m:
        return []
    if len(parts) > 1 and joined.base is None and joined.flags.c_contiguous:  # a C copy
        rem, skip = [], m
        for p in parts:
            if skip >= p.shape[0]:
                skip -= p.shape[0]
                continue
            rem.append(p[skip:])
            skip = 0
        if all(p.flags.c_contiguous for p in rem):
            return rem
    return [joined[m:]]


def _aligned(
    a: Iterator[np.ndarray], b: Iterator[np.ndarray] | None
) -> Iterator[tuple[np.ndarray, np.ndarray | None]]:
    """Re-chunk two block streams so that their blocks cover the same samples."""
    if b is None:
        for blk in a:
            yield blk, None
        return
    buf_a: list[np.ndarray] = []
    buf_b: list[np.ndarray] = []
    na = nb = 0
    it_a, it_b = iter(a), iter(b)
    done_a = done_b = False
    while True:
        while not done_a and na <= nb:
            nxt = next(it_a, None)
            if nxt is None:
                done_a = True
            else:
                buf_a.append(nxt)
                na += nxt.shape[0]
        while not done_b and nb <= na:
            nxt = next(it_b, None)
            if nxt is None:
                done_b = True
            else:
                buf_b.append(nxt)
                nb += nxt.shape[0]
        m = min(na, nb)
        if m == 0:
            return
        (ha, buf_a), (hb, buf_b) = _take(buf_a, m), _take(buf_b, m)
        yield ha, hb
        na, nb = na - m, nb - m


class MeasureSource:
    """The measured channels and (optionally) the reference channels, block by block.

    Parameters
    ----------
    waveform : Waveform or path
        The record to measure.
    reference : Waveform or path, optional
        The input that produced it (same rate and length).
    reference_channel : str or int, optional
        Take the reference from this channel of ``waveform`` instead (the other
        channels are measured).
    block_size : int
        Samples per block.
    read_options : dict
        Passed to :func:`simwave.blocks` / :func:`simwave.read` for file inputs.
    reference_read_options : dict, optional
        The same for a reference file (default: ``read_options``).
    """

    def __init__(
        self,
        waveform: Any,
        reference: Any,
        reference_channel: Any,
        block_size: int,
        read_options: dict,
        reference_read_options: dict | None = None,
    ) -> None:
        out = _Stream(waveform, "output waveform", block_size, read_options)
        ref: _Stream | None = None
        if reference_channel is not None:
            if reference is not None:
                raise MeasurementError(
                    "give either a reference waveform or a reference channel, not both"
                )
            names = out.info.channels
            idx = _channel_index(names, reference_channel, out.info.label)
            rest = [i for i in range(len(names)) if i != idx]
            if not rest:
                raise MeasurementError(
                    f"{out.info.label}: reference channel {names[idx]!r} is the only channel; "
                    "nothing is left to measure"
                )
            ref = out.select([idx])
            out = out.select(rest)
        elif reference is not None:
            ref_opts = read_options if reference_read_options is None else reference_read_options
            _refuse_self_reference(waveform, reference, read_options, ref_opts)
            ref = _Stream(reference, "reference waveform", block_size, ref_opts)
            if ref.info.rate != out.info.rate:
                raise MeasurementError(
                    f"{ref.info.label}: sample rate {ref.info.rate:g} Hz differs from the "
                    f"output's {out.info.rate:g} Hz ({out.info.label}); measure signals at one rate"
                )
        self.out, self.ref = out, ref
        self.rate = out.info.rate
        self.t0 = out.info.t0
        self.rest_sample = False

    def prepend_rest_sample(self) -> bool:
        """At-rest convention: the system was at rest, its input and output 0, before the
        record, so a reference whose first sample is not 0 steps there at the first sample.
        One sample of 0 is put before both streams (at t0 - 1/rate), so that step is found
        like any other. Returns whether it was (only with a reference that does not start
        at 0)."""
        if self.ref is None or not np.any(self.ref.first_row != 0):
            return False
        y = self.out.first_rows
        steady = np.all(np.ptp(y, axis=0) <= 1e-9 * np.abs(y[0]))
        if y.shape[0] >= 8 and np.all(y[0] != 0) and steady:
            # the output holds a level other than 0 from its first samples: the record did
            # not start from rest, whatever the input does
            return False
        self.out.rest_sample = self.ref.rest_sample = self.rest_sample = True
        self.t0 = self.out.info.t0 - 1.0 / self.rate
        return True

    def prepend_output_rest_sample(self, leaves_rest: Any) -> bool:
        """At-rest convention without a reference: an output that leaves the at-rest level
        from its first sample (``leaves_rest(first block)``, see
        :func:`simwave.measure.stages.output_aligned.leaves_rest`) answers a step at the
        first sample; one sample of 0 is put before it, as :meth:`prepend_rest_sample`
        does with a reference. Returns whether it was."""
        if self.ref is not None:
            return False
        head = self.out.head()
        if head is None or not leaves_rest(head):
            return False
        self.out.rest_sample = self.rest_sample = True
        self.t0 = self.out.info.t0 - 1.0 / self.rate
        return True

    def lasting_output_arrays(self) -> list[np.ndarray]:
        """See :meth:`_Stream.lasting_arrays`, for the measured stream."""
        return self.out.lasting_arrays()

    def blocks(self) -> Iterator[tuple[int, np.ndarray, np.ndarray | None]]:
        """Yield ``(start_index, output_block, reference_block_or_None)``; blocks are
        ``(n, n_channels)`` float64 and cover the same samples in both streams."""
        start = 0
        ref_arrays = self.ref.arrays() if self.ref is not None else None
        for a, b in _aligned(self.out.arrays(), ref_arrays):
            yield start, a, b
            start += a.shape[0]


def _same_file(a: Any, b: Any) -> bool:
    if not (isinstance(a, PathLike) and isinstance(b, PathLike)):
        return a is b
    try:
        return os.path.samefile(os.fspath(a), os.fspath(b))
    except OSError:
        return os.path.realpath(os.fspath(a)) == os.path.realpath(os.fspath(b))


def _refuse_self_reference(waveform: Any, reference: Any, out_opts: dict, ref_opts: dict) -> None:
    """A reference that is the measured record itself (the same file read the same way, or
    the same Waveform) would measure the output against itself: delays of zero, gains of
    one. Refused, with how to pick the input inside the same file."""
    if not _same_file(waveform, reference):
        return
    keys = ("dataset", "channels")
    if any((out_opts or {}).get(k) != (ref_opts or {}).get(k) for k in keys):
        return
    what = os.fspath(waveform) if isinstance(waveform, PathLike) else "the output waveform"
    raise MeasurementError(
        f"{what}: the reference is the measured record itself (same file, same dataset and "
        "channels), which would measure the output against itself; pick the input inside the "
        "file (a reference dataset such as /input, written by run --with-input, or a "
        "reference channel)"
    )


def _channel_index(names: list[str], channel: Any, label: str) -> int:
    if isinstance(channel, (int, np.integer)) and not isinstance(channel, bool):
        i = int(channel)
        if not -len(names) <= i < len(names):
            raise MeasurementError(
                f"{label}: channel index {i} out of range ({len(names)} channel(s))"
            )
        return i % len(names)
    name = str(channel)
    if name in names:
        return names.index(name)
    if name.lstrip("-").isdigit():
        return _channel_index(names, int(name), label)
    raise MeasurementError(
        f"{label}: no channel named {name!r}; the channels are {', '.join(names)}"
    )
