"""Waveforms in and out: the Waveform type, file readers and writers, test-signal generation."""

from simwave.signals.generate import generate, generate_blocks
from simwave.signals.io import (
    WaveformInfo,
    WaveformWarning,
    WaveformWriter,
    blocks,
    info,
    open_writer,
    read,
    write,
)
from simwave.signals.common import WriteResult
from simwave.signals.spec import is_signal_spec, parse_signal_spec
from simwave.signals.waveform import Waveform

__all__ = [
    "Waveform", "read", "write", "blocks", "info", "open_writer", "generate", "generate_blocks",
    "is_signal_spec", "parse_signal_spec", "WaveformInfo", "WaveformWriter", "WriteResult",
    "WaveformWarning",
]
