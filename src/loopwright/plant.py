"""The power stage of a design at its nominal point and every corner.

This is where a design file meets the averaging engine: for each corner (line x load x
component tolerance) it solves the operating point with losses, decides the conduction mode,
and returns the averaged small-signal model -- or, at a corner where a diode rectifier runs in
discontinuous conduction, says so and withholds the CCM model (it does not hold there).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from .averaging import TRANSFER_NAMES, AveragedModel, OperatingPoint, analyze_stage
from .errors import ModelValidityWarning
from .quantities import format_eng
from .spec import Corner, DesignSpec, corners
from .topologies import TOPOLOGIES

__all__ = ["CornerPlant", "PlantAnalysis", "analyze_corner", "analyze_plant"]


@dataclass(frozen=True)
class CornerPlant:
    """Power stage at one corner.

    Attributes
    ----------
    corner : Corner
        Line, load, component scale factors and the corner's name.
    op : OperatingPoint
        Operating point (for a DCM corner: duty from the ideal DCM relation, no efficiency).
    model : AveragedModel or None
        CCM averaged model; ``None`` where the corner is in DCM.
    warnings : tuple of str
        What the user must know about this corner.
    """

    corner: Corner
    op: OperatingPoint
    model: AveragedModel | None
    warnings: tuple[str, ...] = ()

    @property
    def valid(self) -> bool:
        """True when the CCM averaged model holds here."""
        return self.model is not None

    def to_dict(self) -> dict:
        c = self.corner
        d = {
            "name": c.name,
            "vin": c.v_in,
            "iout": c.i_out,
            "l_scale": c.l_scale,
            "c_scale": c.c_scale,
            "operating_point": self.op.to_dict(),
            "transfer_functions": None,
            "warnings": list(self.warnings),
        }
        if self.model is not None:
            d["transfer_functions"] = {n: self.model.features(n).to_dict() for n in TRANSFER_NAMES}
        return d


@dataclass(frozen=True)
class PlantAnalysis:
    """Nominal point and corners of a design's power stage."""

    spec: DesignSpec
    nominal: CornerPlant
    corners: tuple[CornerPlant, ...]

    @property
    def warnings(self) -> list[str]:
        out: list[str] = []
        for cp in (self.nominal, *self.corners):
            out.extend(f"{cp.corner.name}: {w}" for w in cp.warnings)
        return out

    def valid_corners(self) -> list[CornerPlant]:
        """Nominal and every corner where the CCM model holds."""
        return [cp for cp in (self.nominal, *self.corners) if cp.valid]

    def lowest_rhp_zero_hz(self) -> float | None:
        """Lowest right-half-plane zero of ``Gvd`` over all valid corners. [Hz]"""
        z = [
            cp.model.features().rhp_zero_hz
            for cp in self.valid_corners()
            if cp.model.features().rhp_zero_hz is not None
        ]
        return min(z) if z else None

    def to_dict(self) -> dict:
        n = self.nominal.to_dict()
        return {
            "name": self.spec.name,
            "topology": self.spec.power_stage.topology,
            "operating_point": n["operating_point"],
            "transfer_functions": n["transfer_functions"],
            "corners": [cp.to_dict() for cp in self.corners],
            "warnings": self.warnings,
        }


# average inductor current per unit load current with ideal parts, by power balance
_DCM_IL_PER_IOUT = {"buck": lambda m: 1.0, "boost": lambda m: m, "buck-boost": lambda m: 1.0 + m}


def analyze_corner(spec: DesignSpec, corner: Corner) -> CornerPlant:
    """Operating point and averaged model of the design's power stage at one corner.

    A diode-rectified corner whose average inductor current falls below half its ripple is
    in discontinuous conduction (equivalently ``K < Kcrit(D)`` of Erickson & Maksimovic,
    ch. 5, for ideal parts): the CCM model is withheld, the duty is estimated from the ideal
    DCM conversion ratio, and a :class:`ModelValidityWarning` is issued.
    """
    ps = spec.power_stage
    topo = TOPOLOGIES[ps.topology]
    params = ps.parameters(i_out=corner.i_out, l_scale=corner.l_scale, c_scale=corner.c_scale)
    model = analyze_stage(topo, params, v_in=corner.v_in, v_out=ps.v_out, f_sw=ps.f_sw)
    notes: list[str] = []
    if model.op.mode == "dcm":
        m = ps.v_out / corner.v_in
        k = model.op.k
        duty = topo.dcm_duty(m, k) if topo.dcm_duty else math.nan
        op = OperatingPoint(
            duty=duty,
            v_in=corner.v_in,
            v_out=-ps.v_out if topo.inverting else ps.v_out,
            i_out=corner.i_out,
            i_l_avg=corner.i_out * _DCM_IL_PER_IOUT.get(topo.name, lambda m: math.nan)(m),
            i_in_avg=corner.i_out * m,
            p_in=math.nan,
            p_out=ps.v_out * corner.i_out,
            efficiency=None,
            mode="dcm",
            i_l_ripple_pp=math.nan,
            k=k,
            k_crit=topo.k_crit(duty) if np.isfinite(duty) else math.nan,
        )
        msg = (
            f"discontinuous conduction (K = {k:.4g} < Kcrit = {model.op.k_crit:.4g} at the CCM "
            "duty): the CCM averaged model does not hold here and is not used; the duty shown "
            "is the ideal DCM estimate. DCM small-signal models are not yet available."
        )
        notes.append(msg)
        warnings.warn(f"{corner.name}: {msg}", ModelValidityWarning, stacklevel=2)
        return CornerPlant(corner, op, None, tuple(notes))
    if model.op.duty > 0.9:
        notes.append(f"duty {model.op.duty:.3f} is above 0.9: check the controller's duty limit")
    return CornerPlant(corner, model.op, model, tuple(notes))


def analyze_plant(spec: DesignSpec) -> PlantAnalysis:
    """Analyse the nominal point and every corner of a design (see :func:`analyze_corner`)."""
    cs = corners(spec)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelValidityWarning)
        results = [analyze_corner(spec, c) for c in cs]
    analysis = PlantAnalysis(spec, results[0], tuple(results[1:]))
    for w in analysis.warnings:
        warnings.warn(w, ModelValidityWarning, stacklevel=2)
    return analysis


def describe_corner(cp: CornerPlant) -> str:
    """One-line human summary (used by the CLI)."""
    op = cp.op
    eff = "-" if op.efficiency is None else f"{100 * op.efficiency:.1f} %"
    return (
        f"{cp.corner.name}: D = {op.duty:.4f}, vout = {format_eng(op.v_out, 'V')}, "
        f"eff {eff}, {op.mode.upper()}"
    )
