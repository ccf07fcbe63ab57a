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
from simwave.signals.atomic import stop_signals_held

# orjson's module set-up crashes the interpreter (SIGSEGV) when a stop signal's
# KeyboardInterrupt lands inside it: seen in 4 of 30 runs stopped while opening a CSV
# output. The signal waits until the import is done, then stops the run as usual.
with stop_signals_held():
    import orjson
from simwave.signals.common import (INTERVAL_ATTRS, RATE_ATTRS, T0_ATTRS, WriteResult, dumps,
                                    snap_rate)
from simwave.signals.stream import JITTER_TOLERANCE, Rows, TimeAxis

TIME_NAMES = {"time", "t", "seconds", "sec", "s", "time_s", "timestamp", "elapsed"}
#: Time-column unit -> seconds.
TIME_UNITS = {"": 1.0, "s": 1.0, "sec": 1.0, "ms": 1e-3, "us": 1e-6, "µs": 1e-6, "μs": 1e-6,
              "ns": 1e-9, "min": 60.0, "h": 3600.0}
_RATE_UNITS = {"": 1.0, "Hz": 1.0, "kHz": 1e3, "MHz": 1e6, "GHz": 1e9}
CHUNK_BYTES = 1 << 20  # ~16k lines a chunk: bounded memory, loadtxt still efficient
_NAME_UNIT = re.compile(r"^(.*?)\s*[\[(]\s*([^\])]*?)\s*[\])]\s*$")
_META = re.compile(r"^\s*#\s*simwave:\s*(\{.*\})\s*$")


def format_rows(table: np.ndarray, delimiter: str = ",") -> bytes:
    """Rows of float64 as delimited text lines (UTF-8), each number its shortest exact text.

    See :class:`CsvSink` for the algorithm and the layout of the numbers.
    """
    table = np.ascontiguousarray(table, dtype=np.float64)
    if np.isfinite(table).all():
        text = orjson.dumps(table, option=orjson.OPT_SERIALIZE_NUMPY)[2:-2]
        text = text.replace(b"],[", b"\n")
        if delimiter != ",":
            text = text.replace(b",", delimiter.encode())
    else:  # orjson writes non-finite numbers as null; Python's repr spells them out
        text = repr(table.tolist())[2:-2].replace("], [", "\n").replace(", ", delimiter).encode()
    return text + b"\n"


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


#: Lines looked at to find where the numbers start.
_WINDOW = 100
#: (delimiter, decimal mark) pairs tried, in order of preference on a tie.
_LAYOUTS = ((",", "."), (";", ","), (";", "."), ("\t", "."), ("\t", ","), (None, "."),
            (None, ","))
_UNIT = re.compile(
    r"^(?:[pnuµμmkMG]?(?:V|A|s|Hz|Pa|bar|N|g|W|Ω|Ohm|ohm|K|°C|degC|°F|m|S|J|dB|dBV|dBm|FS|"
    r"rpm|sec|min|h)(?:/[A-Za-z]+(?:\^?-?\d|²)?)?|%|-|--)$")


def _fields(line: str, delimiter: str | None) -> list[str]:
    return [f.strip().strip('"').strip("'").strip() for f in _split(line.strip(), delimiter)]


def _numeric_width(line: str, delimiter: str | None, decimal: str) -> int:
    """Number of fields when every field is a number or empty (at least one number), else 0."""
    text = line.split("#", 1)[0]
    fields = _split(text.strip() if delimiter is None else text.rstrip("\r"), delimiter)
    seen = False
    for f in fields:
        f = f.strip().strip('"').strip()
        if not f:
            continue
        if decimal == "," and "." in f:
            return 0  # "1.5" is not a number where the decimal mark is a comma
        try:
            _to_float(f, decimal)
        except ValueError:
            return 0
        seen = True
    return len(fields) if seen else 0


def _find_layout(body: list[tuple[int, str]], delimiter: str | None,
                 decimal: str | None) -> tuple[str | None, str, int, int] | None:
    """(delimiter, decimal mark, fields per row, index of the first data line), or None.

    For each (delimiter, decimal mark) pair, the rows made only of numbers are
    counted; the pair that reads most rows wins (then the one with more fields).
    The row width is the commonest among those rows, and the data start at the
    first row of that width: everything above it is metadata, names or units.
    """
    if delimiter is not None:
        delimiter = None if delimiter.strip(" ") == "" else delimiter  # " ": runs of spaces
        pairs = [(delimiter, d) for d in ((decimal,) if decimal else (".", ","))]
    else:
        pairs = [p for p in _LAYOUTS if decimal is None or p[1] == decimal]
    best = None
    for order, (delim, dec) in enumerate(pairs):
        if delim == dec:
            continue
        widths = [(i, _numeric_width(t, delim, dec)) for i, t in body]
        numeric = [w for _, w in widths if w]
        if not numeric:
            continue
        counts: dict[int, int] = {}
        for w in numeric:
            counts[w] = counts.get(w, 0) + 1
        width = max(counts, key=lambda w: counts[w])  # ties: the first seen
        first = next(i for i, w in widths if w == width)
        score = (len(numeric), width, -order)
        if best is None or score > best[0]:
            best = (score, (delim, dec, width, first))
    return None if best is None else best[1]


def _is_units_row(fields: list[str]) -> bool:
    """True when every non-empty field reads as a unit symbol (``V``, ``ms``, ``[mA]``)."""
    filled = [f for f in fields if f]
    if not filled:
        return False
    for f in filled:
        bracketed = len(f) >= 2 and f[0] + f[-1] in ("[]", "()")
        if not (bracketed and len(f) <= 14 or _UNIT.match(f) or f in TIME_UNITS):
            return False
    return True


def _metadata(lines: list[tuple[int, str]], delimiter: str | None) -> dict[str, str]:
    """Leading metadata lines as {key: value}: ``Model;XB-20``, ``Date: 2026-01-05``."""
    out: dict[str, str] = {}
    for lineno, line in lines:
        fields = [f for f in _fields(line, delimiter) if f]
        if len(fields) >= 2:
            key, value = fields[0].rstrip(":= ").strip(), ", ".join(fields[1:])
        else:
            text = fields[0] if fields else line.strip()
            m = re.match(r"^([^:=]{1,60}?)\s*[:=]\s*(.*)$", text)
            key, value = (m.group(1), m.group(2)) if m else (f"line {lineno}", text)
        key = key or f"line {lineno}"
        if key in out:
            key = f"{key} (line {lineno})"
        out[key] = value
    return out


def _metadata_number(metadata: dict[str, str], names: tuple[str, ...], decimal: str,
                     unit_scale: dict[str, float]) -> tuple[str, float] | None:
    """(key, value) of the first metadata entry named like ``names``, converted by
    its unit (in the key, ``Sample interval (us)``, or after the number, ``10 us``)."""
    for key, value in metadata.items():
        name, unit = split_name_unit(key)
        norm = re.sub(r"[\s\-]+", "_", name.strip().lower())
        if norm not in names:
            continue
        parts = [x.strip() for x in value.split(", ")]
        text = parts[0]
        if len(parts) > 1 and re.fullmatch(r"[A-Za-zµμ/]+", parts[1]):
            text += " " + parts[1]  # "Sample interval,10,us"
        m = re.match(r"^([+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?)\s*(\S*)\s*$", text)
        if not m:
            continue
        try:
            number = _to_float(m.group(1), decimal)
        except ValueError:
            continue
        u = (m.group(2) or unit).replace("S/s", "Hz").replace("Sa/s", "Hz")
        if u not in unit_scale:
            continue
        return key, number * unit_scale[u]
    return None


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
    header_line : int, optional
        Line number (1 = first line of the file) of the column names; the line
        after it holds units when it is not numbers; 0 for no names line.
        Lines above it are metadata. Default: detected.
    skip_lines : int
        Lines at the top kept as metadata and not searched for the names
        (default 0; the metadata lines are detected anyway).
    """

    family = "csv"

    def __init__(self, path: str, *, rate: float | None = None, time_column: Any = None,
                 resample: bool = False, delimiter: str | None = None,
                 decimal: str | None = None, header_line: int | None = None,
                 skip_lines: int = 0, chunk_bytes: int | None = None) -> None:
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
        # Lines end in LF or CR LF; a file with CR alone (classic Mac OS) is split on CR.
        self._eol = b"\r" if (b"\r" in first and b"\n" not in first) else b"\n"
        if self._eol == b"\r":
            self.notes.append("lines end in CR only (classic Mac OS line endings)")
        self._line_iter = self._lines(first)
        if decimal not in (None, ".", ","):
            raise WaveformError(f"{path}: decimal mark must be '.' or ',', got {decimal!r}")
        self._preamble(delimiter, decimal, header_line, skip_lines)
        self._usecols = None if self.n_cols == self.n_fields else range(self.n_cols)
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
            cut = buf.rfind(self._eol)
            if cut < 0:
                rest = buf
            else:
                text = buf[:cut].decode(self.encoding, "replace")
                rest = buf[cut + 1:]
                lines = text.split(self._eol.decode())
                yield lineno, lines
                lineno += len(lines)
            block = self.fh.read(self.chunk_bytes)

    def _preamble(self, delimiter: str | None, decimal: str | None,
                  header_line: int | None, skip_lines: int) -> None:
        """Metadata lines, names (and units) line, delimiter and decimal mark."""
        try:
            lineno, lines = next(self._line_iter)
        except StopIteration:
            raise WaveformError(f"{self.path}: empty file") from None
        if lineno != 1:  # pragma: no cover - the first chunk always starts the file
            raise AssertionError(lineno)
        meta: dict[str, Any] = {}
        for line in lines[:max(skip_lines, 0) + _WINDOW]:
            m = _META.match(line)
            if m:
                try:
                    meta = json.loads(m.group(1))
                except ValueError:
                    meta = {}
                break
        self.meta = meta if isinstance(meta, dict) else {}
        if header_line is not None:
            if not 0 <= header_line <= len(lines):
                raise WaveformError(f"{self.path}: header line {header_line} is beyond the "
                                    f"first {len(lines)} lines")
            skip_lines = max(skip_lines, header_line)
        if skip_lines > len(lines):
            raise WaveformError(f"{self.path}: cannot skip {skip_lines} lines; the file's first "
                                f"part has {len(lines)}")
        # candidate lines: (index into lines, text) after the skipped ones
        body = [(i, lines[i]) for i in range(skip_lines, len(lines)) if _is_data_line(lines[i])]
        if not body and not any(_is_data_line(x) for x in lines[:skip_lines]):
            raise WaveformError(f"{self.path}: no numeric rows (only comments or blank lines)")
        layout = _find_layout(body[:_WINDOW], delimiter, decimal)
        if layout is None:
            seps = "the given separator" if delimiter is not None else "tab, ';', ',' or spaces"
            raise WaveformError(
                f"{self.path}: no numeric rows found in the first {min(len(body), _WINDOW)} "
                f"lines after line {skip_lines} (fields separated by {seps}, decimal mark '.' "
                f"or ','); give --header-line N (the line holding the column names) or "
                f"--skip-lines N (lines before the names), and --delimiter/--decimal if the "
                f"separator or decimal mark is unusual"
            )
        self.delimiter, self.decimal, n_fields, first = layout
        pre = [(i, t) for i, t in body if i < first]
        names_at = units_at = None
        if header_line is not None:
            names_at = header_line - 1 if header_line > 0 else None
            meta_idx = [i for i in range(names_at if names_at is not None else skip_lines)
                        if _is_data_line(lines[i])]
            if names_at is not None and pre:
                units_at = pre[0][0]  # a non-numeric line between the names and the data
        else:
            meta_idx = [i for i in range(skip_lines) if _is_data_line(lines[i])]
            if pre:
                last = pre[-1]
                width = len(_split(last[1], self.delimiter))
                if width == n_fields or n_fields == 1:
                    above = pre[-2] if len(pre) >= 2 else None
                    if (above is not None and _is_units_row(_fields(last[1], self.delimiter))
                            and len(_split(above[1], self.delimiter)) == n_fields
                            and not _is_units_row(_fields(above[1], self.delimiter))):
                        names_at, units_at = above[0], last[0]
                    else:
                        names_at = last[0]
                elif width > 1:
                    raise WaveformError(
                        f"{self.path}, line {first + 1}: {n_fields} fields, expected {width} "
                        f"(header on line {last[0] + 1}: {last[1].strip()}); if the column "
                        f"names are on another line give --header-line N"
                    )
            meta_idx += [i for i, _ in pre if i not in (names_at, units_at)]
        self.header_line = None if names_at is None else names_at + 1
        self.units_line = None if units_at is None else units_at + 1
        head = _fields(lines[names_at], self.delimiter) if names_at is not None else []
        unit_row = _fields(lines[units_at], self.delimiter) if units_at is not None else []
        self.n_fields = n_fields
        rows = [t for i, t in body[:_WINDOW] if i >= first]
        trailing = n_fields > 1 and all(
            not _split(t.split("#", 1)[0].rstrip("\r"), self.delimiter)[-1].strip()
            for t in rows if _numeric_width(t, self.delimiter, self.decimal) == n_fields)
        self.n_cols = n_fields - 1 if trailing else n_fields  # "0;1;" ends every row
        if names_at is None:
            self.names = [f"col{i}" for i in range(self.n_cols)]
            self.col_units = [""] * self.n_cols
        else:
            head = (head + [""] * n_fields)[:self.n_cols]
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
            for i, u in enumerate(unit_row[:self.n_cols]):
                u = u.strip("[]() ")
                if u and u not in ("-", "--"):
                    self.col_units[i] = u
        self.metadata = _metadata(
            [(i + 1, lines[i]) for i in sorted(meta_idx) if not lines[i].lstrip().startswith("#")],
            self.delimiter)
        if self.metadata:
            self.attrs["metadata"] = self.metadata
        start = first if header_line is None or names_at is None else \
            max(units_at if units_at is not None else names_at, names_at) + 1
        if header_line == 0:
            start = skip_lines
        self._pending = (start + 1, lines[start:])

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
                                 ndmin=2, quotechar='"', usecols=self._usecols)
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
            if len(fields) != self.n_fields:
                raise WaveformError(
                    f"{self.path}, line {lineno + k}: {len(fields)} fields, expected "
                    f"{self.n_fields} ({'header' if self.header_line else 'first row'}: "
                    f"{', '.join(self.names)})"
                )
            fields = fields[:self.n_cols]
            row = []
            for j, f in enumerate(fields):
                if not f.strip().strip('"').strip():
                    row.append(math.nan)  # empty cell: missing value
                    continue
                try:
                    row.append(_to_float(f, self.decimal))
                except ValueError:
                    hint = ""
                    if not _numeric_width(text, self.delimiter, self.decimal):
                        hint = (f"; if this line holds the column names give --header-line "
                                f"{lineno + k}")
                    raise WaveformError(
                        f"{self.path}, line {lineno + k}, column {j + 1} ({self.names[j]!r}): "
                        f"{f.strip()!r} is not a number{hint}"
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
            stated = self._stated_rate() if meta_rate is None else None
            if stated is not None:
                meta_rate = stated
            chosen = rate if rate is not None else meta_rate
            if chosen is None:
                raise WaveformError(
                    f"{self.path}: no time column and no sample rate; give the rate "
                    f"(--rate HZ), name the time column (--time-column NAME) or add a metadata "
                    f"line such as 'Sample interval;1e-5' or 'Sample rate;100000'"
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
                if not (math.isfinite(dt) and dt > 0 and math.isfinite(1.0 / dt)):
                    raise WaveformError(
                        f"{self.path}: the time column's steps (typical {med:.6g} s, mean "
                        f"{dt:.6g} s) give no usable sample rate; give rate= / --rate HZ")
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
        elif t.size >= 2:
            raise WaveformError(
                f"{self.path}: the time column never advances ({t.size} rows, all at "
                f"t = {t[0]:.6g} s); cannot derive a rate from it (give rate= / --rate HZ)"
            )
        else:
            raise WaveformError(
                f"{self.path}: only one data row; cannot derive a rate from the time column "
                f"(give --rate HZ; rate= in Python)"
            )
        self.time_axis = TimeAxis(self.path, 1.0 / self.rate, self.t0, resample=resample,
                                  check=rate is None or resample)

    def _stated_rate(self) -> float | None:
        """Rate (and start time) stated by the metadata lines, for a file without a time column."""
        md = getattr(self, "metadata", {})
        if not md:
            return None
        interval = _metadata_number(md, INTERVAL_ATTRS, self.decimal, TIME_UNITS)
        rate = _metadata_number(md, RATE_ATTRS, self.decimal, _RATE_UNITS)
        start = _metadata_number(md, T0_ATTRS, self.decimal, TIME_UNITS)
        if start is not None:
            self.t0 = start[1]
        if interval is not None and interval[1] > 0:
            return snap_rate(1.0 / interval[1])
        if rate is not None and rate[1] > 0:
            return rate[1]
        return None

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

    Every number is the shortest decimal string that reads back to the same
    float64 (Steele & White / Gay, "Correctly rounded binary-decimal and
    decimal-binary conversions", 1990; Ryu: U. Adams, "Ryū: fast float-to-string
    conversion", PLDI 2018). Finite blocks are formatted by orjson's numpy
    serializer (Ryu-family shortest digits, compiled; about 6x Python's
    ``repr`` per number); a block holding NaN or infinity (written only with
    keep_going) falls back to Python's ``repr``, which spells them ``nan``,
    ``inf``, ``-inf``. The two agree on the digits; they may differ in layout
    (``2.0833333333333333e-05`` from ``repr``, ``0.000020833333333333333`` from
    orjson); every reader, this one included, reads both to the same float64.
    """

    def __init__(self, tmp: str, rate: float, t0: float, columns: list[str], units: list[str],
                 attrs: dict[str, Any], *, delimiter: str = ",", time_column: bool = True,
                 target: str | None = None) -> None:
        self.where = target or tmp
        if delimiter in ("", "."):
            raise WaveformError(f"{self.where}: delimiter {delimiter!r} cannot separate numbers")
        self.fh = open(tmp, "wb")
        self.rate, self.t0 = rate, t0
        self.delimiter = delimiter
        self.time_column = time_column
        self.n_channels = len(columns)
        self.count = 0
        self.peak = 0.0
        meta = {"version": __version__, "rate": rate, "t0": t0, "attrs": attrs}
        head = [f"{c} [{u}]" if u else c for c, u in zip(columns, units, strict=False)]
        if time_column:
            head = ["time [s]"] + head
        for h in head:
            if delimiter in h:
                raise WaveformError(f"{self.where}: column name {h!r} contains the delimiter")
        self.fh.write(f"# simwave: {dumps(meta)}\n{delimiter.join(head)}\n".encode())

    def write(self, block: np.ndarray) -> None:
        n = block.shape[0]
        if n == 0:
            return
        if block.size:
            self.peak = max(self.peak, float(np.nanmax(np.abs(block))))
        if self.time_column:
            t = self.t0 + (self.count + np.arange(n, dtype=np.float64)) / self.rate
            block = np.column_stack([t, block])
        self.fh.write(format_rows(block, self.delimiter))
        self.count += n

    def close(self) -> WriteResult:
        self.fh.flush()
        os.fsync(self.fh.fileno())
        self.fh.close()
        return WriteResult(self.where, "CSV", "text", self.count, self.n_channels, self.peak)

    def abort(self) -> None:
        self.fh.close()
