"""Options of :func:`simwave.measure.measure`: what a caller may set, checked once.

In: keyword arguments (``MeasureOptions.from_kwargs``). Out: a validated
:class:`MeasureOptions` every stage reads (``to_dict()`` is the result's ``options``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields
from typing import Any

import numpy as np

from simwave.errors import MeasurementError
from simwave.measure import levels as lv
from simwave.measure import segments as seg
from simwave.measure.kinds import SIGNAL_KINDS

#: Fewest samples a steady-state window may have.
MIN_WINDOW = 8


@dataclass
class MeasureOptions:
    """Options of :func:`simwave.measure.measure` (all keyword arguments)."""

    reference_levels_pct: tuple = (10.0, 50.0, 90.0)
    settling_band_pct: float = 2.0
    harmonics: int = 10
    sine_hz: float | None = None
    tones_hz: list | None = None
    steady_fraction: float = 0.25
    state_level_method: str = "histogram"
    segment_end_fraction: float = seg.SEGMENT_END_FRACTION
    signal_kind: str = "auto"
    reference_channel: Any = None
    discrete: Any = None
    gain_tolerance_db: float = 0.1
    phase_tolerance_deg: float = 1.0
    overshoot_tolerance_pct: float = 1.0
    time_tolerance_pct: float = 2.0
    block_size: int = 65536
    max_window_samples: int = 1_000_000
    read_options: dict = field(default_factory=dict)
    reference_read_options: dict | None = None
    rest_before_record: bool = True

    @classmethod
    def from_kwargs(cls, opts: dict) -> "MeasureOptions":
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(opts) - known)
        if unknown:
            raise MeasurementError(
                f"unknown measurement option {unknown[0]!r}; known: {', '.join(sorted(known))}"
            )
        o = cls(**opts)
        o.validate()
        return o

    def validate(self) -> None:
        lv.check_percentages(self.reference_levels_pct, self.settling_band_pct)
        self.reference_levels_pct = tuple(float(p) for p in self.reference_levels_pct)
        self.settling_band_pct = float(self.settling_band_pct)
        if self.state_level_method not in lv.STATE_LEVEL_METHODS:
            raise MeasurementError(
                f"unknown state-level method {self.state_level_method!r}; use one of "
                f"{', '.join(lv.STATE_LEVEL_METHODS)}"
            )
        if self.signal_kind not in SIGNAL_KINDS:
            raise MeasurementError(
                f"unknown signal kind {self.signal_kind!r}; use one of {', '.join(SIGNAL_KINDS)}"
            )
        if not (isinstance(self.harmonics, (int, np.integer)) and 2 <= self.harmonics <= 1000):
            raise MeasurementError(
                f"harmonics must be a whole number from 2 to 1000, got {self.harmonics!r}"
            )
        frac = float(self.steady_fraction)
        if not (0.0 < frac <= 1.0):
            raise MeasurementError(f"steady-state fraction must be in (0, 1], got {frac:g}")
        self.steady_fraction = frac
        try:
            sef = float(self.segment_end_fraction)
        except (TypeError, ValueError):
            raise MeasurementError(
                f"segment end fraction must be a number in (0, 0.5], got "
                f"{self.segment_end_fraction!r}"
            ) from None
        if not (0.0 < sef <= 0.5):
            raise MeasurementError(f"segment end fraction must be in (0, 0.5], got {sef:g}")
        self.segment_end_fraction = sef
        if self.sine_hz is not None:
            f = float(self.sine_hz)
            if not (f > 0 and math.isfinite(f)):
                raise MeasurementError(
                    f"sine frequency must be a positive number of hertz, got {self.sine_hz!r}"
                )
            self.sine_hz = f
        if self.tones_hz is not None:
            tones = [float(f) for f in self.tones_hz]
            if not tones or any(not (f > 0 and math.isfinite(f)) for f in tones):
                raise MeasurementError(
                    f"tone frequencies must be positive numbers of hertz, got {self.tones_hz!r}"
                )
            self.tones_hz = sorted(tones)
        for name in (
            "gain_tolerance_db",
            "phase_tolerance_deg",
            "overshoot_tolerance_pct",
            "time_tolerance_pct",
        ):
            v = float(getattr(self, name))
            if not (v >= 0 and math.isfinite(v)):
                raise MeasurementError(f"{name} must be >= 0, got {v:g}")
            setattr(self, name, v)
        if int(self.block_size) < 16:
            raise MeasurementError(f"block_size must be at least 16 samples, got {self.block_size}")
        self.block_size = int(self.block_size)
        self.max_window_samples = max(int(self.max_window_samples), MIN_WINDOW)

    def to_dict(self) -> dict:
        return {
            "reference_levels_pct": list(self.reference_levels_pct),
            "settling_band_pct": self.settling_band_pct,
            "harmonics": int(self.harmonics),
            "sine_hz": self.sine_hz,
            "tones_hz": self.tones_hz,
            "steady_fraction": self.steady_fraction,
            "state_level_method": self.state_level_method,
            "segment_end_fraction": self.segment_end_fraction,
            "signal_kind": self.signal_kind,
            "reference_channel": self.reference_channel,
            "gain_tolerance_db": self.gain_tolerance_db,
            "phase_tolerance_deg": self.phase_tolerance_deg,
            "overshoot_tolerance_pct": self.overshoot_tolerance_pct,
            "time_tolerance_pct": self.time_tolerance_pct,
            "rest_before_record": bool(self.rest_before_record),
        }
