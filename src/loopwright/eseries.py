"""IEC 60063 preferred number series E3 ... E192 and rounding of computed part values.

The two-digit series (E3, E6, E12, E24) are historical and deviate from the geometric rule at
eight places, so they are tabulated. The three-digit series (E48, E96, E192) follow
``round(10^(i/n), 2)``, with the single exception E192 index 185 (9.20 instead of 9.19).
Members are stored as integers (``27`` for 2.7, ``909`` for 9.09) and scaled by powers of ten
through decimal strings, so no binary-float drift enters a rounded value.
"""

from __future__ import annotations

import math
from typing import Literal

from loopwright.errors import DesignError

__all__ = [
    "SERIES",
    "RoundingMode",
    "round_to_series",
    "series_members",
    "series_values",
]

RoundingMode = Literal["ratio", "difference", "up", "down"]

# fmt: off
_E24 = (10, 11, 12, 13, 15, 16, 18, 20, 22, 24, 27, 30,
        33, 36, 39, 43, 47, 51, 56, 62, 68, 75, 82, 91)
# fmt: on


def _three_digit(n: int) -> tuple[int, ...]:
    values = [round(10.0 ** (i / n) * 100.0) for i in range(n)]
    if n == 192:
        values[185] = 920  # the standard's one exception to the rule (formula: 919)
    return tuple(values)


#: Series name -> members per decade as integers (two digits for E3-E24, three for E48-E192).
SERIES: dict[str, tuple[int, ...]] = {
    "E3": _E24[::8],
    "E6": _E24[::4],
    "E12": _E24[::2],
    "E24": _E24,
    "E48": _three_digit(48),
    "E96": _three_digit(96),
    "E192": _three_digit(192),
}

_DIGITS = {name: len(str(values[0])) for name, values in SERIES.items()}
_REL_TOL = 1e-12


def _series_name(series: str) -> str:
    name = str(series).strip().upper()
    if name not in SERIES:
        raise DesignError(f"must be one of {', '.join(SERIES)}, got {series!r}", key="series")
    return name


def series_members(series: str) -> tuple[int, ...]:
    """Members of a series per decade as integers, e.g. ``(10, 15, 22, 33, 47, 68)`` for E6.

    Parameters
    ----------
    series : str
        ``"E3"``, ``"E6"``, ``"E12"``, ``"E24"``, ``"E48"``, ``"E96"`` or ``"E192"``.

    Returns
    -------
    tuple of int
        Two-digit integers for E3-E24 (``x 0.1``), three-digit for E48-E192 (``x 0.01``).

    References
    ----------
    .. [1] IEC 60063:2015, *Preferred number series for resistors and capacitors*, Tables 1
       and 2.
    """
    return SERIES[_series_name(series)]


def series_values(series: str) -> tuple[float, ...]:
    """Members of a series in one decade as floats in [1, 10), e.g. ``2.7`` or ``9.09``.

    References
    ----------
    .. [1] IEC 60063:2015, *Preferred number series for resistors and capacitors*.
    """
    name = _series_name(series)
    shift = _DIGITS[name] - 1
    return tuple(float(f"{v}e-{shift}") for v in SERIES[name])


def round_to_series(value: float, series: str, mode: RoundingMode = "ratio") -> float:
    """Round a computed part value to a preferred-number series.

    Parameters
    ----------
    value : float
        Computed value (any unit: ohm, farad, henry), finite and > 0.
    series : str
        Series name, ``"E3"`` ... ``"E192"`` (case-insensitive).
    mode : {"ratio", "difference", "up", "down"}
        ``"ratio"`` (default): nearest in ratio (boundary at the geometric mean of two
        neighbours, matching the logarithmic spacing); ``"difference"``: nearest in difference
        (boundary at the arithmetic mean); ``"up"``: smallest member >= value; ``"down"``:
        largest member <= value. Exact ties go to the larger member.

    Returns
    -------
    float
        The series member, with its decade, as the float nearest its decimal value.

    Raises
    ------
    DesignError
        Unknown series or mode, or a value that is not finite and positive.

    Notes
    -----
    The standard defines the values, not a rounding rule (METHODS sec. 6.3). The value is
    normalised to ``m = value / 10^floor(log10 value)`` in [1, 10) and compared against the
    decade's members plus the neighbours across both decade edges (the last two members / 10,
    and 10 and the second member x 10), so 9.54 can round to 10. Up/down comparisons use a
    relative tolerance of 1e-12.

    References
    ----------
    .. [1] IEC 60063:2015, *Preferred number series for resistors and capacitors*.

    Examples
    --------
    >>> round_to_series(4290.0, "E12"), round_to_series(4290.0, "E12", "difference")
    (4700.0, 3900.0)
    >>> round_to_series(15.2e-9, "E12", "up")
    1.8e-08
    """
    name = _series_name(series)
    if mode not in ("ratio", "difference", "up", "down"):
        raise DesignError(f"must be ratio, difference, up or down, got {mode!r}", key="mode")
    try:
        x = float(value)
    except (TypeError, ValueError) as err:
        raise DesignError(f"must be a positive number, got {value!r}", key="value") from err
    if not (math.isfinite(x) and x > 0):
        raise DesignError(f"must be finite and > 0, got {value!r}", key="value")
    members = SERIES[name]
    digits = _DIGITS[name]
    exponent = math.floor(math.log10(x))
    # guard the decade against log10 rounding at exact powers of ten
    while x < float(f"1e{exponent}"):
        exponent -= 1
    while x >= float(f"1e{exponent + 1}"):
        exponent += 1
    # candidates as (integer mantissa, power of ten) pairs: value = mantissa * 10^power
    base = exponent - (digits - 1)
    candidates = [(members[-2], base - 1), (members[-1], base - 1)]
    candidates += [(v, base) for v in members]
    candidates += [(members[0], base + 1), (members[1], base + 1)]
    numbers = [float(f"{m}e{p}") for m, p in candidates]
    if mode == "up":
        fitting = [v for v in numbers if v >= x * (1.0 - _REL_TOL)]
        return min(fitting)
    if mode == "down":
        fitting = [v for v in numbers if v <= x * (1.0 + _REL_TOL)]
        return max(fitting)
    if mode == "ratio":
        cost = [abs(math.log(v / x)) for v in numbers]
    else:
        cost = [abs(v - x) for v in numbers]
    best = min(cost)
    return max(v for v, c in zip(numbers, cost, strict=True) if c <= best)
