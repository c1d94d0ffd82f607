"""Type III placement at the LC resonance (the common-practice alternative to the K factor).

Strategy ``"resonance"``: the two compensator zeros sit at the output filter's double pole
``f0`` (variant: one at ``f0/2``, one at ``f0``), the first high-frequency pole at the ESR zero
when it lies below ``fsw/2`` (else at ``fsw/2``), the second at the lower of the right-half-plane
zero and ``fsw/2``; the integrator gain sets ``|T(j wc)| = 1``. The phase margin is whatever
this placement gives; unlike the K factor, it does not dip below -180 deg between ``f0`` and
the zeros, so a high-Q plant is not made conditionally stable.

Also here: the usual ceiling on the crossover frequency (``fsw/10`` and ``f_RHPz/3``).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Literal

from loopwright._checks import positive
from loopwright.compensators.base import Compensator
from loopwright.errors import DesignError, DesignWarning

__all__ = [
    "STRATEGIES",
    "CrossoverCeiling",
    "crossover_ceiling",
    "rhp_zero_phase_deg",
    "synthesize_resonance",
]

#: Names of the synthesis strategies: Venable's K factor and placement at the LC resonance.
STRATEGIES: tuple[str, ...] = ("k-factor", "resonance")


def synthesize_resonance(
    plant_at_fc: complex,
    f_c_hz: float,
    f0_hz: float,
    f_sw_hz: float,
    *,
    f_esr_hz: float | None = None,
    f_rhp_hz: float | None = None,
    zeros: Literal["double", "staggered"] = "double",
) -> Compensator:
    """Type III with zeros at the LC double pole and poles at the ESR zero and ``fsw/2``.

    Parameters
    ----------
    plant_at_fc : complex
        ``P(j wc) = Fm Gvd(j wc) H`` (with any delay), sign-corrected. [-]
    f_c_hz : float
        Crossover frequency. [Hz]
    f0_hz : float
        LC double-pole frequency of the power stage (at the design corner). [Hz]
    f_sw_hz : float
        Switching frequency. [Hz]
    f_esr_hz : float, optional
        Output-capacitor ESR zero; ``None`` (no ESR) places the first pole at ``fsw/2``. [Hz]
    f_rhp_hz : float, optional
        Right-half-plane zero (boost, buck-boost), lowest over the corners. [Hz]
    zeros : {"double", "staggered"}
        ``"double"``: both zeros at ``f0``; ``"staggered"``: one at ``f0/2``, one at ``f0``.

    Returns
    -------
    Compensator
        ``kind="type3"``, ``strategy="resonance"``, ``k=None``.

    Raises
    ------
    DesignError
        Non-positive frequencies, ``f0_hz >= fsw/2`` or a crossover at or beyond ``fsw/2``.

    Warns
    -----
    DesignWarning
        Crossover below ``2 f0`` (the loop would cross where the LC phase swings) or above
        either pole.

    Notes
    -----
    Common practice (METHODS sec. 5.1, rule R5): ``Gc(s) = wI (1 + s/wz1)(1 + s/wz2) /
    (s (1 + s/wp1)(1 + s/wp2))`` with ``wz = 2 pi f0``, ``wp1 = 2 pi min(f_esr, fsw/2)``,
    ``wp2 = 2 pi min(f_rhp, fsw/2)``; ``wI = 1 / |P(j wc) shape(j wc)|``.

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.5.4 (PID compensator about a resonant plant; recalled).

    Examples
    --------
    >>> import numpy as np
    >>> gc = synthesize_resonance(0.296403 * np.exp(-1j * np.radians(153.3438)), 25e3,
    ...                           3393.195, 250e3, f_esr_hz=53051.65)
    >>> round(gc.w_i, 1), gc.strategy
    (10807.1, 'resonance')
    """
    p = complex(plant_at_fc)
    if not (math.isfinite(p.real) and math.isfinite(p.imag)) or p == 0:
        raise DesignError(f"must be finite and non-zero, got {plant_at_fc!r}", key="plant_at_fc")
    fc = positive(f_c_hz, "f_c_hz")
    f0 = positive(f0_hz, "f0_hz")
    fsw = positive(f_sw_hz, "f_sw_hz")
    half = fsw / 2.0
    if f0 >= half:
        raise DesignError(f"must be below fsw/2 = {half:g} Hz, got {f0:g} Hz", key="f0_hz")
    if fc >= half:
        raise DesignError(f"must be below fsw/2 = {half:g} Hz, got {fc:g} Hz", key="f_c_hz")
    if zeros not in ("double", "staggered"):
        raise DesignError(f"must be 'double' or 'staggered', got {zeros!r}", key="zeros")
    fp1 = half if f_esr_hz is None else min(positive(f_esr_hz, "f_esr_hz"), half)
    fp2 = half if f_rhp_hz is None else min(positive(f_rhp_hz, "f_rhp_hz"), half)
    fz = (f0, f0) if zeros == "double" else (0.5 * f0, f0)
    if fc < 2.0 * f0:
        warnings.warn(
            f"crossover {fc:g} Hz is below 2 f0 = {2 * f0:g} Hz: the loop crosses where the LC "
            "phase swings fast",
            DesignWarning,
            stacklevel=2,
        )
    if fc >= min(fp1, fp2):
        warnings.warn(
            f"crossover {fc:g} Hz is at or above a compensator pole ({min(fp1, fp2):g} Hz): "
            "little phase boost is left at crossover",
            DesignWarning,
            stacklevel=2,
        )
    two_pi = 2.0 * math.pi
    zeros_rad = tuple(two_pi * f for f in fz)
    poles_rad = tuple(sorted((two_pi * fp1, two_pi * fp2)))
    shape = Compensator("type3", 1.0, zeros_rad, poles_rad, strategy="resonance")
    w_i = 1.0 / abs(p * shape.freqresp(two_pi * fc))
    return Compensator("type3", w_i, zeros_rad, poles_rad, strategy="resonance", k=None)


@dataclass(frozen=True)
class CrossoverCeiling:
    """Upper limit on the crossover frequency from the usual rules.

    Attributes
    ----------
    f_c_max_hz : float
        ``min(fsw / sw_divisor, f_rhp / rhp_divisor)``. [Hz]
    limited_by : str
        ``"switching"`` or ``"rhp-zero"``.
    rhp_phase_deg : float
        Phase of the right-half-plane zero ``(1 - s/wz)`` at ``f_c_max_hz`` (0 without one). [deg]
    """

    f_c_max_hz: float
    limited_by: str
    rhp_phase_deg: float


def rhp_zero_phase_deg(f_hz: float, f_rhp_hz: float) -> float:
    """Phase of a right-half-plane zero factor ``(1 - s/wz)`` at ``f_hz``: ``-atan(f/fz)`` [deg].

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 8.1.5 (right half-plane zero).
    """
    f = float(f_hz)
    if not (math.isfinite(f) and f >= 0):
        raise DesignError(f"must be finite and >= 0, got {f_hz!r}", key="f_hz")
    return -math.degrees(math.atan(f / positive(f_rhp_hz, "f_rhp_hz")))


def crossover_ceiling(
    f_sw_hz: float,
    *,
    f_rhp_hz: float | None = None,
    sw_divisor: float = 10.0,
    rhp_divisor: float = 3.0,
) -> CrossoverCeiling:
    """Highest crossover the usual rules allow: ``fsw/10`` and ``f_RHPz/3``.

    Parameters
    ----------
    f_sw_hz : float
        Switching frequency. [Hz]
    f_rhp_hz : float, optional
        Lowest right-half-plane zero over the corners (minimum input, full load). [Hz]
    sw_divisor : float, optional
        ``fc <= fsw / sw_divisor``; 10 by default (5 is used by some designers). [-]
    rhp_divisor : float, optional
        ``fc <= f_RHPz / rhp_divisor``; 3 by default (3 ... 5 in use). [-]

    Returns
    -------
    CrossoverCeiling

    Notes
    -----
    Common practice (METHODS sec. 5.1, rules R1 and R2); the averaged model loses accuracy
    towards ``fsw/2`` [1]_.

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, ch. 7 (averaging assumptions; recalled).
    """
    fsw = positive(f_sw_hz, "f_sw_hz")
    swd = positive(sw_divisor, "sw_divisor")
    if swd < 2.0:
        raise DesignError(f"must be >= 2 (crossover below fsw/2), got {swd!r}", key="sw_divisor")
    rd = positive(rhp_divisor, "rhp_divisor")
    f_sw_lim = fsw / swd
    if f_rhp_hz is None:
        return CrossoverCeiling(f_sw_lim, "switching", 0.0)
    fz = positive(f_rhp_hz, "f_rhp_hz")
    f_rhp_lim = fz / rd
    if f_rhp_lim < f_sw_lim:
        return CrossoverCeiling(f_rhp_lim, "rhp-zero", rhp_zero_phase_deg(f_rhp_lim, fz))
    return CrossoverCeiling(f_sw_lim, "switching", rhp_zero_phase_deg(f_sw_lim, fz))
