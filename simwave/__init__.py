"""simwave: run real signals through a proposed analog system H(s) and measure the result.

Public API
----------
System      continuous-time model H(s) (zeros/poles/gain core)
Waveform    uniformly sampled multi-channel data with rate and provenance
read, write, blocks, info, open_writer   waveform files (WAV/audio, CSV, HDF5), streamed
generate    test signals
simulate    run a waveform through H(s): the main job
measure     transient and steady-state metrics of a waveform
"""

__version__ = "0.1.0"

from simwave.errors import SimwaveError  # noqa: E402
from simwave.model.system import System  # noqa: E402
from simwave.signals.waveform import Waveform  # noqa: E402
from simwave.signals import blocks, generate, info, open_writer, read, write  # noqa: E402
from simwave.measure import key_metrics, measure  # noqa: E402
from simwave.run import simulate  # noqa: E402

__all__ = [
    "System", "Waveform", "SimwaveError", "__version__",
    "read", "write", "blocks", "info", "open_writer", "generate",
    "simulate", "measure", "key_metrics",
]
