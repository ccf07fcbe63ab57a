"""From H(s) to a runnable discrete model.

``discretize(system, rate_hz, method)`` returns a :class:`DiscreteSystem`
(second-order sections, exact dead-time delay line, carried filter state,
accuracy report). Methods: see :data:`METHODS`; the default is
``ramp-invariant`` (exact for inputs linear between samples).
"""

from simwave.discrete.filter import INITIAL_MODES, DiscreteSystem, FilterState
from simwave.discrete.methods import DEFAULT_METHOD, METHODS, ModelWarning, discretize

__all__ = [
    "discretize",
    "DiscreteSystem",
    "FilterState",
    "METHODS",
    "DEFAULT_METHOD",
    "INITIAL_MODES",
    "ModelWarning",
    "AccuracyReport",
]


def __getattr__(name: str):
    if name == "AccuracyReport":
        from simwave.discrete.accuracy import AccuracyReport

        return AccuracyReport
    raise AttributeError(name)
