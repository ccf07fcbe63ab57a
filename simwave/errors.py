"""The exceptions simwave raises for problems a user can act on.

Every user-facing failure is a :class:`SimwaveError` (or a subclass). The CLI
prints ``Error: <message>`` on one line and exits with code 2; any other
exception is a bug in simwave.
"""

from __future__ import annotations


class SimwaveError(Exception):
    """A problem with the user's input, named in terms the user can act on."""


class ParseError(SimwaveError):
    """System text (an H(s) expression or an ODE) could not be read."""


class InvalidSystemError(SimwaveError):
    """A system is not valid (improper, empty, absurd order, bad values)."""


class DiscretizationError(SimwaveError):
    """A discretization request is not valid (rate, method, options)."""


class WaveformError(SimwaveError):
    """A waveform file or waveform data is not valid, or cannot be written."""


class MeasurementError(SimwaveError):
    """A measurement request is not valid for the given waveform."""


class BatchError(SimwaveError):
    """A batch description is not valid."""

