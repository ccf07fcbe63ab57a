"""The continuous-time system model H(s)."""

from simwave.model.system import System

__all__ = ["System"]
