"""Op-amp and transconductance (OTA) networks that realise a compensator, and their parts.

Op-amp networks (inverting, reference on the non-inverting input): the input resistor ``R1`` is
the top resistor of the output divider; the bottom resistor sits at the virtual ground and
carries no small-signal current. The network's transfer function ``Zf/Zi`` from ``vo``
therefore equals ``H Gc(s)``: the divider ratio ``H`` is counted once, inside the network, and
the loop ``T = Gc Fm Gvd H`` is realised exactly.

* type I:   ``Zi = R1``, ``Zf = 1/(s C1)``
* type II:  ``Zi = R1``, ``Zf = C2 || (R2 + 1/(s C1))``
* type III: ``Zi = R1 || (R3 + 1/(s C3))``, ``Zf = C2 || (R2 + 1/(s C1))``

OTA type II: transconductance ``gm`` driven from the divider output (``H`` is part of its
gain), output network ``R`` in series with ``C1``, in parallel with ``C2``, to ground; from the
sensed node its transfer function is ``gm Z(s) = Gc(s)``. It is the op-amp type II with ``R1``
replaced by ``1/(gm H)``.

Practical part ranges (this module's choice; outside them a :class:`DesignWarning` is issued):
resistors 100 ohm ... 10 Mohm (below, the network loads the op-amp output and the divider;
above, bias current, leakage and noise dominate) and capacitors 10 pF ... 10 uF (below, the
amplifier's input and board capacitances of a few pF are comparable; above, only large,
drifting dielectrics remain).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Literal

from loopwright._checks import positive
from loopwright.compensators.base import Compensator
from loopwright.errors import DesignError, DesignWarning
from loopwright.eseries import RoundingMode, round_to_series
from loopwright.quantities import format_eng

__all__ = [
    "CAPACITOR_RANGE_F",
    "RESISTOR_RANGE_OHM",
    "Realization",
    "compensator_from_components",
    "realize",
    "realize_opamp",
    "realize_ota",
]

#: Practical resistor range [ohm]; values outside draw a DesignWarning.
RESISTOR_RANGE_OHM = (100.0, 10e6)
#: Practical capacitor range [F]; values outside draw a DesignWarning.
CAPACITOR_RANGE_F = (10e-12, 10e-6)

Network = Literal["op-amp", "ota"]


def _divider(h) -> float:
    v = positive(h, "h")
    if v > 1.0:
        raise DesignError(f"divider ratio must be in (0, 1], got {h!r}", key="h")
    return v


def _fmt(value: float, unit: str) -> str:
    return format_eng(value, unit)


def _check_practical(components: dict[str, float], stacklevel: int) -> None:
    issues = []
    for name, value in components.items():
        if name == "gm":
            continue
        if name.startswith("R"):
            lo, hi = RESISTOR_RANGE_OHM
            unit = "ohm"
        else:
            lo, hi = CAPACITOR_RANGE_F
            unit = "F"
        if not lo <= value <= hi:
            issues.append(f"{name} = {_fmt(value, unit)}")
    if issues:
        warnings.warn(
            "impractical part value(s): "
            + ", ".join(issues)
            + f" (practical: R {_fmt(RESISTOR_RANGE_OHM[0], 'ohm')} .. "
            f"{_fmt(RESISTOR_RANGE_OHM[1], 'ohm')}, C {_fmt(CAPACITOR_RANGE_F[0], 'F')} .. "
            f"{_fmt(CAPACITOR_RANGE_F[1], 'F')}); choose another R1 or gm, or another crossover",
            DesignWarning,
            stacklevel=stacklevel,
        )


@dataclass(frozen=True)
class Realization:
    """Parts of a compensator network.

    Attributes
    ----------
    network : {"op-amp", "ota"}
        Inverting op-amp network or transconductance amplifier network.
    kind : {"type1", "type2", "type3"}
        Compensator type realised.
    h : float
        Divider ratio ``H = vref/|vout|`` the network was sized for. [-]
    components : dict of str to float
        Parts as fitted: ``"R1", "R2", "R3"`` [ohm], ``"C1", "C2", "C3"`` [F] for the op-amp
        networks (type I: R1, C1; type II: R1, R2, C1, C2); ``"gm"`` [S], ``"R"`` [ohm],
        ``"C1", "C2"`` [F] for the OTA.
    ideal_components : dict of str to float
        The exact values before any rounding (same keys).
    series_r, series_c : str or None
        E series the resistors / capacitors were rounded to (``None``: not rounded).

    Notes
    -----
    ``R1`` and ``gm`` are inputs (R1 also sets the output voltage with the divider's bottom
    resistor), so rounding leaves them as given.
    """

    network: Network
    kind: str
    h: float
    components: dict[str, float] = field(default_factory=dict)
    ideal_components: dict[str, float] = field(default_factory=dict)
    series_r: str | None = None
    series_c: str | None = None

    def rounded(
        self,
        series_r: str = "E96",
        series_c: str = "E12",
        *,
        series: str | None = None,
        mode: RoundingMode = "ratio",
    ) -> Realization:
        """The same network with parts rounded to preferred-number series.

        Parameters
        ----------
        series_r : str, optional
            Series for the resistors (R2, R3, R), default E96.
        series_c : str, optional
            Series for the capacitors, default E12.
        series : str, optional
            One series for all parts (overrides both).
        mode : {"ratio", "difference", "up", "down"}
            Rounding rule of :func:`loopwright.eseries.round_to_series`.

        Returns
        -------
        Realization
            ``components`` rounded, ``ideal_components`` kept.

        References
        ----------
        .. [1] IEC 60063:2015, *Preferred number series for resistors and capacitors*.
        """
        if series is not None:
            series_r = series_c = series
        parts = {}
        for name, value in self.ideal_components.items():
            if name in ("R1", "gm"):
                parts[name] = value
            elif name.startswith("R"):
                parts[name] = round_to_series(value, series_r, mode)
            else:
                parts[name] = round_to_series(value, series_c, mode)
        return Realization(
            self.network,
            self.kind,
            self.h,
            parts,
            dict(self.ideal_components),
            series_r.upper(),
            series_c.upper(),
        )

    def compensator(self) -> Compensator:
        """The compensator these parts realise exactly (see :func:`compensator_from_components`)."""
        return compensator_from_components(self.kind, self.components, self.h)


def realize_opamp(comp: Compensator, r1: float, h: float = 1.0) -> Realization:
    """Op-amp network for ``H Gc(s)`` with the given divider-top resistor ``R1``.

    Parameters
    ----------
    comp : Compensator
        Compensator ``Gc`` (after the divider).
    r1 : float
        Input resistor = top resistor of the output divider. [ohm]
    h : float, optional
        Divider ratio ``H`` in (0, 1]; the network realises ``H Gc`` (pass 1 when ``Gc`` was
        designed from ``vo``). [-]

    Returns
    -------
    Realization

    Raises
    ------
    DesignError
        A pole at or below its zero (the network needs ``wp > wz`` in each branch), or bad
        inputs.

    Warns
    -----
    DesignWarning
        A part outside :data:`RESISTOR_RANGE_OHM` / :data:`CAPACITOR_RANGE_F`.

    Notes
    -----
    METHODS sec. 4.4 (general synthesis, derived from the network transfer functions of
    sec. 4.2): with ``wI = H w_i``, ``C1 + C2 = 1/(R1 wI)``, ``C2 = (C1 + C2) wz1/wp1``,
    ``R2 = 1/(wz1 C1)``; type III input branch ``R3 = R1 wz2/(wp2 - wz2)``,
    ``C3 = 1/(wp2 R3)``. The lower zero pairs with the lower pole in the feedback branch, the
    higher pair goes to the input branch; this pairing works whenever any pairing does.
    For a K-factor design the values equal Venable's component equations.

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis", Proc. Powercon 10, San Diego, 1983 (network equations recalled).
    .. [2] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.5.

    Examples
    --------
    >>> import math
    >>> gc = Compensator("type2", 2 * math.pi * 1e3, (2 * math.pi * 2e3,), (2 * math.pi * 50e3,))
    >>> parts = realize_opamp(gc, 10e3).components
    >>> round(parts["R2"], 2), round(parts["C1"] * 1e9, 4), round(parts["C2"] * 1e12, 2)
    (5208.33, 15.2789, 636.62)
    """
    if not isinstance(comp, Compensator):
        raise DesignError(f"must be a Compensator, got {type(comp).__name__}", key="comp")
    r1v = positive(r1, "r1")
    hv = _divider(h)
    w_net = hv * comp.w_i
    parts: dict[str, float] = {"R1": r1v}
    total = 1.0 / (r1v * w_net)
    if comp.kind == "type1":
        parts["C1"] = total
    else:
        zeros = sorted(comp.zeros_rad)
        poles = sorted(comp.poles_rad)
        for i, (wz, wp) in enumerate(zip(zeros, poles, strict=True)):
            if not wp > wz:
                raise DesignError(
                    f"the {comp.kind} network needs each pole above its zero, but zeros "
                    f"{_hz_list(zeros)} and poles {_hz_list(poles)} leave pole {i + 1} at or "
                    f"below zero {i + 1}; move the pole above the zero",
                    key="comp",
                )
        wz1, wp1 = zeros[0], poles[0]
        c2 = total * wz1 / wp1
        c1 = total - c2
        parts.update(R2=1.0 / (wz1 * c1), C1=c1, C2=c2)
        if comp.kind == "type3":
            wz2, wp2 = zeros[1], poles[1]
            r3 = r1v * wz2 / (wp2 - wz2)
            parts.update(R3=r3, C3=1.0 / (wp2 * r3))
    _check_practical(parts, stacklevel=3)
    return Realization("op-amp", comp.kind, hv, dict(parts), dict(parts))


def realize_ota(comp: Compensator, gm: float, h: float) -> Realization:
    """Transconductance-amplifier type II network for ``Gc(s)``.

    Parameters
    ----------
    comp : Compensator
        Type II compensator ``Gc`` (after the divider).
    gm : float
        Error-amplifier transconductance. [S]
    h : float
        Divider ratio in (0, 1] (part of the network's gain from ``vo``). [-]

    Returns
    -------
    Realization
        Components ``"gm", "R", "C1", "C2"``.

    Raises
    ------
    DesignError
        Not a type II compensator, pole not above the zero, or bad inputs.

    Notes
    -----
    From the sensed node the network is ``gm (1 + s R C1)/(s (C1 + C2)(1 + s R C1 C2/(C1 +
    C2)))`` (METHODS sec. 4.3), so ``C1 + C2 = gm / w_i``, ``C2 = (C1 + C2) wz/wp``,
    ``R = 1/(wz C1)``; the op-amp type II with ``R1 = 1/(gm H)``. The amplifier's output
    resistance (a pole near ``1/(Ro (C1 + C2))`` instead of the integrator) is ignored.

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis", Proc. Powercon 10, San Diego, 1983 (recalled).
    """
    if not isinstance(comp, Compensator):
        raise DesignError(f"must be a Compensator, got {type(comp).__name__}", key="comp")
    if comp.kind != "type2":
        raise DesignError(f"the OTA network realises type2 only, got {comp.kind!r}", key="comp")
    gmv = positive(gm, "gm")
    hv = _divider(h)
    wz, wp = comp.zeros_rad[0], comp.poles_rad[0]
    if not wp > wz:
        raise DesignError(
            f"the OTA network needs the pole ({wp / (2 * math.pi):.6g} Hz) above the zero "
            f"({wz / (2 * math.pi):.6g} Hz)",
            key="comp",
        )
    total = gmv / comp.w_i
    c2 = total * wz / wp
    c1 = total - c2
    parts = {"gm": gmv, "R": 1.0 / (wz * c1), "C1": c1, "C2": c2}
    _check_practical(parts, stacklevel=3)
    return Realization("ota", "type2", hv, dict(parts), dict(parts))


def realize(
    comp: Compensator,
    h: float,
    *,
    network: Network = "op-amp",
    r1: float | None = None,
    gm: float | None = None,
) -> Realization:
    """Realise a compensator as an op-amp network (needs ``r1``) or an OTA network (``gm``).

    See :func:`realize_opamp` and :func:`realize_ota`.

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis", Proc. Powercon 10, San Diego, 1983 (recalled).
    """
    if network == "op-amp":
        if r1 is None:
            raise DesignError("the op-amp network needs the input resistor r1", key="r1")
        return realize_opamp(comp, r1, h)
    if network == "ota":
        if gm is None:
            raise DesignError("the OTA network needs the transconductance gm", key="gm")
        return realize_ota(comp, gm, h)
    raise DesignError(f"must be 'op-amp' or 'ota', got {network!r}", key="network")


def _hz_list(values) -> str:
    return "(" + ", ".join(f"{v / (2 * math.pi):.6g} Hz" for v in values) + ")"


def compensator_from_components(kind: str, components: dict[str, float], h: float) -> Compensator:
    """The compensator ``Gc`` a network with these parts realises (exactly).

    Parameters
    ----------
    kind : {"type1", "type2", "type3"}
        Network type.
    components : dict of str to float
        Op-amp parts ``R1, C1`` (type I), ``R1, R2, C1, C2`` (type II), plus ``R3, C3``
        (type III) [ohm, F]; or OTA parts ``gm, R, C1, C2`` [S, ohm, F] (recognised by
        ``"gm"``).
    h : float
        Divider ratio in (0, 1]. [-]

    Returns
    -------
    Compensator
        ``strategy="parts"``: ``w_i = 1/(H R1 (C1 + C2))`` (OTA: ``gm/(C1 + C2)``),
        ``wz1 = 1/(R2 C1)``, ``wp1 = (C1 + C2)/(R2 C1 C2)``, ``wz2 = 1/((R1 + R3) C3)``,
        ``wp2 = 1/(R3 C3)``: the network transfer functions of METHODS sec. 4.2 divided by
        ``H``.

    Raises
    ------
    DesignError
        Missing or non-positive parts, unknown kind.

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis", Proc. Powercon 10, San Diego, 1983 (network transfer functions recalled;
       re-derived by circuit analysis).
    """
    hv = _divider(h)
    if kind not in ("type1", "type2", "type3"):
        raise DesignError(f"must be type1, type2 or type3, got {kind!r}", key="kind")

    def part(name: str) -> float:
        if name not in components:
            raise DesignError(f"missing part {name} for a {kind} network", key="components")
        return positive(components[name], f"components.{name}")

    if "gm" in components:
        if kind != "type2":
            raise DesignError(f"the OTA network is type2, got {kind!r}", key="kind")
        gmv, r, c1, c2 = part("gm"), part("R"), part("C1"), part("C2")
        return Compensator(
            "type2",
            gmv / (c1 + c2),
            (1.0 / (r * c1),),
            ((c1 + c2) / (r * c1 * c2),),
            strategy="parts",
        )
    r1, c1 = part("R1"), part("C1")
    if kind == "type1":
        return Compensator("type1", 1.0 / (hv * r1 * c1), strategy="parts")
    r2, c2 = part("R2"), part("C2")
    zeros = [1.0 / (r2 * c1)]
    poles = [(c1 + c2) / (r2 * c1 * c2)]
    if kind == "type3":
        r3, c3 = part("R3"), part("C3")
        zeros.append(1.0 / ((r1 + r3) * c3))
        poles.append(1.0 / (r3 * c3))
    return Compensator(kind, 1.0 / (hv * r1 * (c1 + c2)), tuple(zeros), tuple(poles), "parts")
