"""Domain exceptions of the inference package.

Every exception carries one sentence that says what was wrong, where, and how to fix it.
"""

__all__ = ["InferenceError", "ModelError", "RVDataError"]


class InferenceError(ValueError):
    """Base class of the user-facing errors raised by :mod:`inference`."""


class RVDataError(InferenceError):
    """Radial-velocity input that cannot be used (names the file, line and column)."""


class ModelError(InferenceError):
    """A model, prior, parameter value or setting that cannot be used."""
