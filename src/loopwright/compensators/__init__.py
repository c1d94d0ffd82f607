"""Compensator synthesis: the shared :class:`Compensator` and the strategies that fill it.

Strategies (the ``strategy`` field): ``"k-factor"`` (Venable's K factor, types I, II, III,
exact crossover and phase margin) and ``"resonance"`` (type III zeros at the LC double pole,
poles at the ESR zero and fsw/2, common practice).
"""

from loopwright.compensators.base import ZERO_POLE_COUNT, Compensator, CompensatorKind
from loopwright.compensators.kfactor import (
    BOOST_LIMIT_DEG,
    InfeasibleSynthesisError,
    KFactorDesign,
    SynthesisIssue,
    boost_from_k,
    check_k_factor,
    k_factor,
    k_factor_design,
    max_k_factor_crossover_hz,
    plant_phase_deg,
    required_boost_deg,
    synthesize_k_factor,
)
from loopwright.compensators.placement import (
    STRATEGIES,
    CrossoverCeiling,
    crossover_ceiling,
    rhp_zero_phase_deg,
    synthesize_resonance,
)

__all__ = [
    "BOOST_LIMIT_DEG",
    "STRATEGIES",
    "ZERO_POLE_COUNT",
    "Compensator",
    "CompensatorKind",
    "CrossoverCeiling",
    "InfeasibleSynthesisError",
    "KFactorDesign",
    "SynthesisIssue",
    "boost_from_k",
    "check_k_factor",
    "crossover_ceiling",
    "k_factor",
    "k_factor_design",
    "max_k_factor_crossover_hz",
    "plant_phase_deg",
    "required_boost_deg",
    "rhp_zero_phase_deg",
    "synthesize_k_factor",
    "synthesize_resonance",
]
