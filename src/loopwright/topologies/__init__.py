"""Power-stage topologies: one small definition each, consumed by a generic engine.

To add a topology, write a module with a function ``name(p) -> SwitchedModel`` plus
``ideal_duty(v_in, v_out)`` and ``k_crit(duty)``, and register it in :data:`TOPOLOGIES`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from . import boost as _boost
from . import buck as _buck
from . import buck_boost as _buck_boost
from .base import (
    INPUTS,
    OUTPUTS,
    STATES,
    Interval,
    PowerStageParameters,
    SwitchedModel,
    lc_interval,
)

__all__ = [
    "Topology",
    "TOPOLOGIES",
    "get_topology",
    "Interval",
    "PowerStageParameters",
    "SwitchedModel",
    "lc_interval",
    "STATES",
    "INPUTS",
    "OUTPUTS",
]


@dataclass(frozen=True)
class Topology:
    """Registry entry of a topology.

    Attributes
    ----------
    name : str
        Design-file name.
    build : callable
        ``PowerStageParameters -> SwitchedModel``.
    ideal_duty : callable
        ``(v_in, |v_out|) -> D`` for ideal parts in CCM (starting guess, range checks).
    k_crit : callable
        ``D -> Kcrit`` of the CCM/DCM boundary (Erickson & Maksimovic, ch. 5).
    dcm_duty : callable, optional
        ``(|M|, K) -> D`` in discontinuous conduction with ideal parts (ch. 5).
    steps_up, steps_down : bool
        Which conversion ratios |V/Vg| the stage can make (> 1, < 1).
    inverting : bool
        Output voltage negative.
    """

    name: str
    build: Callable[[PowerStageParameters], SwitchedModel]
    ideal_duty: Callable[[float, float], float]
    k_crit: Callable[[float], float]
    steps_up: bool
    steps_down: bool
    inverting: bool
    dcm_duty: Callable[[float, float], float] | None = None


TOPOLOGIES: dict[str, Topology] = {
    "buck": Topology(
        "buck", _buck.buck, _buck.ideal_duty, _buck.k_crit, False, True, False, _buck.dcm_duty
    ),
    "boost": Topology(
        "boost", _boost.boost, _boost.ideal_duty, _boost.k_crit, True, False, False, _boost.dcm_duty
    ),
    "buck-boost": Topology(
        "buck-boost",
        _buck_boost.buck_boost,
        _buck_boost.ideal_duty,
        _buck_boost.k_crit,
        True,
        True,
        True,
        _buck_boost.dcm_duty,
    ),
}


def get_topology(name: str) -> Topology:
    """Look up a topology by its design-file name (raises ``KeyError`` when unknown)."""
    return TOPOLOGIES[name]
