"""Result objects of the switching-level simulator (frozen dataclasses, SI units)."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np

__all__ = ["LoadStep", "LineStep", "Waveforms", "StepResponse", "SimulationResult"]


def _f(x: float | None) -> float | None:
    return None if x is None else float(x)


@dataclass(frozen=True)
class LoadStep:
    """A load step applied at the start of a switching period once steady state is reached.

    Attributes
    ----------
    from_a, to_a : float
        Load current before and after the step. [A]
    kind : {"resistive", "current"}
        ``"resistive"``: the load conductance changes so that the current at the regulated
        output (``v_ref/H`` in closed loop, the averaged output in open loop) goes from
        ``from_a`` to ``to_a``; ``"current"``: the resistive load of the stage is kept and an
        extra current ``to_a - from_a`` is drawn (the ``i_load`` input; for the inverting
        stage the current flows in its own polarity, into the negative output node).
    settle_band_v : float, optional
        Half-width of the settling band. Default: 2 % of the peak deviation. [V]
    max_cycles : int, optional
        Cap on the periods simulated after the step (default: the run's ``max_cycles``).
    """

    from_a: float
    to_a: float
    kind: Literal["resistive", "current"] = "resistive"
    settle_band_v: float | None = None
    max_cycles: int | None = None


@dataclass(frozen=True)
class LineStep:
    """A line-voltage step applied at the start of a period once steady state is reached.

    Attributes
    ----------
    from_v, to_v : float
        Line voltage before and after. [V]
    settle_band_v : float, optional
        Half-width of the settling band (default 2 % of the peak deviation). [V]
    max_cycles : int, optional
        Cap on the periods simulated after the step.
    """

    from_v: float
    to_v: float
    settle_band_v: float | None = None
    max_cycles: int | None = None


@dataclass(frozen=True, eq=False)
class Waveforms:
    """Waveforms evaluated on the exact solution at uniform points in each period.

    Attributes
    ----------
    t : ndarray
        Time from the start of the run. [s]
    i_l : ndarray
        Inductor current. [A]
    v_out : ndarray
        Output voltage (ESR drop included). [V]
    duty : ndarray
        Duty of the period each point lies in. [-]
    """

    t: np.ndarray
    i_l: np.ndarray
    v_out: np.ndarray
    duty: np.ndarray

    def to_dict(self) -> dict:
        return {
            "t_s": self.t.tolist(),
            "il_a": self.i_l.tolist(),
            "vout_v": self.v_out.tolist(),
            "duty": self.duty.tolist(),
        }


@dataclass(frozen=True, eq=False)
class StepResponse:
    """Response to a load or line step.

    Attributes
    ----------
    kind : {"load", "line"}
    from_value, to_value : float
        Load current [A] or line voltage [V] before and after.
    t_step : float
        Instant of the step (start of a period). [s]
    deviation_v : float
        Signed largest departure of the output from the pre-step periodic waveform (the
        pre-step steady state continued), so the switching ripple does not count. [V]
    deviation_time_s : float
        When that extreme occurs, after the step. [s]
    settling_time_s : float or None
        From the step to the end of the last period whose average output lies outside the
        band around the final average; None when the run ended before settling. [s]
    settle_band_v : float
        Half-width of the band used. [V]
    vout_avg_before, vout_avg_after : float
        Period-averaged output before the step and at the end of the run. [V]
    cycles : int
        Periods simulated after the step.
    steady : bool
        Whether steady state was detected again after the step.
    waveforms : Waveforms
        From one period before the step to the end of the run.
    """

    kind: Literal["load", "line"]
    from_value: float
    to_value: float
    t_step: float
    deviation_v: float
    deviation_time_s: float
    settling_time_s: float | None
    settle_band_v: float
    vout_avg_before: float
    vout_avg_after: float
    cycles: int
    steady: bool
    waveforms: Waveforms = field(repr=False)

    def to_dict(self) -> dict:
        """``{"from_a","to_a","deviation_v","settling_time_s"}`` (load) or the ``_v`` names
        (line), plus extras."""
        unit = "a" if self.kind == "load" else "v"
        return {
            f"from_{unit}": float(self.from_value),
            f"to_{unit}": float(self.to_value),
            "deviation_v": float(self.deviation_v),
            "settling_time_s": _f(self.settling_time_s),
            "deviation_time_s": float(self.deviation_time_s),
            "settle_band_v": float(self.settle_band_v),
            "vout_avg_before": float(self.vout_avg_before),
            "vout_avg_after": float(self.vout_avg_after),
            "cycles": int(self.cycles),
            "steady": bool(self.steady),
        }


@dataclass(frozen=True, eq=False)
class SimulationResult:
    """Outcome of a switching-level run.

    Steady-state figures are taken over the last ``record_cycles`` (20) periods of the steady
    state (before any step).

    Attributes
    ----------
    mode : {"ccm", "dcm"}
        Conduction mode seen in those periods (``"dcm"`` when the inductor current rested at
        zero in any of them).
    loop : {"open", "analog", "digital"}
        How the duty was set.
    method : {"run", "shooting"}
        Run from the initial state, or periodic steady state solved directly.
    cycles : int
        Switching periods simulated (all phases of the run).
    steady : bool
        Steady state detected within the cycle cap.
    steady_cycle : int or None
        Period at which it was detected.
    vout_avg : float
        Average output voltage. [V]
    vout_ripple_pp : float
        Peak-to-peak output ripple. [V]
    il_avg : float
        Average inductor current. [A]
    il_ripple_pp : float
        Peak-to-peak inductor current. [A]
    duty_avg : float
        Average duty. [-]
    iin_avg : float
        Average line current. [A]
    efficiency : float or None
        Output power over input power (None without load or input power). [-]
    f_sw : float
        Switching frequency. [Hz]
    duty_limited_cycles : int
        Periods in which the duty sat at a limit.
    final_state : ndarray
        ``[i_l, v_c]`` at the start of the last recorded period. [A, V]
    waveforms : Waveforms
        The recorded steady-state periods.
    load_step, line_step : StepResponse or None
    """

    mode: Literal["ccm", "dcm"]
    loop: Literal["open", "analog", "digital"]
    method: Literal["run", "shooting"]
    cycles: int
    steady: bool
    steady_cycle: int | None
    vout_avg: float
    vout_ripple_pp: float
    il_avg: float
    il_ripple_pp: float
    duty_avg: float
    iin_avg: float
    efficiency: float | None
    f_sw: float
    duty_limited_cycles: int
    final_state: np.ndarray = field(repr=False)
    waveforms: Waveforms = field(repr=False)
    load_step: StepResponse | None = None
    line_step: StepResponse | None = None

    def to_dict(self) -> dict:
        """The contract's ``simulate`` JSON fields, then extras."""
        return {
            "mode": self.mode,
            "cycles": int(self.cycles),
            "steady": bool(self.steady),
            "vout_avg": float(self.vout_avg),
            "vout_ripple_pp": float(self.vout_ripple_pp),
            "il_avg": float(self.il_avg),
            "il_ripple_pp": float(self.il_ripple_pp),
            "duty_avg": float(self.duty_avg),
            "load_step": None if self.load_step is None else self.load_step.to_dict(),
            "loop": self.loop,
            "method": self.method,
            "steady_cycle": self.steady_cycle,
            "iin_avg": float(self.iin_avg),
            "efficiency": _f(self.efficiency),
            "f_sw_hz": float(self.f_sw),
            "duty_limited_cycles": int(self.duty_limited_cycles),
            "line_step": None if self.line_step is None else self.line_step.to_dict(),
        }
