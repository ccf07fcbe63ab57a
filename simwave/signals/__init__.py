"""Waveforms in and out: the Waveform type, file readers and writers, test-signal generation."""

from simwave.lazy import lazy_exports

__all__ = [
    "Waveform", "read", "write", "blocks", "info", "open_writer", "generate", "generate_blocks",
    "is_signal_spec", "parse_signal_spec", "WaveformInfo", "WaveformWriter", "WriteResult",
    "WaveformWarning",
]

lazy_exports(__name__, {
    "generate": "simwave.signals.generate",
    "generate_blocks": "simwave.signals.generate",
    **dict.fromkeys(("WaveformInfo", "WaveformWarning", "WaveformWriter", "blocks", "info",
                     "open_writer", "read", "write"), "simwave.signals.io"),
    "WriteResult": "simwave.signals.common",
    "is_signal_spec": "simwave.signals.spec",
    "parse_signal_spec": "simwave.signals.spec",
    "Waveform": "simwave.signals.waveform",
})
