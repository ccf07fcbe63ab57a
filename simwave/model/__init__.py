"""The continuous-time system model H(s)."""

from simwave.lazy import lazy_exports

__all__ = ["System"]

lazy_exports(__name__, {"System": "simwave.model.system"})
