"""Exceptions and warnings raised by loopwright.

Every error a user can cause with a design file or an argument is a :class:`DesignError`
(a ``ValueError``) whose message names the offending field, the value and the allowed range.
The CLI turns it into a one-line message and exit code 2.
"""

from __future__ import annotations

__all__ = [
    "DesignError",
    "LoopwrightWarning",
    "ModelValidityWarning",
    "DesignWarning",
]


class DesignError(ValueError):
    """Bad input: names the field (``key``), the value and the allowed range."""

    def __init__(self, message: str, *, key: str | None = None):
        self.key = key
        super().__init__(f"{key}: {message}" if key else message)


class LoopwrightWarning(UserWarning):
    """Base class of loopwright's warnings."""


class ModelValidityWarning(LoopwrightWarning):
    """The model is evaluated where its assumptions are doubtful (DCM corner, f near fsw)."""


class DesignWarning(LoopwrightWarning):
    """The design can be computed but looks physically doubtful."""
