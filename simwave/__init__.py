"""simwave: run real signals through a proposed analog system H(s) and measure the result.

Public API
----------
System      continuous-time model H(s) (zeros/poles/gain core)
Waveform    uniformly sampled multi-channel data with rate and provenance
read, write, blocks, info, open_writer   waveform files (WAV/audio, CSV, HDF5), streamed
generate    test signals
simulate    run a waveform through H(s): the main job
measure     transient and steady-state metrics of a waveform

The names are imported on first use (:mod:`simwave.lazy`), so ``import simwave``
does not load numpy and scipy until they are needed.
"""

from __future__ import annotations

import os as _os
from typing import TYPE_CHECKING

from simwave.lazy import lazy_exports

__version__ = "0.1.0"

# HDF5 datasets with external raw storage name their raw files relative to the working
# directory, by the library's default. A reader of a file expects them beside the file:
# "${ORIGIN}" is HDF5's name for the file's own folder (HDF5 docs, H5Pset_efile_prefix;
# the HDF5_EXTFILE_PREFIX variable is read when the library starts, so it is set before
# h5py is first imported). A value the user set is kept.
_os.environ.setdefault("HDF5_EXTFILE_PREFIX", "${ORIGIN}")

__all__ = [
    "System", "Waveform", "SimwaveError", "__version__",
    "read", "write", "blocks", "info", "open_writer", "generate",
    "simulate", "measure", "key_metrics",
]

lazy_exports(__name__, {
    "SimwaveError": "simwave.errors",
    "System": "simwave.model.system",
    "Waveform": "simwave.signals.waveform",
    **dict.fromkeys(("read", "write", "blocks", "info", "open_writer", "generate"),
                    "simwave.signals"),
    "measure": "simwave.measure",
    "key_metrics": "simwave.measure",
    "simulate": "simwave.run",
})

if TYPE_CHECKING:  # for type checkers and editors; nothing is imported at run time
    from simwave.errors import SimwaveError
    from simwave.measure import key_metrics, measure
    from simwave.model.system import System
    from simwave.run import simulate
    from simwave.signals import blocks, generate, info, open_writer, read, write
    from simwave.signals.waveform import Waveform
