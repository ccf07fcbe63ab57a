"""HDF5 through h5py: streaming reader and writer.

Layout read and written: a 1-D dataset (one channel) or a 2-D dataset with
rows = samples and columns = channels.

Attributes read (on the dataset first, then on its parent group), names
matched without regard to case:

* rate in Hz: ``rate``, ``sample_rate``, ``sampling_rate``, ``samplerate``,
  ``sample_rate_hz``, ``sampling_frequency``, ``fs``;
* or the interval in seconds: ``dt``, ``sample_interval``,
  ``sampling_interval``, ``time_step``, ``interval``, ``sample_period``,
  ``sampling_period``;
* start time in seconds: ``t0``, ``start_time``, ``time_offset``;
* channel names: ``channels``, ``channel_names``, ``names``;
* units: ``units``, ``unit`` (one string or one per channel);
* ``attrs_json``: a JSON object merged into the waveform attributes
  (simwave writes the attributes there); other attributes are kept as they are.

Without a rate attribute, a sibling 1-D dataset named ``time``, ``t`` or
``time_s`` of the same length gives the rate (and t0), checked for uniform
sampling like a CSV time column.

Attributes written: ``rate``, ``t0``, ``channels``, ``units``, ``attrs_json``,
``simwave_version``.
"""

from __future__ import annotations

import json
import os
import math
import shutil
from typing import Any, Iterator

import h5py
import numpy as np

from simwave import __version__
from simwave.errors import WaveformError
from simwave.signals.atomic import GuardedFile
from simwave.signals.common import (INTERVAL_ATTRS, RATE_ATTRS, T0_ATTRS, WriteResult, dumps,
                                    snap_rate, to_jsonable)
from simwave.signals.stream import JITTER_TOLERANCE, Rows, TimeAxis, sample_places

CHANNEL_ATTRS = ("channels", "channel_names", "names")
UNIT_ATTRS = ("units", "unit")
TIME_DATASETS = ("time", "t", "time_s")
_RESERVED = set(RATE_ATTRS + INTERVAL_ATTRS + T0_ATTRS + CHANNEL_ATTRS + UNIT_ATTRS
                + ("attrs_json", "simwave_version"))
READ_ROWS = 1 << 16


def _plain(value: Any) -> Any:
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray):
        return [_plain(v) for v in value.tolist()] if value.dtype.kind in "OSU" else value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    return value


def _attr_number(value: Any, what: str, unit: str, where: str) -> float:
    """One finite number > 0 from an attribute (text holding a number is accepted)."""
    shown = repr(value) if not isinstance(value, str) else f"text {value!r}"
    if isinstance(value, list):
        if len(value) != 1:
            raise WaveformError(f"{where}: the {what} attribute holds {len(value)} values; "
                                f"one number in {unit} is expected")
        value = value[0]
    if isinstance(value, (bool, np.bool_)):
        raise WaveformError(f"{where}: the {what} attribute is a true/false value ({value}); "
                            f"a number in {unit} is expected")
    if isinstance(value, (complex, np.complexfloating)):
        raise WaveformError(f"{where}: the {what} attribute is complex ({value}); a real "
                            f"number in {unit} is expected")
    try:
        number = float(value.strip()) if isinstance(value, str) else float(value)
    except (TypeError, ValueError):
        raise WaveformError(f"{where}: the {what} attribute is {shown}; a number in {unit} "
                            f"is expected") from None
    if not (math.isfinite(number) and number > 0):
        raise WaveformError(f"{where}: the {what} attribute is {number:g} {unit}; it must be "
                            f"finite and > 0")
    return number


def _find_attr(groups: list[Any], names: tuple[str, ...]) -> Any:
    for obj in groups:
        lower = {k.lower(): k for k in obj.attrs.keys()}
        for n in names:
            if n in lower:
                return _plain(obj.attrs[lower[n]])
    return None


def _is_numeric(ds: h5py.Dataset) -> bool:
    return ds.dtype.kind in "iuf" or ds.dtype.kind == "b"


def _datasets(group: h5py.Group) -> list[str]:
    found: list[str] = []
    group.visititems(lambda name, obj: found.append(obj.name)
                     if isinstance(obj, h5py.Dataset) else None)
    return found


def _list(names: list[str], limit: int = 12) -> str:
    if not names:
        return "(none)"
    shown = ", ".join(names[:limit])
    return shown + (f", ... ({len(names)} in all)" if len(names) > limit else "")


class Hdf5Source:
    """Streaming reader of one dataset of an HDF5 file.

    Parameters
    ----------
    path : str
    dataset : str, optional
        Path of the dataset inside the file; default: the only 1-D/2-D numeric
        dataset (not counting time datasets).
    rate : float, optional
        Rate in Hz where the file has none (overrides the file's otherwise).
    resample : bool
        With a sibling time dataset: resample irregular rows onto a uniform grid.
    """

    family = "hdf5"

    def __init__(self, path: str, *, dataset: str | None = None, rate: float | None = None,
                 resample: bool = False) -> None:
        self.path = path
        try:
            self.f = h5py.File(path, "r")
        except OSError as exc:
            raise WaveformError(f"{path}: not a readable HDF5 file ({exc})") from None
        try:
            self._open(dataset, rate, resample)
        except BaseException:
            self.f.close()
            raise

    def _open(self, dataset: str | None, rate: float | None, resample: bool) -> None:
        path = self.path
        ds = self._choose(dataset)
        self.dataset = ds.name
        where = f"{path}, dataset {ds.name}"
        self.where = where
        if ds.external:
            ds = self._external(ds, where)
        if not _is_numeric(ds):
            raise WaveformError(
                f"{where}: not numeric (type {ds.dtype}); a signal must hold numbers")
        if ds.ndim not in (1, 2):
            raise WaveformError(
                f"{where}: {ds.ndim}-D (shape {ds.shape}); a signal must be 1-D or 2-D "
                f"(rows = samples, columns = channels)"
            )
        if ds.shape[0] == 0 or (ds.ndim == 2 and ds.shape[1] == 0):
            raise WaveformError(f"{where}: empty dataset (shape {ds.shape})")
        self.ds = ds
        self.format, self.subtype = "HDF5", str(ds.dtype)
        self.n_samples = int(ds.shape[0])
        nch = 1 if ds.ndim == 1 else int(ds.shape[1])
        groups = [ds, ds.parent]
        self.attrs: dict[str, Any] = {}
        for k, v in ds.attrs.items():
            if k.lower() not in _RESERVED:
                self.attrs[k] = _plain(v)
        raw = _find_attr([ds], ("attrs_json",))
        if raw:
            try:
                extra = json.loads(raw)
                if isinstance(extra, dict):
                    self.attrs.update(extra)
            except ValueError:
                self.attrs["attrs_json"] = raw
        names = _find_attr(groups, CHANNEL_ATTRS)
        if isinstance(names, str):
            names = [names]
        self.channels = [str(n) for n in names] if names and len(names) == nch else \
            [f"ch{i}" for i in range(nch)]
        units = _find_attr(groups, UNIT_ATTRS)
        if isinstance(units, str):
            units = [units] * nch
        self.units = [str(u) for u in units] if units and len(units) == nch else [""] * nch
        t0 = _find_attr(groups, T0_ATTRS)
        self.t0 = float(t0) if t0 is not None else 0.0
        self.time_axis = None
        self.time_ds = None
        self.notes: list[str] = []
        file_rate = _find_attr(groups, RATE_ATTRS)
        if file_rate is not None:
            file_rate = _attr_number(file_rate, "rate", "Hz", where)
        else:
            interval = _find_attr(groups, INTERVAL_ATTRS)
            if interval is not None:
                file_rate = 1.0 / _attr_number(interval, "sample interval", "s", where)
        if file_rate is None:
            file_rate = self._time_dataset(ds, rate is None or resample)
        self.file_rate = file_rate
        if rate is not None:
            self.rate = float(rate)
            if file_rate is not None and abs(file_rate - self.rate) > JITTER_TOLERANCE * self.rate:
                self.notes.append(f"rate {self.rate:g} Hz given; the file says {file_rate:.10g} Hz")
        elif file_rate is not None:
            self.rate = file_rate
        else:
            raise WaveformError(
                f"{where}: no sample rate (attributes looked for: {', '.join(RATE_ATTRS)}, or an "
                f"interval: {', '.join(INTERVAL_ATTRS)}; or a sibling 'time' dataset); "
                f"give --rate HZ (rate= in Python)"
            )
        if self.time_ds is not None:
            self.time_axis = TimeAxis(where, 1.0 / self.rate, self.t0, resample=resample,
                                      check=rate is None or resample)

    def _external(self, ds: Any, where: str) -> Any:
        """Check that the external raw files of a dataset exist beside this file.

        simwave sets ``HDF5_EXTFILE_PREFIX=${ORIGIN}`` (unless set) before h5py starts,
        so HDF5 looks for them in the file's own folder (see ``simwave/__init__.py``).
        """
        folder = os.path.dirname(os.path.abspath(self.path))
        for name, _offset, _size in ds.external:
            text = name.decode() if isinstance(name, bytes) else str(name)
            full = text if os.path.isabs(text) else os.path.join(folder, text)
            if not os.path.isfile(full):
                raise WaveformError(f"{where}: its samples are stored in the external file "
                                    f"{text!r}, not found at {full}")
        return ds

    def _choose(self, dataset: str | None) -> h5py.Dataset:
        f = self.f
        if dataset:
            if dataset in f:
                obj = f[dataset]
                if isinstance(obj, h5py.Dataset):
                    return obj
                raise WaveformError(
                    f"{self.path}: {dataset} is a group; datasets there: {_list(_datasets(obj))}"
                )
            parent = dataset.rstrip("/").rsplit("/", 1)[0] or "/"
            while parent not in f and parent not in ("", "/"):
                parent = parent.rsplit("/", 1)[0] or "/"
            there = _datasets(f[parent]) if parent in f else _datasets(f)
            raise WaveformError(
                f"{self.path}: no dataset {dataset}; datasets in {parent}: {_list(there)}"
            )
        every = _datasets(f)
        candidates = [n for n in every
                      if _is_numeric(f[n]) and f[n].ndim in (1, 2) and f[n].shape[0] > 0]
        signal_like = [n for n in candidates
                       if n.rsplit("/", 1)[-1].lower() not in TIME_DATASETS]
        if len(signal_like) == 1:
            return f[signal_like[0]]
        if len(signal_like) > 1:
            raise WaveformError(
                f"{self.path}: {len(signal_like)} datasets could be the signal "
                f"({_list(signal_like)}); choose one with dataset= / --dataset PATH"
            )
        if len(candidates) == 1:
            return f[candidates[0]]
        raise WaveformError(
            f"{self.path}: no 1-D or 2-D numeric dataset to read (datasets: {_list(every)})"
        )

    def _time_dataset(self, ds: h5py.Dataset, derive: bool) -> float | None:
        parent = ds.parent
        for name in TIME_DATASETS:
            if name in parent and isinstance(parent[name], h5py.Dataset):
                tds = parent[name]
                if tds.name == ds.name or tds.ndim != 1 or tds.shape[0] != ds.shape[0]:
                    continue
                if not _is_numeric(tds):
                    continue
                unit = _find_attr([tds], UNIT_ATTRS)
                from simwave.signals.csvfile import TIME_UNITS

                self.time_scale = TIME_UNITS.get(str(unit or ""), 1.0)
                self.time_ds = tds
                head = np.asarray(tds[:READ_ROWS], dtype=np.float64) * self.time_scale
                self.t0 = float(head[0])
                if head.size < 2 or not derive:
                    return None
                d = np.diff(head)
                pos = d[d > 0]
                if not pos.size:
                    return None
                med = float(np.median(pos))
                good = np.abs(d - med) <= JITTER_TOLERANCE * med + 4 * np.spacing(np.abs(head[1:]))
                dt = float(np.mean(d[good])) if good.any() else med
                return snap_rate(1.0 / dt)
        return None

    def rows(self, select: list[int]) -> Iterator[Rows]:
        ds = self.ds
        step = READ_ROWS
        if ds.chunks:
            step = max(ds.chunks[0], READ_ROWS // ds.chunks[0] * ds.chunks[0])
        for i in range(0, self.n_samples, step):
            try:
                block = np.asarray(ds[i:i + step], dtype=np.float64)
            except OSError as exc:
                raise WaveformError(f"{self.where}, sample {i}: cannot read the samples "
                                    f"({str(exc).splitlines()[0]})") from None
            if block.ndim == 1:
                block = block[:, np.newaxis]
            t = None
            if self.time_ds is not None:
                t = np.asarray(self.time_ds[i:i + step], dtype=np.float64) * self.time_scale
            yield Rows(block[:, select], t, sample_places(i, self.rate, self.t0))

    def close(self) -> None:
        self.f.close()


def _string_array(values: list[str]) -> np.ndarray:
    return np.array(values, dtype=h5py.string_dtype("utf-8"))


class Hdf5Sink:
    """Writes one or more resizable, chunked datasets (compressed on request) into one file.

    Parameters
    ----------
    tmp : str
        File to write (the atomic target's temporary file).
    streams : dict
        Dataset path -> dict(channels=..., units=..., attrs=...). The first is the main one.
    rate, t0 : float
    mode : {"create", "add"}
        "create" writes a new file. "add" copies ``original`` (the existing
        target) to ``tmp`` first and adds the datasets to the copy.
    compression : {None, "gzip", "lzf"}
        Filter of the datasets: none by default. Sampled float64 data is nearly
        incompressible (noise in the low mantissa bits), so gzip (level 4 with
        byte shuffle) made a run write-bound: 22 s of writing for a 21 s run
        against 5.6 s uncompressed; lzf is cheaper and saves less.
        ``benchmarks/bench_writers.py`` prints each choice's time and file size.
    dtype : str
        Sample type stored: "float64" (default, exact) or "float32".
    """

    def __init__(self, tmp: str, streams: dict[str, dict[str, Any]], rate: float, t0: float, *,
                 mode: str = "create", original: str | None = None,
                 compression: str | None = None, dtype: str = "float64",
                 target: str | None = None) -> None:
        self.where = target or tmp
        if mode not in ("create", "add"):
            raise WaveformError(f"mode must be 'create' or 'add', got {mode!r}")
        if compression not in ("gzip", "lzf", None, "none"):
            raise WaveformError(f"compression must be 'gzip', 'lzf' or None, got {compression!r}")
        if compression == "none":
            compression = None
        if dtype not in ("float64", "float32"):
            raise WaveformError(f"dtype must be 'float64' or 'float32', got {dtype!r}")
        # Through a GuardedFile: a failed write (disk full, file size limit) is recorded and
        # the rest discarded, so HDF5 still closes cleanly (closing after a failed write
        # under the default driver retries it and crashes the process at exit).
        if mode == "add" and original is not None:
            shutil.copyfile(original, tmp)
            self.file = GuardedFile(tmp, "r+b")
            try:
                self.f = h5py.File(self.file, "r+")
            except OSError as exc:
                self.file.close()
                raise WaveformError(f"{self.where}: cannot add to it: not an HDF5 file ({exc})") \
                    from None
        else:
            self.file = GuardedFile(tmp, "w+b")
            self.f = h5py.File(self.file, "w")
        self.datasets: dict[str, h5py.Dataset] = {}
        self.buffers: dict[str, list[np.ndarray]] = {}
        self.main = next(iter(streams))
        self.rate, self.t0 = float(rate), float(t0)
        # float32 datasets: a value beyond the binary32 range would be stored as infinite
        self.limit = float(np.finfo(np.float32).max) if dtype == "float32" else math.inf
        self.count = 0
        self.peak = 0.0
        try:
            for name, spec in streams.items():
                self._create(name, spec, rate, t0, compression, dtype)
        except BaseException:
            self.abort()
            raise
        self._check_io()

    def _check_io(self) -> None:
        """Raise the first write failure under the file (it discards what follows)."""
        if self.file.failure is not None:
            raise self.file.failure

    def _create(self, name: str, spec: dict[str, Any], rate: float, t0: float,
                compression: str | None, dtype: str) -> None:
        if name in self.f:
            raise WaveformError(f"{self.where}: {name} already exists in the file")
        nch = len(spec["channels"])
        rows = max(1024, (1 << 17) // nch)  # ~1 MB float64 chunks
        opts: dict[str, Any] = {}
        if compression == "gzip":
            opts = dict(compression="gzip", compression_opts=4, shuffle=True)
        elif compression == "lzf":
            opts = dict(compression="lzf", shuffle=True)
        ds = self.f.create_dataset(name, shape=(0, nch), maxshape=(None, nch), dtype=dtype,
                                   chunks=(rows, nch), **opts)
        ds.attrs["rate"] = float(rate)
        ds.attrs["t0"] = float(t0)
        ds.attrs["channels"] = _string_array(list(spec["channels"]))
        ds.attrs["units"] = _string_array(list(spec["units"]))
        ds.attrs["attrs_json"] = dumps(to_jsonable(spec.get("attrs") or {}))
        ds.attrs["simwave_version"] = __version__
        self.datasets[name] = ds
        self.buffers[name] = []

    def write(self, blocks: dict[str, np.ndarray]) -> None:
        for name, block in blocks.items():
            if block.shape[0] == 0:
                continue
            if name == self.main:
                if math.isfinite(self.limit):
                    self._check_range(block)
                self.count += block.shape[0]
                self.peak = max(self.peak, float(np.nanmax(np.abs(block))))
            buf = self.buffers[name]
            buf.append(np.array(block, dtype=np.float64))
            ds = self.datasets[name]
            if sum(b.shape[0] for b in buf) >= ds.chunks[0]:
                self._flush(name)

    def _check_range(self, block: np.ndarray) -> None:
        over = np.abs(block) > self.limit
        if over.any():
            i, c = (int(v) for v in np.argwhere(over)[0])
            n = self.count + i
            raise WaveformError(
                f"{self.where}: sample {n} (t = {self.t0 + n / self.rate:.6g} s), channel {c} "
                f"is {block[i, c]:.6g}, beyond the range of float32 samples (largest "
                f"{self.limit:.4g}); it would be stored as infinite. Write float64 samples")

    def _flush(self, name: str) -> None:
        buf = self.buffers[name]
        if not buf:
            return
        data = np.concatenate(buf) if len(buf) > 1 else buf[0]
        self.buffers[name] = []
        ds = self.datasets[name]
        n0 = ds.shape[0]
        ds.resize(n0 + data.shape[0], axis=0)
        ds[n0:] = data
        self._check_io()

    def close(self) -> WriteResult:
        for name in self.datasets:
            self._flush(name)
        names = list(self.datasets)
        main = self.datasets[self.main]
        nch = int(main.shape[1])
        dtype = str(main.dtype)
        self.f.close()
        self.file.close()
        self._check_io()
        return WriteResult(self.where, "HDF5", dtype, self.count, nch, self.peak, datasets=names)

    def abort(self) -> None:
        try:
            f = getattr(self, "f", None)
            if f is not None:
                f.close()
        except Exception:  # noqa: BLE001 - already failing; the temp file is deleted next
            pass
        finally:
            self.file.close()
