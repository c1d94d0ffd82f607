"""Quantities with SI prefixes and units: parsing ``"22 uH"`` and printing ``4.7 uH``.

A design file may give a quantity as a plain number in SI base units (``22e-6``) or as a
string with an optional SI prefix and a unit (``"22 uH"``, ``"22uH"``, ``"10 mohm"``,
``"250 kHz"``). Parsing checks the unit against the one the field expects, so a capacitance
written in henries is an error naming the field.

Units understood: V, A, W, ohm (also Ω), H, F, Hz, s, S (siemens), deg, dB, % and
dimensionless numbers. Prefixes: f p n u µ m k M G T. ``deg``, ``dB`` and ``%`` take no
prefix; ``%`` is returned as a fraction (``"20 %"`` -> 0.2), ``deg`` stays in degrees and
``dB`` stays in decibels, the habit of the trade for margins.
"""

from __future__ import annotations

import math
import re
from typing import Any

from .errors import DesignError

__all__ = ["parse_quantity", "format_eng", "UNITS"]

_PREFIXES = {
    "f": 1e-15,
    "p": 1e-12,
    "n": 1e-9,
    "u": 1e-6,
    "µ": 1e-6,
    "μ": 1e-6,
    "m": 1e-3,
    "": 1.0,
    "k": 1e3,
    "K": 1e3,
    "M": 1e6,
    "G": 1e9,
    "T": 1e12,
}

#: canonical unit symbol -> accepted spellings
UNITS: dict[str, tuple[str, ...]] = {
    "V": ("V",),
    "A": ("A",),
    "W": ("W",),
    "ohm": ("ohm", "ohms", "Ohm", "Ω", "Ω"),
    "H": ("H",),
    "F": ("F",),
    "Hz": ("Hz", "hz"),
    "s": ("s",),
    "S": ("S",),
    "deg": ("deg", "°"),
    "dB": ("dB",),
    "%": ("%",),
    "": ("",),
}
_NO_PREFIX = {"deg", "dB", "%"}

_SPELLING = {sp: canon for canon, sps in UNITS.items() for sp in sps}
_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_PATTERN = re.compile(rf"^\s*({_NUMBER})\s*([^\d\s.+-]*?)\s*$")


def _split_unit(tail: str) -> tuple[float, str] | None:
    """Split ``'kHz'`` into (1e3, 'Hz'); ``None`` when no reading exists."""
    if tail in _SPELLING:
        # a bare prefix letter that is also a unit symbol ("m" is not a unit here, "S" is)
        return 1.0, _SPELLING[tail]
    for n in (1,):
        prefix, rest = tail[:n], tail[n:]
        if prefix in _PREFIXES and rest in _SPELLING and _SPELLING[rest] not in _NO_PREFIX:
            if rest == "":
                return _PREFIXES[prefix], ""
            return _PREFIXES[prefix], _SPELLING[rest]
    if tail in _PREFIXES:
        return _PREFIXES[tail], ""
    return None


def parse_quantity(
    value: Any,
    unit: str,
    *,
    key: str,
    allow_bare: bool = True,
) -> float:
    """Parse a design-file quantity into SI units.

    Parameters
    ----------
    value : str or float or int
        ``"22 uH"``, ``"22uH"``, ``22e-6`` or ``"1.5"``.
    unit : str
        The unit the field expects: one of :data:`UNITS` (``""`` for dimensionless).
    key : str
        Dotted name of the field, used in error messages.
    allow_bare : bool
        Accept a string or number without unit as a value in SI base units.

    Returns
    -------
    float
        The value in SI base units (``%`` as a fraction, ``deg`` in degrees, ``dB`` in dB).

    Raises
    ------
    DesignError
        When the value is not a number, carries a wrong unit, or is not finite.

    Examples
    --------
    >>> parse_quantity("22 uH", "H", key="L")
    2.2e-05
    >>> parse_quantity("250kHz", "Hz", key="fsw")
    250000.0
    >>> parse_quantity("20 %", "%", key="tol")
    0.2
    """
    if isinstance(value, bool):
        raise DesignError(
            f"expected a quantity in {unit or 'plain numbers'}, got {value!r}", key=key
        )
    if isinstance(value, int | float):
        number = float(value)
        if unit == "%":
            # a bare number for a percentage field is a fraction (0.2 = 20 %)
            pass
        scale = 1.0
    elif isinstance(value, str):
        m = _PATTERN.match(value)
        if not m:
            raise DesignError(
                f"cannot read {value!r} as a quantity; write e.g. '22 uH' or a plain number "
                f"in SI units ({unit or 'dimensionless'})",
                key=key,
            )
        number = float(m.group(1))
        tail = m.group(2)
        split = _split_unit(tail)
        if split is None:
            raise DesignError(
                f"unknown unit {tail!r} in {value!r}; expected {unit or 'a plain number'}",
                key=key,
            )
        scale, got = split
        if got == "" and tail == "":
            if not allow_bare:
                raise DesignError(f"{value!r} needs a unit ({unit})", key=key)
        elif got == "" and unit in _NO_PREFIX:
            raise DesignError(f"{value!r}: expected a value in {unit}", key=key)
        elif got != "" and got != unit:
            raise DesignError(
                f"{value!r} is in {got}, expected {unit or 'a plain number'}", key=key
            )
        if got == "%":
            scale = 0.01
    else:
        raise DesignError(
            f"expected a number or a string like '22 uH', got {type(value).__name__}", key=key
        )
    result = number * scale
    if not math.isfinite(result):
        raise DesignError(f"{value!r} is not a finite number", key=key)
    return result


_ENG = [
    (1e12, "T"),
    (1e9, "G"),
    (1e6, "M"),
    (1e3, "k"),
    (1.0, ""),
    (1e-3, "m"),
    (1e-6, "u"),
    (1e-9, "n"),
    (1e-12, "p"),
    (1e-15, "f"),
]


def format_eng(value: float | None, unit: str = "", digits: int = 4) -> str:
    """Format a number in engineering notation: ``format_eng(4.7e-6, 'H') == '4.7 uH'``.

    ``None`` and NaN print as ``"-"``; infinities as ``"inf"``. Degrees, dB and % are printed
    without a prefix.

    Examples
    --------
    >>> format_eng(4.7e-6, "H")
    '4.7 uH'
    >>> format_eng(250e3, "Hz")
    '250 kHz'
    >>> format_eng(0.0153, "ohm")
    '15.3 mohm'
    """
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    value = float(value)
    if math.isinf(value):
        return ("-inf" if value < 0 else "inf") + (f" {unit}" if unit else "")
    if unit in _NO_PREFIX:
        return f"{value:.{max(digits - 2, 1)}f} {unit}" if unit != "%" else f"{100 * value:.3g} %"
    if value == 0.0:
        return f"0 {unit}".strip()
    mag = abs(value)
    for scale, prefix in _ENG:  # noqa: B007 (the loop variables are used after it)
        if mag >= scale * (1 - 0.5 * 10 ** (-digits)):
            break
    else:
        scale, prefix = _ENG[-1]
    text = f"{value / scale:.{digits}g}"
    return f"{text} {prefix}{unit}".rstrip()
