"""Waveforms in and out: the Waveform type, file readers and writers, test-signal generation."""

from simwave.signals.waveform import Waveform

__all__ = ["Waveform"]
