"""Argument checks shared by the library's public functions."""

from __future__ import annotations

import math
from typing import Any

from .errors import DesignError

__all__ = ["positive"]


def positive(value: Any, key: str, *, upper: float | None = None) -> float:
    """``value`` as a float that is finite, > 0 and (optionally) below ``upper``.

    Raises
    ------
    DesignError
        Naming ``key``, the value and the allowed range.
    """
    try:
        v = float(value)
    except (TypeError, ValueError) as err:
        raise DesignError(f"must be a positive number, got {value!r}", key=key) from err
    if not (math.isfinite(v) and v > 0 and (upper is None or v < upper)):
        rng = f"(0, {upper:g})" if upper is not None else "(0, inf)"
        raise DesignError(f"must be finite and in {rng}, got {value!r}", key=key)
    return v
