"""Closed-loop time responses: reference, load and line steps, and their figures.

Everything here is computation (numpy, scipy, python-control); no plotting. The loop is the
design's ``T(s) = Gc Fm Gvd H`` (sign-corrected for the inverting stage, digital delay as a Pade
approximant); the closed-loop responses are

* reference step, normalised: ``T/(1 + T)`` (the sensed output per unit reference step);
* load step: ``-Zout/(1 + T)`` times the step of the current drawn from the output [V];
* line step: ``Gvg/(1 + T)`` times the step of the input voltage [V].

The disturbance responses are built as one state-space interconnection (power stage with the
controller closing the duty input), not as a product of transfer functions, so no plant mode
is counted twice.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy.linalg import expm

from .errors import DesignError

__all__ = [
    "ClosedLoopSteps",
    "StepResponse",
    "design_steps",
    "disturbance_step",
    "reference_step",
    "simulate_step",
    "step_figures",
]

#: Settling band of the reported settling time, as a fraction of the final value (reference
#: step) or of the peak deviation (disturbance steps). [-]
SETTLING_BAND = 0.02


@dataclass(frozen=True)
class StepResponse:
    """A step response and its figures.

    Attributes
    ----------
    label : str
        What was stepped (``"reference"``, ``"load"``, ``"line"``).
    t_s : ndarray
        Time after the step. [s]
    y : ndarray
        Response: normalised output (reference) or output deviation [V] (load, line).
    step : float
        Size of the step: 1 (reference), load current [A], line voltage [V].
    final_value : float
        Exact steady-state value (DC gain of the closed loop times the step).
    overshoot : float
        Reference step: ``(max y - y_final)/y_final`` (0 when none), fraction. Disturbance
        steps: NaN. [-]
    peak_deviation : float
        Largest ``|y - y_final|`` excursion, signed (for disturbances the output deviation
        [V]; for the reference step ``y_peak - y_final``).
    peak_time_s : float
        Time of the peak excursion. [s]
    settling_time_s : float
        Time after which ``|y - y_final|`` stays within :data:`SETTLING_BAND` of
        ``|y_final|`` (reference) or of ``|peak_deviation|`` (disturbances); NaN when not
        settled within the window. [s]
    """

    label: str
    t_s: np.ndarray
    y: np.ndarray
    step: float
    final_value: float
    overshoot: float
    peak_deviation: float
    peak_time_s: float
    settling_time_s: float


@dataclass(frozen=True)
class ClosedLoopSteps:
    """Step responses of a design's nominal loop.

    Attributes
    ----------
    reference : StepResponse
        Normalised reference step ``T/(1 + T)``.
    load : StepResponse or None
        Output deviation for a load-current step of ``load.step`` amperes. [V]
    line : StepResponse or None
        Output deviation for a line step of ``line.step`` volts. [V]
    """

    reference: StepResponse
    load: StepResponse | None
    line: StepResponse | None


# ----------------------------------------------------------------------------- simulation
def _ss_matrices(sys) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    import control

    s = control.ss(sys)
    if s.ninputs != 1 or s.noutputs != 1:
        raise DesignError(f"must be SISO, got {s.noutputs}x{s.ninputs}", key="sys")
    return (
        np.asarray(s.A, float),
        np.asarray(s.B, float)[:, 0],
        np.asarray(s.C, float)[0],
        float(np.asarray(s.D)[0, 0]),
    )


def _time_window(a: np.ndarray, f_c_hz: float | None) -> float:
    """A window that shows the step and its settling: from the closed-loop poles and fc."""
    lam = np.linalg.eigvals(a) if a.size else np.zeros(0)
    lam = lam[np.isfinite(lam) & (np.abs(lam) > 0)]
    scale = []
    if f_c_hz and f_c_hz > 0:
        scale.append(12.0 / f_c_hz)
    if lam.size:
        slow = float(np.min(np.abs(lam.real)))
        fast = float(np.max(np.abs(lam)))
        lo = 12.0 / f_c_hz if scale else 10.0 * 2 * math.pi / fast
        scale.append(min(max(6.0 / slow, lo), 50.0 * lo))
    return max(scale) if scale else 1.0


def simulate_step(sys, t_end_s: float, n_points: int = 4001) -> tuple[np.ndarray, np.ndarray]:
    """Unit-step response of a SISO linear system on a uniform time grid.

    Parameters
    ----------
    sys : python-control LTI (StateSpace or TransferFunction)
        Continuous-time SISO system.
    t_end_s : float
        End of the window. [s]
    n_points : int
        Number of samples (>= 11) from 0 to ``t_end_s``.

    Returns
    -------
    t_s, y : ndarray
        Time [s] and response (zero initial state, unit step at ``t = 0``).

    Notes
    -----
    Exact discretisation for a step input (zero-order hold is exact for a constant input):
    ``[[Ad, Bd], [0, I]] = expm([[A, B], [0, 0]] dt)``, ``x[k+1] = Ad x[k] + Bd`` [1]_.

    References
    ----------
    .. [1] C. Moler and C. Van Loan, "Nineteen dubious ways to compute the exponential of a
       matrix, twenty-five years later," SIAM Review 45(1), pp. 3-49, 2003.
    """
    a, b, c, d = _ss_matrices(sys)
    if not (math.isfinite(t_end_s) and t_end_s > 0):
        raise DesignError(f"must be finite and > 0 s, got {t_end_s!r}", key="t_end_s")
    if int(n_points) < 11:
        raise DesignError(f"must be >= 11, got {n_points!r}", key="n_points")
    n_points = int(n_points)
    t = np.linspace(0.0, t_end_s, n_points)
    n = a.shape[0]
    if n == 0:
        return t, np.full(n_points, d)
    dt = t[1] - t[0]
    m = np.zeros((n + 1, n + 1))
    m[:n, :n] = a * dt
    m[:n, n] = b * dt
    e = expm(m)
    ad, bd = e[:n, :n], e[:n, n]
    x = np.zeros((n_points, n))
    xk = np.zeros(n)
    for k in range(1, n_points):
        xk = ad @ xk + bd
        x[k] = xk
    return t, x @ c + d


def _settling(t: np.ndarray, err: np.ndarray, band: float) -> float:
    out = np.abs(err) > band
    if not out.any():
        return 0.0
    i = int(np.nonzero(out)[0][-1])
    if i == len(t) - 1:
        return math.nan
    # linear interpolation of the band crossing between samples i and i + 1
    e0, e1 = abs(err[i]), abs(err[i + 1])
    frac = (e0 - band) / (e0 - e1) if e0 != e1 else 0.0
    return float(t[i] + frac * (t[i + 1] - t[i]))


def _refined_peak(t: np.ndarray, v: np.ndarray) -> tuple[float, float]:
    """Extremum of ``v`` (largest ``|v|``), refined by a parabola through three samples."""
    i = int(np.argmax(np.abs(v)))
    if 0 < i < len(v) - 1:
        y0, y1, y2 = v[i - 1], v[i], v[i + 1]
        den = y0 - 2 * y1 + y2
        if den != 0:
            p = 0.5 * (y0 - y2) / den
            if abs(p) <= 1:
                return float(y1 - 0.25 * (y0 - y2) * p), float(t[i] + p * (t[1] - t[0]))
    return float(v[i]), float(t[i])


def step_figures(
    t_s,
    y,
    final_value: float,
    *,
    kind: Literal["reference", "disturbance"] = "reference",
    band: float = SETTLING_BAND,
) -> tuple[float, float, float, float]:
    """Overshoot, peak excursion, its time and the settling time of a step response.

    Parameters
    ----------
    t_s : array_like
        Uniform time grid. [s]
    y : array_like
        Response samples.
    final_value : float
        Steady-state value of ``y``.
    kind : {"reference", "disturbance"}
        Reference step: settling band relative to ``|final_value|``, overshoot reported.
        Disturbance step: band relative to the peak deviation, overshoot NaN.
    band : float
        Settling band (default 2 %). [-]

    Returns
    -------
    overshoot, peak_deviation, peak_time_s, settling_time_s : float
        See :class:`StepResponse`.

    References
    ----------
    .. [1] G. F. Franklin, J. D. Powell and A. Emami-Naeini, *Feedback Control of Dynamic
       Systems*, Pearson, sec. 3.4 (overshoot and 2 % settling time; recalled).
    """
    t = np.asarray(t_s, float)
    y = np.asarray(y, float)
    if t.shape != y.shape or t.ndim != 1 or t.size < 3:
        raise DesignError(
            f"t_s and y must be 1-D of equal length >= 3, got {t.shape}, {y.shape}", key="y"
        )
    err = y - final_value
    if kind == "reference":
        if final_value == 0:
            raise DesignError("must be non-zero for a reference step", key="final_value")
        peak, tp = _refined_peak(t, np.where(err * np.sign(final_value) > 0, err, 0.0))
        if peak * np.sign(final_value) <= 0:
            peak, tp = _refined_peak(t, err)
            overshoot = 0.0
        else:
            overshoot = abs(peak / final_value)
        settle = _settling(t, err, band * abs(final_value))
        return overshoot, peak, tp, settle
    if kind != "disturbance":
        raise DesignError(f"must be 'reference' or 'disturbance', got {kind!r}", key="kind")
    peak, tp = _refined_peak(t, err)
    settle = _settling(t, err, band * abs(peak)) if peak != 0 else 0.0
    return math.nan, peak, tp, settle


def _response(label, sys, step, kind, f_c_hz, t_end_s, n_points) -> StepResponse:
    a, _, _, _ = _ss_matrices(sys)
    if np.any(np.linalg.eigvals(a).real >= 0) if a.size else False:
        raise DesignError("the closed loop is unstable; no step response to report", key="loop")
    import control

    dc = float(np.real(control.dcgain(sys)))
    t_end = t_end_s if t_end_s is not None else _time_window(a, f_c_hz)
    t, y = simulate_step(sys, t_end, n_points)
    y = y * step
    final = dc * step
    ov, peak, tp, settle = step_figures(t, y, final, kind=kind)
    return StepResponse(label, t, y, float(step), final, ov, peak, tp, settle)


def reference_step(
    loop_gain,
    *,
    f_c_hz: float | None = None,
    t_end_s: float | None = None,
    n_points: int = 4001,
) -> StepResponse:
    """Normalised reference step ``T/(1 + T)`` of a unity negative-feedback loop.

    Parameters
    ----------
    loop_gain : python-control LTI
        Loop gain ``T(s)`` (SISO).
    f_c_hz : float, optional
        Crossover, used to choose the time window. [Hz]
    t_end_s : float, optional
        Window; default from the closed-loop poles and ``f_c_hz``. [s]
    n_points : int
        Samples in the window.

    Returns
    -------
    StepResponse
        ``label="reference"``, ``step=1``.

    Raises
    ------
    DesignError
        The closed loop is unstable.

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.4 (closed-loop transient response vs phase margin).
    """
    import control

    cl = control.feedback(control.ss(loop_gain), 1)
    return _response("reference", cl, 1.0, "reference", f_c_hz, t_end_s, n_points)


def disturbance_step(
    stage,
    controller,
    input: Literal["i_load", "v_in"],
    step: float,
    *,
    f_c_hz: float | None = None,
    t_end_s: float | None = None,
    n_points: int = 4001,
) -> StepResponse:
    """Output deviation of the closed loop for a step of a disturbance input.

    Parameters
    ----------
    stage : python-control StateSpace
        Averaged power stage with named inputs (``d`` and the disturbance) and output
        ``v_out`` (:meth:`loopwright.averaging.AveragedModel.to_control`).
    controller : python-control LTI
        Feedback path from ``v_out`` to the duty ``d`` without the minus sign,
        ``K = Fm H Gc`` (times ``-1`` for the inverting stage, times a delay approximant), so
        that ``T = K Gvd``.
    input : {"i_load", "v_in"}
        ``i_load``: current drawn from the output [A] (response ``-Zout/(1 + T)``);
        ``v_in``: line voltage [V] (response ``Gvg/(1 + T)``).
    step : float
        Step size [A] or [V].
    f_c_hz, t_end_s, n_points
        As in :func:`reference_step`.

    Returns
    -------
    StepResponse
        ``y`` is the output deviation [V]; ``peak_deviation`` its largest excursion.

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.2 (closed-loop output impedance and line-to-output).
    """
    import control

    if input not in ("i_load", "v_in"):
        raise DesignError(f"must be 'i_load' or 'v_in', got {input!r}", key="input")
    if not (math.isfinite(step) and step != 0):
        raise DesignError(f"must be finite and non-zero, got {step!r}", key="step")
    names = list(stage.input_labels)
    plant = control.ss(
        stage.A,
        stage.B[:, [names.index("d"), names.index(input)]],
        stage.C[[list(stage.output_labels).index("v_out")], :],
        stage.D[[list(stage.output_labels).index("v_out")]][
            :, [names.index("d"), names.index(input)]
        ],
    )
    k = control.ss(controller)
    k2 = control.ss(
        k.A, k.B, np.vstack([k.C, np.zeros_like(k.C)]), np.vstack([k.D, np.zeros_like(k.D)])
    )
    cl = control.feedback(plant, k2, sign=-1)[0, 1]
    label = "load" if input == "i_load" else "line"
    return _response(label, cl, step, "disturbance", f_c_hz, t_end_s, n_points)


def design_steps(result, *, n_points: int = 4001) -> ClosedLoopSteps | None:
    """Reference, load and line steps of a design's nominal loop.

    Parameters
    ----------
    result : loopwright.design.DesignResult
        A design with a compensator and a valid (CCM) nominal point.
    n_points : int
        Samples per response.

    Returns
    -------
    ClosedLoopSteps or None
        None when there is no compensator, the nominal point is not CCM, or the nominal
        closed loop is unstable. The load step is ``iout_range`` high minus low (50 % of full
        load when no range is given); the line step is ``vin_range`` high minus low (10 % of
        ``vin`` when no range is given).

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, ch. 9.
    """
    import control

    if result.compensator is None or result.plant.nominal.model is None:
        return None
    a = result.nominal.analysis
    if a is None or not a.closed_loop_stable:
        return None
    spec = result.spec
    ps = spec.power_stage
    sign = -1.0 if ps.topology == "buck-boost" else 1.0
    # built from state-space pieces only: a transfer-function detour scales a Pade delay badly
    ac, bc, cc, dc = result.compensator.statespace()
    k = control.ss(ac, bc, cc, dc) * (spec.modulator_gain * spec.sense_gain * sign)
    if result.delay_s > 0:
        from .loop import DEFAULT_PADE_ORDER, _pade_unit

        ad, bd, cd, dd = _pade_unit(DEFAULT_PADE_ORDER)
        tau = result.delay_s
        k = control.ss(ad / tau, bd.reshape(-1, 1) / tau, cd.reshape(1, -1), [[dd]]) * k
    a_p, b_p, c_p, d_p = result.plant.nominal.model.path("v_out", "d")
    gvd = control.ss(a_p, b_p.reshape(-1, 1), c_p.reshape(1, -1), [[d_p]])
    fc = a.crossover_hz if math.isfinite(a.crossover_hz) else result.f_c_hz
    ref = reference_step(k * gvd, f_c_hz=fc, n_points=n_points)
    stage = result.plant.nominal.model.to_control()
    t_end = ref.t_s[-1]
    lo, hi = ps.i_out_range
    di = hi - lo if hi > lo else 0.5 * ps.i_out
    vlo, vhi = ps.v_in_range
    dv = vhi - vlo if vhi > vlo else 0.1 * ps.v_in
    # a heavier load on a negative rail pushes current INTO the output node (i_load < 0)
    load = disturbance_step(stage, k, "i_load", sign * di, t_end_s=t_end, n_points=n_points)
    line = disturbance_step(stage, k, "v_in", dv, t_end_s=t_end, n_points=n_points)
    return ClosedLoopSteps(ref, load, line)
