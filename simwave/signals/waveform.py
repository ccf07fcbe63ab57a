"""Waveform: uniformly sampled, multi-channel data with its rate and provenance."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np

from simwave.errors import WaveformError


def _as_2d_float64(data: Any) -> np.ndarray:
    arr = np.asarray(data, dtype=np.float64)
    if arr.ndim == 1:
        arr = arr[:, np.newaxis]
    if arr.ndim != 2:
        raise WaveformError(
            f"waveform data must be 1-D (one channel) or 2-D (n_samples, n_channels); "
            f"got {arr.ndim}-D with shape {arr.shape}"
        )
    return arr


@dataclass(eq=False)
class Waveform:
    """Uniformly sampled signal, one or more channels.

    Parameters
    ----------
    data : array_like, shape (n_samples,) or (n_samples, n_channels)
        Samples. Stored as float64 with shape ``(n_samples, n_channels)``;
        a 1-D array is one channel.
    rate : float
        Sample rate in Hz (> 0, finite).
    t0 : float, optional
        Time of the first sample in seconds.
    channels : sequence of str, optional
        Channel names; default ``ch0, ch1, ...``.
    units : sequence of str, optional
        Physical unit of each channel (``""`` when unknown).
    attrs : dict, optional
        Free-form attributes, e.g. provenance. Values should be JSON-friendly.
    """

    data: np.ndarray
    rate: float
    t0: float = 0.0
    channels: list[str] | None = None
    units: list[str] | None = None
    attrs: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        self.data = _as_2d_float64(self.data)
        try:
            rate = float(self.rate)
        except (TypeError, ValueError):
            raise WaveformError(
                f"sample rate must be a number of hertz, got {self.rate!r}") from None
        if not math.isfinite(rate) or rate <= 0:
            raise WaveformError(
                f"sample rate must be a positive finite number of hertz, got {rate}")
        self.rate = rate
        self.t0 = float(self.t0)
        n_ch = self.data.shape[1]
        if self.channels is None:
            self.channels = [f"ch{i}" for i in range(n_ch)]
        else:
            self.channels = [str(c) for c in self.channels]
        if self.units is None:
            self.units = [""] * n_ch
        else:
            self.units = [str(u) for u in self.units]
        if len(self.channels) != n_ch:
            raise WaveformError(f"{len(self.channels)} channel names given for {n_ch} channels")
        if len(self.units) != n_ch:
            raise WaveformError(f"{len(self.units)} units given for {n_ch} channels")
        if self.attrs is None:
            self.attrs = {}
        else:
            self.attrs = dict(self.attrs)

    @property
    def n_samples(self) -> int:
        """Number of samples per channel."""
        return int(self.data.shape[0])

    @property
    def n_channels(self) -> int:
        """Number of channels."""
        return int(self.data.shape[1])

    @property
    def duration(self) -> float:
        """Record length in seconds, ``n_samples / rate``."""
        return self.n_samples / self.rate

    @property
    def time(self) -> np.ndarray:
        """Time of each sample in seconds, shape ``(n_samples,)``, float64."""
        return self.t0 + np.arange(self.n_samples, dtype=np.float64) / self.rate

    def select(self, channels: Sequence[int | str]) -> "Waveform":
        """Return a waveform holding only the given channels (names or indices)."""
        idx = [self.channel_index(c) for c in channels]
        return Waveform(
            self.data[:, idx],
            self.rate,
            self.t0,
            [self.channels[i] for i in idx],
            [self.units[i] for i in idx],
            dict(self.attrs),
        )

    def channel_index(self, channel: int | str) -> int:
        """Index of a channel given by name or by index (negative counts from the end)."""
        if isinstance(channel, (int, np.integer)):
            i = int(channel)
            if not -self.n_channels <= i < self.n_channels:
                raise WaveformError(
                    f"channel index {i} out of range: the waveform has {self.n_channels} channel(s)"
                )
            return i % self.n_channels
        name = str(channel)
        if name in self.channels:
            return self.channels.index(name)
        if name.lstrip("-").isdigit():
            return self.channel_index(int(name))
        raise WaveformError(
            f"no channel named {name!r}; the channels are {', '.join(self.channels)}"
        )

    def with_data(self, data: Any, **changes: Any) -> "Waveform":
        """A copy with new sample data (same rate, t0, names, units, attrs unless changed)."""
        fields = dict(
            rate=self.rate,
            t0=self.t0,
            channels=list(self.channels),
            units=list(self.units),
            attrs=dict(self.attrs),
        )
        fields.update(changes)
        return Waveform(data, **fields)

    def __repr__(self) -> str:
        return (
            f"Waveform({self.n_samples} samples x {self.n_channels} channel(s) at "
            f"{self.rate:g} Hz, t0={self.t0:g} s, channels={self.channels})"
        )

    def _repr_html_(self) -> str:
        from simwave.notebook import waveform_html

        return waveform_html(self)


def as_waveform(data: Any, rate: Any, what: str = "input") -> Any:
    """A plain numpy array (1-D: one channel; 2-D: rows are samples) with ``rate`` in Hz
    as a :class:`Waveform`; anything else is returned unchanged."""
    if not isinstance(data, np.ndarray):
        return data
    if rate is None:
        raise WaveformError(f"{what}: a numpy array carries no sample rate; give rate= (Hz)")
    from simwave.signals.quantity import parse_quantity

    return Waveform(data, parse_quantity(rate, "rate"),
                    attrs={"source": f"numpy array {'x'.join(map(str, data.shape))}"})
