"""CSV and other delimited text: streaming reader and writer.

Reading rules (each one documented in the README's formats reference):

* Lines whose first non-blank character is ``#`` are comments; blank lines are
  skipped. A comment ``# simwave: {...}`` (JSON) written by simwave gives the
  exact rate, t0 and attributes.
* The delimiter is detected from the first lines: tab, semicolon, comma, then
  runs of whitespace (the first that splits every line into the same number
  of fields > 1). A decimal comma is detected when the delimiter is not a
  comma and numbers look like ``1,25``.
* A first line that is not all numbers is the header. ``voltage [V]`` or
  ``voltage (V)`` gives the name ``voltage`` and the unit ``V``.
* The time column is the one named ``time``, ``t``, ``seconds``, ``sec``,
  ``s``, ``time_s``, ``timestamp`` or ``elapsed`` (any case), or the one chosen
  with ``time_column``. Its unit (s, ms, us/µs, ns, min, h) converts to seconds.
* The rate is derived from the time column: the median interval of the first
  chunk, refined by the mean of the intervals within tolerance of it.
* An empty cell is a missing value (NaN), handled like NaN text.
"""

from __future__ import annotations

import json
import math
import os
import re
import warnings
from typing import Any, Iterator

import numpy as np

from simwave import __version__
from simwave.errors import WaveformError
from simwave.signals.common import WriteResult, dumps, snap_rate
from simwave.signals.stream import JITTER_TOLERANCE, Rows, TimeAxis

TIME_NAMES = {"time", "t", "seconds", "sec", "s", "time_s", "timestamp", "elapsed"}
#: Time-column unit -> seconds.
TIME_UNITS = {"": 1.0, "s": 1.0, "sec": 1.0, "ms": 1e-3, "us": 1e-6, "µs": 1e-6, "μs": 1e-6,
              "ns": 1e-9, "min": 60.0, "h": 3600.0}
CHUNK_BYTES = 1 << 20  # ~16k lines a chunk: bounded memory, loadtxt still efficient
_NAME_UNIT = re.compile(r"^(.*?)\s*[\[(]\s*([^\])]*?)\s*[\])]\s*$")
_DECIMAL_COMMA = re.compile(r"^\s*[+-]?\d*,\d+(?:[eE][+-]?\d+)?\s*$")
_META = re.compile(r"^\s*#\s*simwave:\s*(\{.*\})\s*$")


def split_name_unit(text: str) -> tuple[str, str]:
    """``"voltage [V]"`` -> ``("voltage", "V")``; ``"v"`` -> ``("v", "")``."""
    text = text.strip().strip('"').strip("'").strip()
    m = _NAME_UNIT.match(text)
    if m and m.group(1):
        return m.group(1).strip(), m.group(2).strip()
    return text, ""


def _split(line: str, delimiter: str | None) -> list[str]:
    return line.split() if delimiter is None else line.split(delimiter)


def _is_data_line(line: str) -> bool:
    s = line.strip()
    return bool(s) and not s.startswith("#")


def _to_float(text: str, decimal: str) -> float:
    t = text.strip().strip('"').strip()
    if decimal == ",":
        t = t.replace(",", ".")
    return float(t)


class CsvSource:
    """Streaming reader of one delimited text file.

    Parameters
    ----------
    path : str
    rate : float, optional
        Sample rate in Hz. Required when there is no time column; when there
        is one, it overrides the derived rate (the time column still gives t0,
        and the rows are checked only for going forwards).
    time_column : str, int or False, optional
        Name or index (among all columns) of the time column; False for none;
        default: detected by name.
    resample : bool
        Interpolate irregular rows onto a uniform grid instead of refusing them.
    delimiter : str, optional
        Override the detected delimiter (``","``, ``";"``, ``"\\t"``, ``" "`` for whitespace).
    decimal : str, optional
        ``"."`` or ``","``; default detected.
    """

    family = "csv"

    def __init__(self, path: str, *, rate: float | None = None, time_column: Any = None,
                 resample: bool = False, delimiter: str | None = None,
                 decimal: str | None = None, chunk_bytes: int | None = None) -> None:
        self.path = path
        self.chunk_bytes = int(chunk_bytes or CHUNK_BYTES)
        self.fh = open(path, "rb")
        self.format, self.subtype = "CSV", "text"
        self.notes: list[str] = []
        self.attrs: dict[str, Any] = {}
        self.n_samples = None
        self.file_rate: float | None = None
        first = self.fh.read(self.chunk_bytes)
        self.encoding = "utf-8-sig" if first.startswith(b"\xef\xbb\xbf") else "utf-8"
        try:
            first.decode(self.encoding)
        except UnicodeDecodeError as exc:
            if exc.start < len(first) - 4:  # not just a character cut at the chunk end
                self.encoding = "latin-1"
        self._line_iter = self._lines(first)
        self._preamble(delimiter, decimal)
        self._columns(time_column)
        self._first_rows = self._parse_next()
        if self._first_rows is None or len(self._first_rows[0]) == 0:
            raise WaveformError(f"{path}: no numeric rows")
        self._rate_and_time(rate, resample)

    # ---- reading lines -------------------------------------------------------
    def _lines(self, first: bytes) -> Iterator[tuple[int, list[str]]]:
        """(line number of the first line, lines) for each chunk of whole lines."""
        lineno = 1
        rest = b""
        block = first
        while True:
            if not block:
                if rest:
                    yield lineno, [rest.decode(self.encoding, "replace").rstrip("\r")]
                return
            buf = rest + block
            cut = buf.rfind(b"\n")
            if cut < 0:
                rest = buf
            else:
                text = buf[:cut].decode(self.encoding, "replace")
                rest = buf[cut + 1:]
                lines = text.split("\n")
                yield lineno, lines
                lineno += len(lines)
            block = self.fh.read(self.chunk_bytes)

    def _preamble(self, delimiter: str | None, decimal: str | None) -> None:
        """Comments, header, delimiter and decimal mark from the first chunk."""
        try:
            lineno, lines = next(self._line_iter)
        except StopIteration:
            raise WaveformError(f"{self.path}: empty file") from None
        meta: dict[str, Any] = {}
        idx = 0
        while idx < len(lines) and not _is_data_line(lines[idx]):
            m = _META.match(lines[idx])
            if m:
                try:
                    meta = json.loads(m.group(1))
                except ValueError:
                    meta = {}
            idx += 1
        if idx == len(lines):
            raise WaveformError(f"{self.path}: no numeric rows (only comments or blank lines)")
        self.meta = meta if isinstance(meta, dict) else {}
        sample = [s for s in lines[idx:idx + 60] if _is_data_line(s)]
        body = sample[1:] or sample
        if delimiter is not None:
            self.delimiter = None if delimiter.strip() == "" else delimiter
        else:
            self.delimiter = self._detect_delimiter(body)
        fields = [f for line in body for f in _split(line, self.delimiter)]
        if decimal is not None:
            self.decimal = decimal
        elif self.delimiter != "," and any(_DECIMAL_COMMA.match(f) for f in fields):
            self.decimal = ","
        else:
            self.decimal = "."
        head = [f.strip() for f in _split(sample[0], self.delimiter)]
        try:
            [_to_float(f, self.decimal) for f in head if f]
            numeric_head = True
        except ValueError:
            numeric_head = False
        self.header_line = None if numeric_head else lineno + idx
        self.n_cols = len(head)
        if numeric_head:
            self.names = [f"col{i}" for i in range(self.n_cols)]
            self.col_units = [""] * self.n_cols
            self._pending = (lineno + idx, lines[idx:])
        else:
            pairs = [split_name_unit(h) for h in head]
            names = [p[0] or f"col{i}" for i, p in enumerate(pairs)]
            seen: dict[str, int] = {}
            for i, n in enumerate(names):
                if n in seen:
                    seen[n] += 1
                    names[i] = f"{n}_{seen[n]}"
                else:
                    seen[n] = 0
            self.names = names
            self.col_units = [p[1] for p in pairs]
            self._pending = (lineno + idx + 1, lines[idx + 1:])

    @staticmethod
    def _detect_delimiter(lines: list[str]) -> str | None:
        for d in ("\t", ";", ",", None):
            counts = {len(_split(line, d)) for line in lines}
            if len(counts) == 1 and counts.pop() > 1:
                return d
        # nothing consistent: the widest split of the first line; parsing will name the ragged row
        best = max(("\t", ";", ",", None), key=lambda d: len(_split(lines[0], d)))
        return best if len(_split(lines[0], best)) > 1 else ","

    def _columns(self, time_column: Any) -> None:
        self.time_index: int | None = None
        if time_column is None:
            for i, n in enumerate(self.names):
                if n.strip().lower() in TIME_NAMES:
                    self.time_index = i
                    break
        elif time_column is False or str(time_column).lower() in ("none", "false", ""):
            self.time_index = None
        else:
            self.time_index = self._column_index(time_column, "time column")
        self.data_index = [i for i in range(self.n_cols) if i != self.time_index]
        if not self.data_index:
            raise WaveformError(f"{self.path}: only a time column; no signal columns")
        self.channels = [self.names[i] for i in self.data_index]
        self.units = [self.col_units[i] for i in self.data_index]
        self.time_scale = 1.0
        if self.time_index is not None:
            unit = self.col_units[self.time_index]
            if unit not in TIME_UNITS:
                raise WaveformError(
                    f"{self.path}: time column {self.names[self.time_index]!r} has unit {unit!r}; "
                    f"known: {', '.join(u or '(none)' for u in TIME_UNITS)}"
                )
            self.time_scale = TIME_UNITS[unit]

    def _column_index(self, key: Any, what: str) -> int:
        if isinstance(key, (int, np.integer)) or str(key).lstrip("-").isdigit():
            i = int(key)
            if not -self.n_cols <= i < self.n_cols:
                raise WaveformError(f"{self.path}: {what} {i} out of range ({self.n_cols} columns)")
            return i % self.n_cols
        for i, n in enumerate(self.names):
            if n == key or f"{n} [{self.col_units[i]}]" == key:
                return i
        raise WaveformError(
            f"{self.path}: no column named {key!r} for the {what}; columns: {', '.join(self.names)}"
        )

    # ---- parsing -------------------------------------------------------------
    def _parse_next(self) -> tuple[np.ndarray, Any] | None:
        """Next chunk as (array (n, n_cols), place function), or None at the end."""
        if self._pending is not None:
            lineno, lines = self._pending
            self._pending = None
        else:
            try:
                lineno, lines = next(self._line_iter)
            except StopIteration:
                return None
        return self._parse(lineno, lines)

    def _parse(self, lineno: int, lines: list[str]) -> tuple[np.ndarray, Any]:
        data_lines: list[int] | None = None

        def line_numbers() -> list[int]:
            nonlocal data_lines
            if data_lines is None:
                data_lines = [lineno + k for k, s in enumerate(lines) if _is_data_line(s)]
            return data_lines

        def place(i: int) -> str:
            return f"line {line_numbers()[i]}"

        src = lines
        if self.decimal == ",":
            src = [s.replace(",", ".") for s in lines]
        arr = None
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # "input contained no data" for comment-only chunks
                arr = np.loadtxt(src, delimiter=self.delimiter, comments="#", dtype=np.float64,
                                 ndmin=2, quotechar='"')
            if arr.shape[0] and arr.shape[1] != self.n_cols:
                arr = None
        except ValueError:
            arr = None
        if arr is None:
            arr = self._parse_slowly(lineno, lines)
        if arr.shape[0] == 0:
            arr = np.empty((0, self.n_cols))
        return arr, place

    def _parse_slowly(self, lineno: int, lines: list[str]) -> np.ndarray:
        """Line by line, to name the exact row and column of a problem."""
        out = []
        for k, line in enumerate(lines):
            text = line.split("#", 1)[0]
            if not text.strip():
                continue
            fields = _split(text.strip() if self.delimiter is None else text.rstrip("\r\n"),
                            self.delimiter)
            if len(fields) != self.n_cols:
                raise WaveformError(
                    f"{self.path}, line {lineno + k}: {len(fields)} fields, expected "
                    f"{self.n_cols} ({'header' if self.header_line else 'first row'}: "
                    f"{', '.join(self.names)})"
                )
            row = []
            for j, f in enumerate(fields):
                if not f.strip().strip('"').strip():
                    row.append(math.nan)  # empty cell: missing value
                    continue
                try:
                    row.append(_to_float(f, self.decimal))
                except ValueError:
                    raise WaveformError(
                        f"{self.path}, line {lineno + k}, column {j + 1} ({self.names[j]!r}): "
                        f"{f.strip()!r} is not a number"
                    ) from None
            out.append(row)
        return np.array(out, dtype=np.float64).reshape(-1, self.n_cols)

    # ---- rate ----------------------------------------------------------------
    def _rate_and_time(self, rate: float | None, resample: bool) -> None:
        arr, _ = self._first_rows
        meta_rate = self.meta.get("rate")
        self.t0 = float(self.meta.get("t0", 0.0))
        if isinstance(self.meta.get("attrs"), dict):
            self.attrs.update(self.meta["attrs"])
        self.time_axis = None
        if self.time_index is None:
            chosen = rate if rate is not None else meta_rate
            if chosen is None:
                raise WaveformError(
                    f"{self.path}: no time column and no sample rate; give the rate "
                    f"(rate= / --rate HZ) or name the time column (time_column= / --time-column)"
                )
            self.rate = float(chosen)
            self.file_rate = None if meta_rate is None else float(meta_rate)
            if resample:
                self.notes.append("resample ignored: the file has no time column")
            return
        t = arr[:, self.time_index] * self.time_scale
        self.t0 = float(t[0])
        derived = None
        if meta_rate is not None:
            derived = float(meta_rate)
        elif t.size >= 2:
            d = np.diff(t)
            pos = d[d > 0]
            if pos.size:
                med = float(np.median(pos))
                good = np.abs(d - med) <= JITTER_TOLERANCE * med + 4 * np.spacing(np.abs(t[1:]))
                dt = float(np.mean(d[good])) if good.any() else med
                derived = snap_rate(1.0 / dt)
        self.file_rate = derived
        if rate is not None:
            self.rate = float(rate)
            if derived is not None and abs(derived - self.rate) > JITTER_TOLERANCE * self.rate:
                self.notes.append(
                    f"rate {self.rate:g} Hz given; the time column suggests {derived:.10g} Hz"
                )
        elif derived is not None:
            self.rate = derived
        else:
            raise WaveformError(
                f"{self.path}: only one data row; cannot derive a rate from the time column "
                f"(give rate= / --rate HZ)"
            )
        self.time_axis = TimeAxis(self.path, 1.0 / self.rate, self.t0, resample=resample,
                                  check=rate is None or resample)

    def rows(self, select: list[int]) -> Iterator[Rows]:
        cols = [self.data_index[i] for i in select]
        item = self._first_rows
        self._first_rows = None
        if item is None:
            raise WaveformError(f"{self.path}: reader already used")
        while item is not None:
            arr, place = item
            if arr.shape[0]:
                t = None
                if self.time_index is not None:
                    t = arr[:, self.time_index] * self.time_scale
                yield Rows(arr[:, cols], t, place)
            item = self._parse_next()

    def close(self) -> None:
        self.fh.close()


class CsvSink:
    """Writes a time column and one column per channel, shortest exact float text.

    Numbers are written with Python's ``repr`` of float64, the shortest string
    that reads back to the same value (Python docs, ``float.__repr__``; the
    algorithm of Steele & White / Gay, "Correctly rounded binary-decimal and
    decimal-binary conversions", 1990).
    """

    def __init__(self, tmp: str, rate: float, t0: float, columns: list[str], units: list[str],
                 attrs: dict[str, Any], *, delimiter: str = ",", time_column: bool = True,
                 target: str | None = None) -> None:
        self.where = target or tmp
        if delimiter in ("", "."):
            raise WaveformError(f"{self.where}: delimiter {delimiter!r} cannot separate numbers")
        self.fh = open(tmp, "w", encoding="utf-8", newline="\n")
        self.rate, self.t0 = rate, t0
        self.delimiter = delimiter
        self.time_column = time_column
        self.n_channels = len(columns)
        self.count = 0
        self.peak = 0.0
        meta = {"version": __version__, "rate": rate, "t0": t0, "attrs": attrs}
        self.fh.write(f"# simwave: {dumps(meta)}\n")
        head = [f"{c} [{u}]" if u else c for c, u in zip(columns, units, strict=False)]
        if time_column:
            head = ["time [s]"] + head
        for h in head:
            if delimiter in h:
                raise WaveformError(f"{self.where}: column name {h!r} contains the delimiter")
        self.fh.write(delimiter.join(head) + "\n")
        n = len(head)
        self.row_format = delimiter.join(["%r"] * n) + "\n"

    def write(self, block: np.ndarray) -> None:
        n = block.shape[0]
        if n == 0:
            return
        if block.size:
            self.peak = max(self.peak, float(np.nanmax(np.abs(block))))
        if self.time_column:
            t = self.t0 + (self.count + np.arange(n, dtype=np.float64)) / self.rate
            block = np.column_stack([t, block])
        fmt = self.row_format
        self.fh.write("".join([fmt % tuple(r) for r in block.tolist()]))
        self.count += n

    def close(self) -> WriteResult:
        self.fh.flush()
        os.fsync(self.fh.fileno())
        self.fh.close()
        return WriteResult(self.where, "CSV", "text", self.count, self.n_channels, self.peak)

    def abort(self) -> None:
        self.fh.close()
