"""From H(s) to a runnable discrete model.

``discretize(system, rate_hz, method)`` returns a :class:`DiscreteSystem`
(second-order sections, exact dead-time delay line, carried filter state,
accuracy report). Methods: see :data:`METHODS`; the default is
``ramp-invariant`` (exact for inputs linear between samples).
"""

from simwave.discrete.names import DEFAULT_METHOD, METHODS
from simwave.lazy import lazy_exports

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


lazy_exports(__name__, {
    **dict.fromkeys(("INITIAL_MODES", "DiscreteSystem", "FilterState"), "simwave.discrete.filter"),
    "ModelWarning": "simwave.discrete.methods",
    "discretize": "simwave.discrete.methods",
    "AccuracyReport": "simwave.discrete.accuracy",
})
