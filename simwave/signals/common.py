"""Small helpers shared by the format modules."""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from simwave.errors import WaveformError

#: Names (any case; spaces and hyphens read as ``_``) under which a file states its
#: sample rate in Hz, its sample interval in seconds, or its start time in seconds:
#: HDF5 attributes and the metadata lines of an instrument's CSV export.
RATE_ATTRS = ("rate", "sample_rate", "sampling_rate", "samplerate", "sample_rate_hz",
              "sampling_frequency", "fs")
INTERVAL_ATTRS = ("dt", "sample_interval", "sampling_interval", "time_step", "interval",
                  "sample_period", "sampling_period")
T0_ATTRS = ("t0", "start_time", "time_offset")


@dataclass
class WriteResult:
    """What a writer wrote.

    Attributes
    ----------
    path : str
    format : str
        ``"WAV"``, ``"FLAC"``, ... for audio, ``"CSV"`` or ``"HDF5"``.
    subtype : str
        Sample encoding (``"FLOAT"``, ``"PCM_24"``, ``"float64"``, ``"text"``).
    n_samples, n_channels : int
        Main waveform size (extra streams not counted in ``n_channels``).
    peak : float
        Largest absolute sample value written, in the file's full-scale units
        for audio (1.0 = full scale) and in data units otherwise; measured
        before any clipping or normalization.
    peak_dbfs : float or None
        ``20*log10(peak)`` for audio (dB relative to full scale), else None.
    clipped : int
        Samples limited to full scale (``on_clip="clip"``).
    gain : float
        Factor applied by ``on_clip="normalize"`` (1.0 otherwise).
    datasets : list of str
        HDF5 dataset paths written.
    """

    path: str
    format: str
    subtype: str
    n_samples: int = 0
    n_channels: int = 0
    peak: float = 0.0
    peak_dbfs: float | None = None
    clipped: int = 0
    gain: float = 1.0
    datasets: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


def dbfs(peak: float) -> float:
    """Peak level in dB relative to full scale, ``20*log10(peak)``."""
    return 20.0 * math.log10(peak) if peak > 0 else -math.inf


def check_readable(path: Any) -> str:
    """Missing, directory or empty file -> one-line error."""
    path = os.fspath(path)
    if not os.path.exists(path):
        raise WaveformError(f"{path}: no such file")
    if os.path.isdir(path):
        raise WaveformError(f"{path}: is a directory, not a waveform file")
    if os.path.getsize(path) == 0:
        raise WaveformError(f"{path}: empty file")
    return path


def per_channel(value: Any, n: int, name: str, where: str) -> np.ndarray:
    """A scalar or one value per channel -> float64 array of length ``n``."""
    from simwave.signals.quantity import parse_quantity

    if isinstance(value, str) and "," in value:
        value = value.split(",")
    if isinstance(value, (list, tuple, np.ndarray)):
        arr = np.array([parse_quantity(v, name) for v in value], dtype=np.float64)
        if arr.size == 1:
            return np.full(n, arr[0])
        if arr.size != n:
            raise WaveformError(f"{where}: {name} has {arr.size} values for {n} channels")
        return arr
    return np.full(n, parse_quantity(value, name))


def to_jsonable(obj: Any) -> Any:
    """Attributes as plain JSON types (numpy scalars and arrays converted)."""
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return to_jsonable(obj.tolist())
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, bytes):
        return obj.decode("utf-8", "replace")
    if isinstance(obj, float) and not math.isfinite(obj):
        return repr(obj)
    if obj is None or isinstance(obj, (str, int, float, bool)):
        return obj
    return str(obj)


def dumps(obj: Any) -> str:
    """Compact one-line JSON of ``obj`` made JSON-friendly."""
    return json.dumps(to_jsonable(obj), separators=(",", ":"), ensure_ascii=False)


def snap_rate(rate: float) -> float:
    """Round a rate derived from time stamps to 12 significant digits.

    The change is at most 5e-12 relative, far inside the accepted sampling
    jitter, and turns 9999.999999999998 into 10000.
    """
    return float(f"{rate:.12g}")
