"""Switching-level simulation that checks the averaged model.

* :func:`simulate` / :func:`simulate_design`: cycle-by-cycle piecewise-linear simulation,
  exact within each interval, open or closed loop, to a detected steady state, with load and
  line steps;
* :func:`periodic_steady_state`: the periodic steady state by shooting;
* :func:`measure_loop_gain` / :func:`loop_gain_by_injection`: loop gain measured on the
  switching model by series voltage injection (Middlebrook 1975).
"""

from .controllers import AnalogController, ControllerModel, DigitalController
from .engine import controller_for_design, periodic_steady_state, simulate, simulate_design
from .injection import (
    LoopGainMeasurement,
    loop_gain_by_injection,
    measure_linear_loop_gain,
    measure_loop_gain,
    middlebrook_combination,
)
from .results import LineStep, LoadStep, SimulationResult, StepResponse, Waveforms

__all__ = [
    "AnalogController",
    "DigitalController",
    "ControllerModel",
    "LoadStep",
    "LineStep",
    "SimulationResult",
    "StepResponse",
    "Waveforms",
    "LoopGainMeasurement",
    "simulate",
    "simulate_design",
    "periodic_steady_state",
    "controller_for_design",
    "measure_loop_gain",
    "loop_gain_by_injection",
    "measure_linear_loop_gain",
    "middlebrook_combination",
]
