"""Cycle-by-cycle switching simulation, exact within each interval.

Within each switching interval the circuit is linear, so the state is advanced with the exact
matrix exponential of the interval's equations -- the same
:class:`~loopwright.topologies.SwitchedModel` the averaging engine uses -- and no ODE
integrator is involved (see :mod:`loopwright.simulate._propagator`). Switching instants that
depend on the state are located on the exact solution:

* the trailing edge of an analog PWM, where the control voltage meets the ramp (natural
  sampling, exact intersection);
* the diode turn-off where the inductor current reaches zero (then the idle interval of
  discontinuous conduction), and the turn-on again where the rectifier becomes forward biased.

Closed loop, the analog compensator's states are solved together with the power stage; a
digital controller is sampled once per period with its computation delay, number format,
quantisers and duty limits. The run starts from the zero state with a soft start (the
reference ramps from the level the output takes with the switch held off, 0 V for the buck and
buck-boost, about ``v_in`` for the boost, to ``v_ref`` over ``soft_start_cycles`` periods).
Steady state is detected, not assumed: the cycle-to-cycle change of the sampled state, times
``rho/(1 - rho)`` (``rho`` = slowest per-period decay factor of the loop, from the averaged
model), estimates the remaining distance to the periodic steady state; it must stay below
``tol`` (relative) for ``record_cycles`` consecutive periods. For open loop (and analog closed
loop) the periodic steady state can also be solved directly by shooting
(:func:`periodic_steady_state`).

References
----------
.. [1] R. D. Middlebrook and S. Cuk, "A general unified approach to modelling
   switching-converter power stages," IEEE PESC Record, 1976, pp. 18-34.
.. [2] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
   Kluwer, 2001, ch. 2 (steady state, ripple), ch. 5 (DCM), ch. 7 (PWM modulator).
.. [3] T. J. Aprille and T. N. Trick, "Steady-state analysis of nonlinear circuits with
   periodic inputs," Proc. IEEE 60(1):108-114, 1972 (shooting: Newton on the one-period map).
"""

from __future__ import annotations

import math
import warnings
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import scipy.signal

from ..averaging import analyze_stage, dc_solution
from ..errors import DesignError, ModelValidityWarning
from ..topologies import TOPOLOGIES, PowerStageParameters, Topology
from ._circuit import ON, Circuit, Cycle, sense_sign
from ._propagator import expm
from .controllers import AnalogController, ControllerModel, DigitalController
from .results import LineStep, LoadStep, SimulationResult, StepResponse, Waveforms

__all__ = [
    "simulate",
    "periodic_steady_state",
    "simulate_design",
    "controller_for_design",
]

Progress = Callable[[float], None] | None


# ------------------------------------------------------------------------------ validation
def _topology(topology: str | Topology) -> Topology:
    if isinstance(topology, Topology):
        return topology
    if topology not in TOPOLOGIES:
        raise DesignError(
            f"unknown topology {topology!r}; allowed: {', '.join(TOPOLOGIES)}",
            key="power_stage.topology",
        )
    return TOPOLOGIES[topology]


def _positive(value: Any, key: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError) as err:
        raise DesignError(f"must be a number, got {value!r}", key=key) from err
    if not (math.isfinite(v) and v > 0):
        raise DesignError(f"must be finite and > 0, got {value!r}", key=key)
    return v


def _count(value: Any, key: str, lo: int, hi: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or not lo <= value <= hi:
        raise DesignError(f"must be an integer in [{lo}, {hi}], got {value!r}", key=key)
    return int(value)


# ------------------------------------------------------------------------------ loop model
@dataclass(frozen=True)
class _ModelInfo:
    """What the averaged model says about the run: scales, decay per period, crossover."""

    scale_i: float
    scale_v: float
    rho: float
    f_c: float | None
    v_expected: float
    avg: Any = None


def _closed_loop_matrices(avg, controller: AnalogController) -> tuple[np.ndarray, np.ndarray]:
    """Averaged closed loop ``X' = A_cl X + b_inj v_inj`` (``X = [x, z]``) of an analog loop.

    ``v_inj`` is a voltage in series between the output and the sensing divider (the error is
    ``e = -H sigma (v_out + v_inj)`` about the operating point, ``sigma`` the sense sign).
    """
    a = avg.a
    bd = avg.b[:, 0:1]
    c = avg.c[0:1]
    ed = float(avg.d[0, 0])
    h = controller.sense_gain * sense_sign(avg.model)
    n = a.shape[0]
    fm = controller.modulator_gain
    ac, bc, cc, dc = controller.a, controller.b, controller.c, float(controller.d[0, 0])
    m = ac.shape[0]
    k = fm / (1.0 + fm * dc * h * ed)
    # d = k (cc z - dc h c x - dc h v);  e = -h c x - h ed d - h v
    dx = -k * dc * h * c
    dz = k * cc
    dv = -k * dc * h
    ex = -h * c - h * ed * dx
    ez = -h * ed * dz
    ev = -h * ed * dv - h
    top = np.hstack([a + bd @ dx, bd @ dz])
    bot = np.hstack([bc @ ex, ac + bc @ ez]) if m else np.zeros((0, n))
    acl = np.vstack([top, bot])
    binj = np.concatenate([bd[:, 0] * dv, bc[:, 0] * ev]) if m else bd[:, 0] * dv
    return acl, binj


def _loop_function(avg, controller: ControllerModel, t_s: float) -> Callable:
    """Model loop gain ``T(j w)`` (averaged stage; digital: with its delay ``e^{-s delay Ts}``).

    The inverting stage's loop is built from ``-Gvd`` (the sensed output is ``-v_out``), the
    sign convention of the design flow.
    """
    h = controller.sense_gain * sense_sign(avg.model)
    if isinstance(controller, AnalogController):
        fm = controller.modulator_gain

        def loop(w):
            g = avg.freqresp("v_out", "d", np.asarray(w) / (2 * np.pi))
            return controller.freqresp(w) * fm * g * h

        return loop

    def loop_d(w):
        w = np.asarray(w, dtype=float)
        g = avg.freqresp("v_out", "d", w / (2 * np.pi))
        delay = np.exp(-1j * w * controller.delay_samples * t_s)
        return controller.freqresp(w, t_s) * g * h * delay

    return loop_d


def _closed_loop_rho(avg, controller: ControllerModel, t_s: float) -> tuple[float, float | None]:
    """Slowest per-period decay factor of the averaged closed loop, and the crossover [Hz]."""
    a = avg.a
    bd = avg.b[:, 0:1]
    c = avg.c[0:1]
    h = controller.sense_gain * sense_sign(avg.model)
    n = a.shape[0]
    if isinstance(controller, AnalogController):
        acl, _ = _closed_loop_matrices(avg, controller)
        rho = float(np.max(np.abs(np.exp(np.linalg.eigvals(acl) * t_s))))
    else:
        phi = expm(a * t_s)
        aug = np.zeros((n + 1, n + 1))
        aug[:n, :n] = a * t_s
        aug[:n, n:] = bd * t_s
        gam = expm(aug)[:n, n:]
        delay = max(0, math.ceil(controller.computation_delay - 1e-12))
        ac, bc, cc, dc = scipy.signal.tf2ss(controller.b, controller.a)
        m = ac.shape[0]
        size = n + m + delay
        big = np.zeros((size, size))
        # e_k = -h c x_k (feed-through ed ignored: sampled at the period start)
        e_row = np.zeros((1, size))
        e_row[0, :n] = -h * c[0]
        u_row = np.zeros((1, size))
        u_row[0, n : n + m] = cc[0]
        u_row += dc[0, 0] * e_row
        big[:n, :n] = phi
        if delay == 0:
            big[:n] += gam @ u_row
        else:
            big[:n, n + m + delay - 1] = gam[:, 0]
            big[n + m, :] = u_row[0]
            for i in range(1, delay):
                big[n + m + i, n + m + i - 1] = 1.0
        if m:
            big[n : n + m] = bc @ e_row
            big[n : n + m, n : n + m] += ac
        rho = float(np.max(np.abs(np.linalg.eigvals(big))))
    loop = _loop_function(avg, controller, t_s)
    w = 2 * np.pi * np.logspace(0, math.log10(0.5 / t_s), 300)
    mag = np.abs(loop(w))
    below = np.flatnonzero((mag[:-1] >= 1) & (mag[1:] < 1))
    # the gain crossover is the last downward crossing: a loop whose magnitude dips below one
    # between the integrator and the resonance (type III zeros below f0) crosses more than once
    f_c = float(w[below[-1]] / (2 * np.pi)) if below.size else None
    return rho, f_c


def _model_info(
    topo: Topology,
    params: PowerStageParameters,
    v_in: float,
    f_sw: float,
    duty: float | None,
    controller: ControllerModel | None,
) -> _ModelInfo:
    t_s = 1.0 / f_sw
    v_target = None if controller is None else controller.v_ref / controller.sense_gain
    avg = None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            if controller is None:
                avg = analyze_stage(topo, params, v_in=v_in, v_out=1.0, f_sw=f_sw, duty=duty)
            else:
                avg = analyze_stage(topo, params, v_in=v_in, v_out=v_target, f_sw=f_sw)
        except (DesignError, np.linalg.LinAlgError, ValueError):
            avg = None
    if avg is not None:
        v = abs(avg.op.v_out)
        i = abs(avg.op.i_l_avg)
    else:
        v = abs(v_target) if v_target else v_in
        i = v * params.g_load
    scale_v = max(v, 1e-3)
    scale_i = max(i, 0.01 * scale_v * math.sqrt(params.c_out / params.inductance), 1e-6)
    rho, f_c = 0.999, None
    if avg is not None:
        if controller is None:
            model = topo.build(params)
            phi = expm(model.off.a * (1 - duty) * t_s) @ expm(model.on.a * duty * t_s)
            rho = float(np.max(np.abs(np.linalg.eigvals(phi))))
        else:
            try:
                rho, f_c = _closed_loop_rho(avg, controller, t_s)
            except (np.linalg.LinAlgError, ValueError):
                rho, f_c = 0.999, None
    return _ModelInfo(scale_i, scale_v, rho, f_c, v, avg)


# ------------------------------------------------------------------------------ the runner
@dataclass
class _Record:
    """One simulated period: enough to evaluate it again exactly."""

    k: int
    t0: float
    t_on: float
    duty: float
    w_start: np.ndarray
    w_end: np.ndarray
    circuit: Circuit
    vout_avg: float
    il_avg: float
    iin_avg: float
    dcm: bool

    def cycle(self) -> Cycle:
        members = np.zeros(1, dtype=np.int64)
        return self.circuit.cycle(self.w_start[None, :], members, np.array([self.t_on]))


class _Runner:
    """Advances one simulation (batch of one) period by period."""

    def __init__(
        self,
        topo: Topology,
        params: PowerStageParameters,
        *,
        v_in: float,
        f_sw: float,
        duty: float | None,
        controller: ControllerModel | None,
        x0: np.ndarray | None,
        i_load: float = 0.0,
    ) -> None:
        self.topo = topo
        self.params = params
        self.f_sw = f_sw
        self.t_s = 1.0 / f_sw
        self.duty = duty
        self.controller = controller
        self.analog = isinstance(controller, AnalogController)
        self.digital = isinstance(controller, DigitalController)
        self.circuit = Circuit(topo.build(params), f_sw, controller if self.analog else None)
        lay = self.lay = self.circuit.lay
        self.w = np.zeros((1, lay.size))
        if x0 is not None:
            self.w[0, 0:2] = x0
        v_f = params.v_f if params.rectifier == "diode" else 0.0
        self.w[0, lay.u] = [v_in, i_load, v_f]
        self.members = np.zeros(1, dtype=np.int64)
        self.k = 0
        self.mode_vec = None
        if self.analog and controller.rail_clamp:
            self.mode_vec = controller.integrator_mode()
        if self.digital:
            c = controller.computation_delay
            self.n_delay = math.ceil(c - 1e-12)
            self.phi = self.n_delay - c
            self.step = controller.new_step()
            self.pending: deque[float] = deque([controller.actuate(0.0)] * self.n_delay)
        self.duty_limited = 0
        self._fast_map()

    def set_params(self, params: PowerStageParameters) -> None:
        self.params = params
        self.circuit = Circuit(
            self.topo.build(params), self.f_sw, self.controller if self.analog else None
        )
        self._fast_map()

    def _fast_map(self) -> None:
        """Fixed duty without diode events: the whole period is one matrix."""
        self.phi_full = None
        if self.duty is not None and not self.circuit.diode:
            ts = self.t_s
            t_on = self.duty * ts
            self.phi_full = self.circuit.props[1].matrix(ts - t_on) @ self.circuit.props[ON].matrix(
                t_on
            )

    def set_reference(self, ref: float, rate: float) -> None:
        self.w[0, self.lay.ref] = ref
        self.w[0, self.lay.rate] = rate

    def advance(self) -> _Record:
        """One period from ``self.w``; returns its record."""
        lay = self.lay
        ts = self.t_s
        t0 = self.k * ts
        w_start = self.w[0].copy()
        w_start[lay.qv : lay.qv + 3] = 0.0
        if self.phi_full is not None:
            w_end = self.phi_full @ w_start
            self.w = w_end[None, :]
            self.k += 1
            return _Record(
                self.k - 1, t0, self.duty * ts, self.duty, w_start, w_end, self.circuit,
                float(w_end[lay.qv] / ts), float(w_end[lay.qi] / ts), float(w_end[lay.qin] / ts),
                False,
            )  # fmt: skip
        t_on = None
        if self.duty is not None:
            t_on = np.array([self.duty * ts])
        elif self.analog:
            c = self.controller
            if self.mode_vec is not None:
                vc = float(self.circuit.v_control(w_start))
                top = 1.0 / c.modulator_gain
                target = min(max(vc, 0.0), top)
                if target != vc:
                    w_start[lay.z] += self.mode_vec * (target - vc)
            if c.pwm == "sampled":
                d = c.modulator_gain * float(self.circuit.v_control(w_start))
                t_on = np.array([min(max(d, 0.0), c.duty_max) * ts])
        else:  # digital
            if self.n_delay == 0:
                self._sample_digital(w_start)
            t_on = np.array([self.pending.popleft() * ts])
        cyc = self.circuit.cycle(w_start[None, :], self.members, t_on)
        duty = float(cyc.t_on[0] / ts)
        if self.analog or self.digital:
            lim_hi = self.controller.duty_max
            lim_lo = self.controller.duty_min if self.digital else 0.0
            if duty >= lim_hi - 1e-12 or duty <= lim_lo + 1e-12:
                self.duty_limited += 1
        if self.digital and self.n_delay > 0:
            if self.phi == 0.0:
                self._sample_digital(w_start)
            else:
                w_s, kind = self.circuit.evaluate(cyc, self.members, np.array([self.phi * ts]))
                self._sample_digital(w_s[0, 0], int(kind[0, 0]))
        w_end = cyc.w_end[0]
        self.w = cyc.w_end
        self.k += 1
        return _Record(
            self.k - 1, t0, float(cyc.t_on[0]), duty, w_start, w_end, self.circuit,
            float(w_end[lay.qv] / ts), float(w_end[lay.qi] / ts), float(w_end[lay.qin] / ts),
            bool(cyc.dcm[0]),
        )  # fmt: skip

    def _sample_digital(self, w_s: np.ndarray, kind: int = ON) -> None:
        c = self.controller
        v = float(w_s @ self.circuit.rows_vout[kind])
        if self.lay.n_osc:
            v += float(w_s[self.lay.s1])
        v *= self.circuit.sense_sign  # the inverting stage senses -v_out
        ref = float(w_s[self.lay.ref])
        e = ref - (c.v_ref - c.sense(v))  # ADC path of the controller, ramped reference
        self.pending.append(c.actuate(self.step(e)))


class _SteadyDetector:
    """Distance-to-steady-state estimate from the cycle-to-cycle change.

    With ``rho`` the slowest per-period decay factor, a change ``dx`` between consecutive
    periods leaves at most about ``dx rho/(1 - rho)`` to go (geometric series). A quantised
    loop (``floor > 0``) can dither between quantiser levels for ever; it is judged on the
    averages over consecutive windows of ``window`` periods instead (factor
    ``rho^W/(1 - rho^W)``), against ``max(tol, floor)``.
    """

    def __init__(self, info: _ModelInfo, tol: float, window: int, floor: float = 0.0) -> None:
        rho = min(max(info.rho, 0.0), 1.0)
        self.scale = np.array([info.scale_i, info.scale_v])
        self.tol = max(tol, floor)
        self.window = window
        self.windowed = floor > 0.0
        if self.windowed:
            rw = rho**window
            self.gain = math.inf if rw >= 1.0 else max(rw / (1.0 - rw), 1.0)
        else:
            self.gain = math.inf if rho >= 1.0 else max(rho / (1.0 - rho), 1.0)
        self.count = 0
        self.prev: np.ndarray | None = None
        self._sum = np.zeros(2)
        self._n = 0
        self._prev_avg: np.ndarray | None = None

    def update(self, x: np.ndarray) -> bool:
        if self.windowed:
            self._sum += x
            self._n += 1
            if self._n < self.window:
                return False
            avg = self._sum / self._n
            self._sum[:] = 0.0
            self._n = 0
            if self._prev_avg is not None:
                change = float(np.max(np.abs(avg - self._prev_avg) / self.scale))
                self.count = self.count + 1 if change * self.gain < self.tol else 0
            self._prev_avg = avg
            return self.count >= 2
        if self.prev is not None:
            change = float(np.max(np.abs(x - self.prev) / self.scale))
            self.count = self.count + 1 if change * self.gain < self.tol else 0
        self.prev = x.copy()
        return self.count >= self.window


def _sample_records(circuit: Circuit, recs: list[_Record], points: int, t_s: float):
    """Waveforms at ``points`` per period plus the values at every switching instant."""
    times = np.arange(points) * (t_s / points)
    ts_all, il_all, v_all, d_all = [], [], [], []
    vmin = vmax = imin = imax = None
    for rec in recs:
        circuit = rec.circuit
        cyc = rec.cycle()
        w, kind = circuit.evaluate(cyc, np.zeros(1, np.int64), times)
        v = np.einsum("ns,ns->n", w[0], circuit.rows_vout[kind[0]])
        il = w[0, :, 0]
        bv, bi = circuit.boundary_values(cyc)
        lo_v = np.nanmin(np.concatenate([v, bv[0]]))
        hi_v = np.nanmax(np.concatenate([v, bv[0]]))
        lo_i = np.nanmin(np.concatenate([il, bi[0]]))
        hi_i = np.nanmax(np.concatenate([il, bi[0]]))
        vmin = lo_v if vmin is None else min(vmin, lo_v)
        vmax = hi_v if vmax is None else max(vmax, hi_v)
        imin = lo_i if imin is None else min(imin, lo_i)
        imax = hi_i if imax is None else max(imax, hi_i)
        ts_all.append(rec.t0 + times)
        il_all.append(il)
        v_all.append(v)
        d_all.append(np.full(points, rec.duty))
    wf = Waveforms(
        np.concatenate(ts_all), np.concatenate(il_all), np.concatenate(v_all), np.concatenate(d_all)
    )
    return wf, (vmin, vmax, imin, imax)


def _summary(runner: _Runner, recs: list[_Record], points: int):
    circuit = runner.circuit
    wf, (vmin, vmax, imin, imax) = _sample_records(circuit, recs, points, runner.t_s)
    vout = float(np.mean([r.vout_avg for r in recs]))
    il = float(np.mean([r.il_avg for r in recs]))
    iin = float(np.mean([r.iin_avg for r in recs]))
    duty = float(np.mean([r.duty for r in recs]))
    dcm = any(r.dcm for r in recs)
    v_in = float(runner.w[0, runner.lay.u][0])
    i_load = float(runner.w[0, runner.lay.u][1])
    p_out = vout * vout * runner.params.g_load + abs(vout) * abs(i_load)
    p_in = v_in * iin
    eff = p_out / p_in if p_in > 0 and p_out > 0 else None
    return dict(
        waveforms=wf,
        vout_avg=vout,
        vout_ripple_pp=float(vmax - vmin),
        il_avg=il,
        il_ripple_pp=float(imax - imin),
        duty_avg=duty,
        iin_avg=iin,
        efficiency=eff,
        mode="dcm" if dcm else "ccm",
        env=(vmin, vmax),
    )


def _soft_start(
    runner: _Runner, info: _ModelInfo, soft_start_cycles: int | None, max_cycles: int
) -> int:
    """Set the reference ramp; returns the number of ramp periods."""
    c = runner.controller
    if c is None:
        return 0
    if soft_start_cycles is None:
        n = 200 if info.f_c is None else math.ceil(20.0 * runner.f_sw / info.f_c)
        n = int(min(max(n, 64), max(max_cycles // 4, 1)))
    else:
        n = soft_start_cycles
    ref0 = 0.0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            model = runner.circuit.model
            u = runner.w[0, runner.lay.u]
            _, y = dc_solution(model, 0.0, u)
            # the sensed output with the switch held off (sign-corrected for the inverting stage)
            sensed = runner.circuit.sense_sign * float(y[0])
            ref0 = min(max(c.sense_gain * sensed, 0.0), c.v_ref)
            if not math.isfinite(ref0):
                ref0 = 0.0
        except (np.linalg.LinAlgError, ValueError):
            ref0 = 0.0
    if n == 0:
        runner.set_reference(c.v_ref, 0.0)
    else:
        runner.set_reference(ref0, (c.v_ref - ref0) / (n * runner.t_s))
    return n


def _run_to_steady(
    runner: _Runner,
    info: _ModelInfo,
    *,
    max_cycles: int,
    tol: float,
    record_cycles: int,
    ramp_cycles: int,
    floor: float,
    progress: Progress,
    progress_span: tuple[float, float] = (0.0, 1.0),
    keep_all: bool = False,
) -> tuple[bool, int | None, list[_Record]]:
    det = _SteadyDetector(info, tol, record_cycles, floor)
    if runner.phi_full is not None and not keep_all:
        return _run_fixed_map(runner, det, max_cycles, record_cycles, progress, progress_span)
    recs: deque[_Record] | list[_Record] = [] if keep_all else deque(maxlen=record_cycles)
    steady = False
    steady_at = None
    every = max(1, max_cycles // 100)
    for j in range(max_cycles):
        k = runner.k
        if runner.controller is not None and ramp_cycles and k == ramp_cycles:
            runner.set_reference(runner.controller.v_ref, 0.0)
        recs.append(runner.advance())
        x = runner.w[0, 0:2]
        ok = det.update(x)
        if ok and runner.k >= ramp_cycles + record_cycles:
            steady = True
            steady_at = runner.k
            break
        if progress is not None and j % every == 0:
            a, b = progress_span
            progress(a + (b - a) * j / max_cycles)
    return steady, steady_at, list(recs)


def _run_fixed_map(
    runner: _Runner,
    det: _SteadyDetector,
    max_cycles: int,
    record_cycles: int,
    progress: Progress,
    progress_span: tuple[float, float],
) -> tuple[bool, int | None, list[_Record]]:
    """Fixed duty without events: the period is one matrix ``A``; states come in blocks
    ``A^j w`` (j = 1..B) and the steady-state test runs over each block."""
    lay = runner.lay
    ts = runner.t_s
    size = lay.size
    reset = np.eye(size)
    q = slice(lay.qv, lay.qv + 3)
    reset[q, q] = 0.0
    amap = runner.phi_full @ reset
    nblock = max(64, record_cycles)
    powers = np.empty((nblock, size, size))
    powers[0] = amap
    for j in range(1, nblock):
        powers[j] = amap @ powers[j - 1]
    w = runner.w[0].copy()
    w[q] = 0.0
    starts: list[np.ndarray] = []
    ends: list[np.ndarray] = []
    steady = False
    steady_at = None
    done = 0
    scale0, scale1 = float(det.scale[0]), float(det.scale[1])
    limit = det.tol / det.gain if math.isfinite(det.gain) else -1.0
    prev = det.prev
    count = det.count
    while done < max_cycles:
        nb = min(nblock, max_cycles - done)
        block = powers[:nb] @ w  # ends of periods done+1 .. done+nb
        begin = np.vstack([w[None, :], block[:-1]])
        begin[:, q] = 0.0
        xs = np.vstack([w[None, 0:2] if prev is None else prev[None, :], block[:, 0:2]])
        change = np.maximum(np.abs(np.diff(xs[:, 0])) / scale0, np.abs(np.diff(xs[:, 1])) / scale1)
        if prev is None:
            change[0] = math.inf
        stop = nb
        for j, c in enumerate(change.tolist()):
            count = count + 1 if c < limit else 0
            if count >= det.window and runner.k + j + 1 >= record_cycles:
                steady = True
                stop = j + 1
                break
        starts.append(begin[:stop])
        ends.append(block[:stop])
        runner.k += stop
        done += stop
        w = block[stop - 1].copy()
        prev = w[0:2].copy()
        w[q] = 0.0
        # keep what the records need
        kept = sum(len(b) for b in starts)
        while kept - len(starts[0]) >= record_cycles:
            kept -= len(starts[0])
            starts.pop(0)
            ends.pop(0)
        if steady:
            steady_at = runner.k
            break
        if progress is not None:
            a, b = progress_span
            progress(a + (b - a) * done / max_cycles)
    det.prev, det.count = prev, count
    runner.w = np.concatenate(ends)[-1][None, :].copy()
    st = np.concatenate(starts)[-record_cycles:]
    en = np.concatenate(ends)[-record_cycles:]
    k0 = runner.k - len(st)
    recs = [
        _Record(
            k0 + i,
            (k0 + i) * ts,
            runner.duty * ts,
            runner.duty,
            st[i],
            en[i],
            runner.circuit,
            float(en[i, lay.qv] / ts),
            float(en[i, lay.qi] / ts),
            float(en[i, lay.qin] / ts),
            False,
        )  # fmt: skip
        for i in range(len(st))
    ]
    return steady, steady_at, recs


def _step_response(
    runner: _Runner,
    info: _ModelInfo,
    pre: list[_Record],
    pre_env: tuple[float, float],
    *,
    kind: str,
    from_value: float,
    to_value: float,
    band: float | None,
    max_cycles: int,
    tol: float,
    record_cycles: int,
    points: int,
    floor: float,
    progress: Progress,
) -> StepResponse:
    t_step = runner.k * runner.t_s
    steady, _, post = _run_to_steady(
        runner,
        info,
        max_cycles=max_cycles,
        tol=tol,
        record_cycles=record_cycles,
        ramp_cycles=0,
        floor=floor,
        progress=progress,
        progress_span=(0.5, 1.0),
        keep_all=True,
    )
    wf_post, _ = _sample_records(runner.circuit, post, points, runner.t_s)
    # extremes beyond the pre-step ripple band (switching ripple does not count)
    lo_pre, hi_pre = pre_env
    lows, highs = [], []
    for rec in post:
        bv, _ = rec.circuit.boundary_values(rec.cycle())
        lows.append(np.nanmin(bv[0]))
        highs.append(np.nanmax(bv[0]))
    v = wf_post.v_out
    i_lo = int(np.argmin(v))
    i_hi = int(np.argmax(v))
    v_lo = min(float(v[i_lo]), float(np.min(lows)))
    v_hi = max(float(v[i_hi]), float(np.max(highs)))
    dev_lo = v_lo - lo_pre
    dev_hi = v_hi - hi_pre
    if abs(dev_lo) >= abs(dev_hi):
        deviation, t_dev = dev_lo, float(wf_post.t[i_lo]) - t_step
    else:
        deviation, t_dev = dev_hi, float(wf_post.t[i_hi]) - t_step
    avgs = np.array([r.vout_avg for r in post])
    before = float(np.mean([r.vout_avg for r in pre]))
    after = float(np.mean(avgs[-record_cycles:]))
    width = band if band is not None else max(0.02 * abs(deviation), 1e-12)
    settling = None
    if steady:
        outside = np.flatnonzero(np.abs(avgs - after) > width)
        settling = 0.0 if outside.size == 0 else float((outside[-1] + 1) * runner.t_s)
    wf_pre, _ = _sample_records(runner.circuit, pre[-1:], points, runner.t_s)
    wf = Waveforms(
        np.concatenate([wf_pre.t, wf_post.t]),
        np.concatenate([wf_pre.i_l, wf_post.i_l]),
        np.concatenate([wf_pre.v_out, wf_post.v_out]),
        np.concatenate([wf_pre.duty, wf_post.duty]),
    )
    return StepResponse(
        kind=kind,  # type: ignore[arg-type]
        from_value=from_value,
        to_value=to_value,
        t_step=t_step,
        deviation_v=float(deviation),
        deviation_time_s=float(t_dev),
        settling_time_s=settling,
        settle_band_v=float(width),
        vout_avg_before=before,
        vout_avg_after=after,
        cycles=len(post),
        steady=steady,
        waveforms=wf,
    )


def _quantisation_floor(controller: ControllerModel | None, info: _ModelInfo, v_in: float) -> float:
    """Relative change a quantised digital loop can keep making at steady state."""
    if not isinstance(controller, DigitalController):
        return 0.0
    lsb_d = controller.duty_lsb()
    lsb_v = 0.0
    if controller.adc_bits is not None:
        lsb_v = controller.adc_full_scale_v / 2**controller.adc_bits / controller.sense_gain
    # one duty step moves the output by at most about Gvd(0) * step ~ (v_in .. v/(1-D)) * step
    dv = lsb_d * max(v_in, info.scale_v) * 4.0 + lsb_v
    return 4.0 * dv / info.scale_v


# ------------------------------------------------------------------------------ public API
def simulate(
    topology: str | Topology,
    params: PowerStageParameters,
    *,
    v_in: float,
    f_sw: float,
    duty: float | None = None,
    controller: ControllerModel | None = None,
    max_cycles: int = 20000,
    tol: float = 1e-6,
    soft_start_cycles: int | None = None,
    load_step: LoadStep | None = None,
    line_step: LineStep | None = None,
    record_cycles: int = 20,
    points_per_cycle: int = 64,
    x0: Any = None,
    progress: Progress = None,
) -> SimulationResult:
    """Switching-level simulation of a power stage, open or closed loop, to steady state.

    Parameters
    ----------
    topology : str or Topology
        ``"buck"``, ``"boost"``, ``"buck-boost"`` or a registry entry.
    params : PowerStageParameters
        Component values and resistive load.
    v_in : float
        Line voltage (the start value when ``line_step`` is given, which then overrides it). [V]
    f_sw : float
        Switching frequency. [Hz]
    duty : float, optional
        Open loop: fixed duty in [0, 1]. Exactly one of ``duty`` and ``controller``.
    controller : AnalogController or DigitalController, optional
        Closed loop.
    max_cycles : int
        Cap on the periods simulated to reach steady state (and again after a step).
    tol : float
        Steady state: estimated remaining distance to the periodic steady state, relative to
        the state's scale (``|V|`` for ``v_c``; ``|I_L|``, at least ``0.01 |V| sqrt(C/L)``,
        for ``i_l``). A quantised digital loop uses at least its quantisation level.
    soft_start_cycles : int, optional
        Reference ramp duration in periods (closed loop). Default ``20 f_sw / f_c`` (``f_c`` the
        averaged loop's crossover), between 64 and ``max_cycles/4``.
    load_step, line_step : LoadStep or LineStep, optional
        Applied at the start of the period after steady state is reached (at most one).
    record_cycles : int
        Periods over which the steady-state figures are taken (20 in the contract).
    points_per_cycle : int
        Waveform points per period (the exact solution is evaluated there; ripple extremes
        also use the values at every switching instant).
    x0 : array_like, optional
        Initial ``[i_l, v_c]`` (default zero). [A, V]
    progress : callable, optional
        Called with the fraction done (0..1).

    Returns
    -------
    SimulationResult

    Raises
    ------
    DesignError
        Bad arguments (naming the field and the allowed range).

    Notes
    -----
    Each interval is solved as ``w(t) = exp(M t) w(0)`` on an augmented state that includes
    the inputs, the reference and the analog controller (see
    :mod:`loopwright.simulate._circuit`). The analog PWM is trailing-edge with a ramp from 0
    to ``1/Fm`` over the period (duty ``d = Fm v_c``, the averaged model's modulator); the
    turn-off instant is the first intersection of the control voltage with the ramp on the
    exact solution (natural sampling). Steps are applied at a period boundary. Diode
    rectifiers switch to the idle interval where the inductor current reaches zero and back
    where the rectifier becomes forward biased (DCM, start-up).

    References
    ----------
    .. [1] R. D. Middlebrook and S. Cuk, "A general unified approach to modelling
       switching-converter power stages," IEEE PESC Record, 1976, pp. 18-34.
    .. [2] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, ch. 2, 5 and 7.

    Examples
    --------
    >>> from loopwright.topologies import PowerStageParameters
    >>> p = PowerStageParameters(22e-6, 100e-6, g_load=0.25)
    >>> r = simulate("buck", p, v_in=36.0, f_sw=250e3, duty=1 / 3)
    >>> r.steady, round(r.vout_avg, 3)
    (True, 12.0)
    """
    topo = _topology(topology)
    f_sw = _positive(f_sw, "power_stage.fsw")
    if line_step is not None:
        v_in = line_step.from_v
    v_in = _positive(v_in, "power_stage.vin")
    max_cycles = _count(max_cycles, "cycles", 1, 10**8)
    record_cycles = _count(record_cycles, "record_cycles", 1, 10**6)
    points_per_cycle = _count(points_per_cycle, "points_per_cycle", 2, 100000)
    tol = _positive(tol, "tol")
    if (duty is None) == (controller is None):
        raise DesignError("give exactly one of duty (open loop) or controller", key="controller")
    if duty is not None:
        d = float(duty)
        if not (0.0 <= d <= 1.0):
            raise DesignError(f"must be in [0, 1], got {duty!r}", key="duty")
        duty = d
    if controller is not None and not isinstance(controller, AnalogController | DigitalController):
        raise DesignError(
            f"must be an AnalogController or DigitalController, got {type(controller).__name__}",
            key="controller",
        )
    if load_step is not None and line_step is not None:
        raise DesignError("give a load step or a line step, not both", key="load_step")
    if soft_start_cycles is not None:
        soft_start_cycles = _count(soft_start_cycles, "soft_start_cycles", 0, 10**8)
    if x0 is not None:
        x0 = np.asarray(x0, dtype=float).reshape(2)
    i_load0 = 0.0
    if load_step is not None:
        if not (load_step.from_a >= 0 and load_step.to_a >= 0):
            raise DesignError(
                f"load currents must be >= 0 A, got {load_step.from_a!r} and {load_step.to_a!r}",
                key="load_step",
            )
        if load_step.kind not in ("resistive", "current"):
            raise DesignError(
                f"must be 'resistive' or 'current', got {load_step.kind!r}", key="load_step.kind"
            )
    info = _model_info(topo, params, v_in, f_sw, duty, controller)
    if load_step is not None:
        if load_step.kind == "resistive":
            params = replace(params, g_load=load_step.from_a / info.v_expected)
            info = _model_info(topo, params, v_in, f_sw, duty, controller)
        else:
            # the load current flows in the stage's own polarity: into the node of a negative rail
            i_load0 = sense_sign(topo) * float(load_step.from_a)
    runner = _Runner(
        topo, params, v_in=v_in, f_sw=f_sw, duty=duty, controller=controller, x0=x0,
        i_load=i_load0,
    )  # fmt: skip
    ramp = _soft_start(runner, info, soft_start_cycles, max_cycles)
    floor = _quantisation_floor(controller, info, v_in)
    steady, steady_at, recs = _run_to_steady(
        runner,
        info,
        max_cycles=max_cycles,
        tol=tol,
        record_cycles=record_cycles,
        ramp_cycles=ramp,
        floor=floor,
        progress=progress,
        progress_span=(0.0, 0.5 if (load_step or line_step) else 1.0),
    )
    if len(recs) > record_cycles:
        recs = recs[-record_cycles:]
    summary = _summary(runner, recs, points_per_cycle)
    env = summary.pop("env")
    duty_limited = runner.duty_limited
    step_resp = None
    line_resp = None
    if load_step is not None or line_step is not None:
        lay = runner.lay
        if load_step is not None:
            if load_step.kind == "resistive":
                runner.set_params(replace(runner.params, g_load=load_step.to_a / info.v_expected))
            else:
                runner.w[0, lay.u.start + 1] = sense_sign(topo) * float(load_step.to_a)
            step = load_step
            kind, fv, tv = "load", float(load_step.from_a), float(load_step.to_a)
        else:
            runner.w[0, lay.u.start] = _positive(line_step.to_v, "line_step.to_v")
            step = line_step
            kind, fv, tv = "line", float(line_step.from_v), float(line_step.to_v)
        cap = (
            max_cycles
            if step.max_cycles is None
            else _count(step.max_cycles, "max_cycles", 1, 10**8)
        )
        resp = _step_response(
            runner,
            info,
            recs,
            env,
            kind=kind,
            from_value=fv,
            to_value=tv,
            band=step.settle_band_v,
            max_cycles=cap,
            tol=tol,
            record_cycles=record_cycles,
            points=points_per_cycle,
            floor=floor,
            progress=progress,
        )
        if kind == "load":
            step_resp = resp
        else:
            line_resp = resp
    if progress is not None:
        progress(1.0)
    loop = "open" if controller is None else ("analog" if runner.analog else "digital")
    if (
        controller is not None
        and steady
        and duty_limited
        and recs
        and any(r.duty >= controller.duty_max - 1e-12 for r in recs)
    ):
        warnings.warn(
            f"the duty sits at its limit {controller.duty_max:g} in steady state: the loop "
            "does not regulate",
            ModelValidityWarning,
            stacklevel=2,
        )
    return SimulationResult(
        loop=loop,  # type: ignore[arg-type]
        method="run",
        cycles=runner.k,
        steady=steady,
        steady_cycle=steady_at,
        f_sw=f_sw,
        duty_limited_cycles=duty_limited,
        final_state=recs[-1].w_start[0:2].copy(),
        load_step=step_resp,
        line_step=line_resp,
        **summary,
    )


def periodic_steady_state(
    topology: str | Topology,
    params: PowerStageParameters,
    *,
    v_in: float,
    f_sw: float,
    duty: float | None = None,
    controller: AnalogController | None = None,
    x0: Any = None,
    tol: float = 1e-11,
    max_iter: int = 50,
    record_cycles: int = 20,
    points_per_cycle: int = 64,
) -> SimulationResult:
    """Periodic steady state by shooting: Newton on the exact one-period map.

    Parameters
    ----------
    topology, params, v_in, f_sw, duty
        As for :func:`simulate` (open loop with ``duty``).
    controller : AnalogController, optional
        Analog closed loop instead of ``duty`` (the fixed point includes the compensator
        states; the error amplifier's rail clamp is not applied).
    x0 : array_like, optional
        Starting guess ``[i_l, v_c]`` (default: the averaged operating point).
    tol : float
        Newton stops when the step is below ``tol`` relative to the state scale.
    max_iter : int
        Newton iterations at most.
    record_cycles, points_per_cycle : int
        Periods run from the fixed point for the figures and waveforms.

    Returns
    -------
    SimulationResult
        ``method = "shooting"``; ``steady`` says whether Newton converged; ``cycles`` counts
        every period evaluated (Jacobian columns included).

    Notes
    -----
    The one-period map ``F`` takes the states at a period start to the next. The fixed point
    ``F(x) = x`` is found by Newton, ``x <- x - (J - I)^{-1} (F(x) - x)``, with the Jacobian
    ``J`` by finite differences of the exact map (evaluated as one batch). For a fixed duty in
    continuous conduction ``F`` is affine and one step is exact; in discontinuous conduction
    and with natural-sampling PWM ``F`` is piecewise smooth and Newton converges
    quadratically near the solution.

    References
    ----------
    .. [1] T. J. Aprille and T. N. Trick, "Steady-state analysis of nonlinear circuits with
       periodic inputs," Proc. IEEE 60(1):108-114, 1972.
    """
    topo = _topology(topology)
    f_sw = _positive(f_sw, "power_stage.fsw")
    v_in = _positive(v_in, "power_stage.vin")
    if (duty is None) == (controller is None):
        raise DesignError("give exactly one of duty (open loop) or controller", key="controller")
    if controller is not None and not isinstance(controller, AnalogController):
        raise DesignError(
            "shooting supports open loop and analog controllers; run simulate() for a "
            "digital controller",
            key="controller",
        )
    if duty is not None and not (0.0 <= float(duty) <= 1.0):
        raise DesignError(f"must be in [0, 1], got {duty!r}", key="duty")
    info = _model_info(topo, params, v_in, f_sw, duty, controller)
    runner = _Runner(topo, params, v_in=v_in, f_sw=f_sw, duty=duty, controller=controller, x0=None)
    lay = runner.lay
    circuit = runner.circuit
    ts = runner.t_s
    if controller is not None:
        runner.set_reference(controller.v_ref, 0.0)
    dyn = lay.dynamic
    w = runner.w[0].copy()
    # starting guess: averaged operating point
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            if controller is None:
                avg = analyze_stage(topo, params, v_in=v_in, v_out=1.0, f_sw=f_sw, duty=duty)
            else:
                avg = analyze_stage(topo, params, v_in=v_in, v_out=info.v_expected, f_sw=f_sw)
            xa = -np.linalg.solve(avg.a, avg.b[:, 1:] @ w[lay.u] + avg.b[:, 0] * 0.0)
            w[0:2] = xa
            if controller is not None and controller.order:
                lhs = np.vstack([controller.a, controller.c])
                rhs = np.concatenate(
                    [np.zeros(controller.order), [avg.op.duty / controller.modulator_gain]]
                )
                w[lay.z] = np.linalg.lstsq(lhs, rhs, rcond=None)[0]
        except (DesignError, np.linalg.LinAlgError, ValueError):
            pass
    if x0 is not None:
        w[0:2] = np.asarray(x0, dtype=float).reshape(2)
    scale = np.ones(len(dyn))
    scale[0], scale[1] = info.scale_i, info.scale_v
    if len(dyn) > 2:
        scale[2:] = max(float(np.max(np.abs(w[lay.z]))), 1e-9)
    t_on_fixed = None if duty is None else float(duty) * ts
    evaluations = 0
    converged = False

    def cycle_map(batch: np.ndarray) -> np.ndarray:
        members = np.zeros(batch.shape[0], dtype=np.int64)
        t_on = None
        if t_on_fixed is not None:
            t_on = np.full(batch.shape[0], t_on_fixed)
        elif controller.pwm == "sampled":
            d = controller.modulator_gain * circuit.v_control(batch)
            t_on = np.clip(d, 0.0, controller.duty_max) * ts
        return circuit.cycle(batch, members, t_on).w_end

    nd = len(dyn)
    for _ in range(max_iter):
        hsteps = 1e-7 * (np.abs(w[dyn]) + scale)
        batch = np.repeat(w[None, :], nd + 1, axis=0)
        for j in range(nd):
            batch[j + 1, dyn[j]] += hsteps[j]
        out = cycle_map(batch)
        evaluations += nd + 1
        f0 = out[0, dyn]
        jac = (out[1:, dyn] - f0[None, :]).T / hsteps[None, :]
        resid = f0 - w[dyn]
        try:
            delta = np.linalg.solve(jac - np.eye(nd), -resid)
        except np.linalg.LinAlgError:
            break
        w[dyn] += delta
        if np.max(np.abs(delta) / scale) < tol:
            converged = True
            break
    runner.w = w[None, :].copy()
    recs = []
    for _ in range(record_cycles):
        recs.append(runner.advance())
    summary = _summary(runner, recs, points_per_cycle)
    summary.pop("env")
    return SimulationResult(
        loop="open" if controller is None else "analog",
        method="shooting",
        cycles=evaluations + record_cycles,
        steady=converged,
        steady_cycle=None,
        f_sw=f_sw,
        duty_limited_cycles=runner.duty_limited,
        final_state=recs[-1].w_start[0:2].copy(),
        **summary,
    )


# ------------------------------------------------------------------------------ designs
def controller_for_design(spec: Any, controller: Any) -> ControllerModel:
    """Wrap what the design flow produced as a simulator controller.

    Parameters
    ----------
    spec : DesignSpec
        Supplies ``Fm = 1/ramp``, ``H``, ``v_ref`` and the ``[digital]`` options.
    controller : object
        An :class:`AnalogController` / :class:`DigitalController` (returned as is); a
        ``loopwright.discrete.DigitalDesign`` (its quantised implementation); an object with
        ``b`` and ``a`` (a discrete controller, error [V] -> duty; options from
        ``spec.digital``); or a compensator with ``statespace()`` or ``num``/``den`` (analog).

    Raises
    ------
    DesignError
        When the object is none of these.

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.5 (loop gain ``T = Gc Fm Gvd H``).
    """
    if isinstance(controller, AnalogController | DigitalController):
        return controller
    rate = None
    if hasattr(controller, "options") and hasattr(controller, "controller"):
        rate = controller.options.sample_rate_hz
    elif hasattr(controller, "b") and hasattr(controller, "a") and spec.digital is not None:
        rate = spec.digital.sample_rate_hz
    f_sw = spec.power_stage.f_sw
    if rate is not None and abs(rate - f_sw) > 1e-9 * f_sw:
        raise DesignError(
            f"the switching simulator samples once per period: sample rate must equal fsw "
            f"({f_sw:g} Hz), got {rate:g} Hz",
            key="digital.sample_rate",
        )
    if hasattr(controller, "options") and hasattr(controller, "controller"):
        return DigitalController.from_design(
            controller, v_ref=spec.v_ref, sense_gain=spec.sense_gain
        )
    if hasattr(controller, "b") and hasattr(controller, "a"):
        dig = spec.digital
        kw = dig.hardware() if dig is not None else {}
        return DigitalController(controller.b, controller.a, spec.sense_gain, spec.v_ref, **kw)
    if hasattr(controller, "statespace") or (
        hasattr(controller, "num") and hasattr(controller, "den")
    ):
        return AnalogController.from_compensator(
            controller,
            modulator_gain=spec.modulator_gain,
            sense_gain=spec.sense_gain,
            v_ref=spec.v_ref,
        )
    raise DesignError(
        f"cannot simulate a controller of type {type(controller).__name__}", key="controller"
    )


def simulate_design(
    spec: Any,
    controller: Any = None,
    *,
    open_loop: bool = False,
    max_cycles: int = 20000,
    load_step: LoadStep | tuple[float, float] | None = None,
    line_step: LineStep | tuple[float, float] | None = None,
    progress: Progress = None,
    **options: Any,
) -> SimulationResult:
    """Simulate a design at its nominal line and load: the ``loopwright simulate`` entry point.

    Parameters
    ----------
    spec : DesignSpec
        The design (power stage at nominal ``vin``, ``iout``; ``fsw``; ramp, divider).
    controller : object, optional
        See :func:`controller_for_design`. Required unless ``open_loop``.
    open_loop : bool
        Run at the averaged operating-point duty instead (the DCM estimate at a DCM point).
    max_cycles : int
        Cycle cap (``--cycles N``).
    load_step : LoadStep or (from_a, to_a), optional
        Load step once steady (``--load-step FROM TO``), resistive by default; the initial
        load is ``from_a``.
    line_step : LineStep or (from_v, to_v), optional
    progress : callable, optional
        Called with the fraction done.
    **options
        Passed to :func:`simulate` (``tol``, ``soft_start_cycles``, ``points_per_cycle``...).

    Returns
    -------
    SimulationResult
        ``to_dict()`` gives the contract's JSON.

    Raises
    ------
    DesignError
        No controller in closed loop, bad step values.

    Notes
    -----
    The line is the nominal ``vin`` (or ``line_step.from_v``), the load the nominal ``iout``
    (or ``load_step.from_a``); see :func:`simulate` for the method.

    References
    ----------
    .. [1] R. D. Middlebrook and S. Cuk, "A general unified approach to modelling
       switching-converter power stages," IEEE PESC Record, 1976, pp. 18-34.
    """
    from ..plant import analyze_corner
    from ..spec import Corner

    ps = spec.power_stage
    if isinstance(load_step, tuple | list):
        load_step = LoadStep(float(load_step[0]), float(load_step[1]))
    if isinstance(line_step, tuple | list):
        line_step = LineStep(float(line_step[0]), float(line_step[1]))
    i_out = ps.i_out if load_step is None else load_step.from_a
    params = ps.parameters(i_out=i_out)
    if load_step is not None and load_step.kind == "current":
        params = replace(params, g_load=0.0)
    v_in = ps.v_in if line_step is None else line_step.from_v
    if open_loop:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ModelValidityWarning)
            cp = analyze_corner(spec, Corner("nominal", v_in, max(i_out, 0.0)))
        duty = float(cp.op.duty)
        if not math.isfinite(duty):
            raise DesignError("no operating-point duty at this point", key="power_stage")
        return simulate(
            ps.topology, params, v_in=v_in, f_sw=ps.f_sw, duty=duty, max_cycles=max_cycles,
            load_step=load_step, line_step=line_step, progress=progress, **options,
        )  # fmt: skip
    if controller is None:
        raise DesignError(
            "closed-loop simulation needs the designed controller (or open_loop=True)",
            key="controller",
        )
    model = controller_for_design(spec, controller)
    return simulate(
        ps.topology, params, v_in=v_in, f_sw=ps.f_sw, controller=model, max_cycles=max_cycles,
        load_step=load_step, line_step=line_step, progress=progress, **options,
    )  # fmt: skip
