"""Loop gain measured on the switching model by series voltage injection.

A sinusoidal source ``v_inj = A sin(w t)`` sits in series between the converter output (node
``a``) and the sensing divider (node ``b``), so ``v_b = v_a + v_inj`` and the controller acts on
``v_b`` (the inverting stage's error amplifier senses ``-v_b``, so the measured loop is the
design flow's, built from ``-Gvd``). After the loop has settled, the complex amplitudes of
``v_a`` and ``v_b`` at ``f`` are taken by a single-bin DFT over whole injection periods, and
``T = -V_a / V_b`` (METHODS 10.2).
The oscillator is part of the exact piecewise-linear state (two states, ``s_1' = w s_2``,
``s_2' = -w s_1``), so the injected signal is exact too.

Frequencies are moved to the nearest ``f_sw p/q`` (within 2 %), so that a window of ``q``
switching periods holds exactly ``p`` injection periods and the switching ripple, periodic in
the window, leaves the DFT bin alone. All frequencies run as one batch: every member has its
own oscillator, and each switching period is advanced for all members at once; a member leaves
the batch when its window is complete.

References
----------
.. [1] R. D. Middlebrook, "Measurement of loop gain in feedback systems," Int. J. Electronics
   38(4):485-512, 1975.
"""

from __future__ import annotations

import copy
import math
import time
import warnings
from collections import deque
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import DesignError
from ..topologies import PowerStageParameters, Topology
from ._circuit import ON, Circuit, Cycle
from ._propagator import expm
from .controllers import AnalogController, ControllerModel, DigitalController
from .engine import (
    _closed_loop_matrices,
    _count,
    _loop_function,
    _model_info,
    _positive,
    _quantisation_floor,
    _run_to_steady,
    _Runner,
    _soft_start,
    _topology,
    controller_for_design,
)

__all__ = [
    "LoopGainMeasurement",
    "loop_gain_by_injection",
    "measure_loop_gain",
    "measure_linear_loop_gain",
    "middlebrook_combination",
]

#: Largest relative change of a requested frequency when aligning it to f_sw p/q.
FREQUENCY_ALIGNMENT = 0.02


@dataclass(frozen=True, eq=False)
class LoopGainMeasurement:
    """Loop gain by injection, with the averaged model's value at the same frequencies.

    Attributes
    ----------
    f_hz : ndarray
        Measurement frequencies (aligned to ``f_sw p/q``). [Hz]
    measured : ndarray of complex
        ``T = -V_a/V_b`` from the switching simulation.
    model : ndarray of complex
        Averaged-model loop gain at ``f_hz`` (analog ``Gc Fm Gvd H``; digital
        ``Gc(z) Gvd H e^{-s delay Ts}``; ``-Gvd`` for the inverting stage, as in the design
        flow).
    amplitude_v : ndarray
        Injection amplitude used at each frequency. [V]
    cycles : int
        Switching periods simulated in the batch (after the initial settling run).
    settle_cycles : int
        Periods of the initial closed-loop run to steady state.
    wall_time_s : float
        Wall-clock time of the measurement. [s]
    """

    f_hz: np.ndarray
    measured: np.ndarray
    model: np.ndarray
    amplitude_v: np.ndarray
    cycles: int
    settle_cycles: int
    wall_time_s: float = field(default=0.0, compare=False)

    @property
    def measured_mag_db(self) -> np.ndarray:
        return 20 * np.log10(np.abs(self.measured))

    @property
    def measured_phase_deg(self) -> np.ndarray:
        return np.degrees(np.angle(self.measured))

    @property
    def model_mag_db(self) -> np.ndarray:
        return 20 * np.log10(np.abs(self.model))

    @property
    def model_phase_deg(self) -> np.ndarray:
        return np.degrees(np.angle(self.model))

    def to_dict(self) -> dict:
        """The contract's ``--frequency-response`` JSON (phases wrapped to (-180, 180])."""
        return {
            "f_hz": self.f_hz.tolist(),
            "measured_mag_db": self.measured_mag_db.tolist(),
            "measured_phase_deg": self.measured_phase_deg.tolist(),
            "model_mag_db": self.model_mag_db.tolist(),
            "model_phase_deg": self.model_phase_deg.tolist(),
            "amplitude_v": self.amplitude_v.tolist(),
            "cycles": int(self.cycles),
            "convention": "T = -Va/Vb, series voltage injection between output and divider",
        }


def middlebrook_combination(t_v: complex, t_i: complex) -> complex:
    """True loop gain from a voltage-injection and a current-injection measurement.

    Parameters
    ----------
    t_v : complex
        ``-v_a/v_b`` with a series voltage source.
    t_i : complex
        ``-i_a/i_b`` with a shunt current source at the same point.

    Returns
    -------
    complex
        ``T = (Tv Ti - 1) / (Tv + Ti + 2)``, exact for any impedance ratio at the point.

    References
    ----------
    .. [1] R. D. Middlebrook, "Measurement of loop gain in feedback systems," Int. J.
       Electronics 38(4):485-512, 1975.

    Examples
    --------
    >>> t = middlebrook_combination(-1 - 2.251666j, -1 - 7.505553j)
    >>> round(t.real, 5), round(t.imag, 5)
    (-1.0, -1.73205)
    """
    return (t_v * t_i - 1.0) / (t_v + t_i + 2.0)


def align_frequency(f_hz: float, f_sw: float, max_q: int = 4000) -> tuple[float, int, int]:
    """Nearest ``f_sw p/q`` with the smallest window ``q`` (relative error <= 2 %).

    Returns
    -------
    f, p, q : float, int, int
        Aligned frequency [Hz], injection periods and switching periods per window.
    """
    best = None
    for q in range(1, max_q + 1):
        p = max(1, round(f_hz * q / f_sw))
        f = f_sw * p / q
        err = abs(f / f_hz - 1.0)
        if best is None or err < best[0]:
            best = (err, f, p, q)
        if err <= FREQUENCY_ALIGNMENT:
            g = math.gcd(p, q)
            return f, p // g, q // g
    assert best is not None
    return best[1], best[2], best[3]


def _functional_tables(circuit: Circuit) -> list[np.ndarray]:
    """Per interval kind: ``[v_out row, s_1 row] exp(M k delta) M^j/j!`` (B, N+1, K+1, 2, s)."""
    lay = circuit.lay
    out = []
    for kind, prop in enumerate(circuit.props):
        rows = np.zeros((prop.batch, 2, lay.size))
        rows[:, 0] = circuit.rows_vout[kind]
        rows[:, 1, lay.s1] = 1.0
        rp = np.einsum("brs,bnsk->bnrk", rows, prop.table)
        out.append(np.einsum("bnrk,bjkl->bnjrl", rp, prop.mpow))
    return out


def _sample_functionals(
    circuit: Circuit, tables: list[np.ndarray], cyc: Cycle, members: np.ndarray, times: np.ndarray
) -> np.ndarray:
    """``v_out`` and ``s_1`` at ``times`` of the period for every row: (P, n, 2)."""
    p = cyc.seg_kind.shape[0]
    n = times.size
    seg = np.sum(cyc.seg_t0[:, None, :] <= times[None, :, None], axis=2) - 1
    seg = np.clip(seg, 0, None)
    rows = np.repeat(np.arange(p), n)
    segf = seg.reshape(-1)
    kind = cyc.seg_kind[rows, segf]
    tau = np.tile(times, p) - cyc.seg_t0[rows, segf]
    wstart = cyc.seg_w0[rows, segf]
    out = np.empty((p * n, 2))
    for k in np.unique(kind):
        sel = kind == k
        prop = circuit.props[k]
        kk = np.minimum(np.maximum((tau[sel] / prop.delta).astype(np.int64), 0), prop.n)
        r = tau[sel] - kk * prop.delta
        powers = r[:, None] ** np.arange(prop.order + 1)[None, :]
        tab = tables[k][members[rows[sel]], kk]  # (q, K+1, 2, s)
        vals = np.einsum("qjrs,qs->qjr", tab, wstart[sel])
        out[sel] = np.einsum("qj,qjr->qr", powers, vals)
    return out.reshape(p, n, 2)


def loop_gain_by_injection(
    topology: str | Topology,
    params: PowerStageParameters,
    controller: ControllerModel,
    *,
    v_in: float,
    f_sw: float,
    f_hz: Sequence[float],
    amplitude_v: float | Sequence[float] | None = None,
    duty_amplitude: float = 0.01,
    points_per_cycle: int = 64,
    min_periods: int = 3,
    min_cycles: int = 40,
    settle_accuracy: float = 2e-3,
    max_cycles: int = 20000,
    progress: Callable[[float], None] | None = None,
) -> LoopGainMeasurement:
    """Loop gain of a closed-loop switching converter by series voltage injection.

    Parameters
    ----------
    topology, params, v_in, f_sw
        Power stage and operating point (as for :func:`~loopwright.simulate.simulate`).
    controller : AnalogController or DigitalController
    f_hz : sequence of float
        Requested frequencies, in (0, f_sw/2); each is aligned to ``f_sw p/q``. [Hz]
    amplitude_v : float or sequence, optional
        Injection amplitude(s). Default: per frequency from the averaged model, so that the
        duty modulation is ``duty_amplitude`` (capped so the output moves by at most 2 % of
        its value and the source by at most 5 %). [V]
    duty_amplitude : float
        Target duty modulation for the default amplitude. [-]
    points_per_cycle : int
        DFT samples per switching period.
    min_periods, min_cycles : int
        The DFT spans whole windows covering at least this many injection periods and
        switching periods.
    settle_accuracy : float
        Injection starts from the averaged model's sinusoidal steady state (analog) and runs
        until the slowest closed-loop mode has decayed to this fraction before the DFT.
    max_cycles : int
        Cap for the initial run to steady state and for the settling of the batch.
    progress : callable, optional
        Called with the fraction done.

    Returns
    -------
    LoopGainMeasurement

    Raises
    ------
    DesignError
        Bad frequencies or amplitudes, or when the closed loop does not reach steady state.

    Notes
    -----
    ``T = -V_a/V_b`` with ``V`` the single-bin DFT ``sum v(t_n) e^{-j w t_n}`` over whole
    injection periods that are also whole switching periods (METHODS 10.2). The sign convention
    makes closed-loop quantities carry ``1/(1 + T)``. Near and above ``f_sw/2`` the result
    includes sideband effects and is not an LTI loop gain.

    References
    ----------
    .. [1] R. D. Middlebrook, "Measurement of loop gain in feedback systems," Int. J.
       Electronics 38(4):485-512, 1975.
    """
    start = time.perf_counter()
    topo = _topology(topology)
    f_sw = _positive(f_sw, "power_stage.fsw")
    v_in = _positive(v_in, "power_stage.vin")
    points = _count(points_per_cycle, "points_per_cycle", 4, 100000)
    freqs = np.atleast_1d(np.asarray(f_hz, dtype=float))
    if freqs.ndim != 1 or freqs.size == 0:
        raise DesignError("need at least one frequency", key="f_hz")
    for f in freqs:
        if not (math.isfinite(f) and 0 < f < f_sw / 2):
            raise DesignError(f"must be in (0, fsw/2 = {f_sw / 2:g}) Hz, got {f!r}", key="f_hz")
    if not isinstance(controller, AnalogController | DigitalController):
        raise DesignError("loop gain needs a closed-loop controller", key="controller")
    ts = 1.0 / f_sw
    info = _model_info(topo, params, v_in, f_sw, None, controller)
    # ---- closed loop to steady state ------------------------------------------------------
    runner = _Runner(topo, params, v_in=v_in, f_sw=f_sw, duty=None, controller=controller, x0=None)
    ramp = _soft_start(runner, info, None, max_cycles)
    steady, _, _ = _run_to_steady(
        runner, info, max_cycles=max_cycles, tol=1e-6, record_cycles=20, ramp_cycles=ramp,
        floor=_quantisation_floor(controller, info, v_in), progress=progress,
        progress_span=(0.0, 0.3),
    )  # fmt: skip
    if not steady:
        raise DesignError(
            f"the closed loop did not reach steady state within {max_cycles} cycles; the loop "
            "gain cannot be measured",
            key="controller",
        )
    settle_cycles = runner.k
    # ---- frequencies, windows, amplitudes ---------------------------------------------------
    aligned = [align_frequency(f, f_sw) for f in freqs]
    fa = np.array([a[0] for a in aligned])
    p_per = np.array([a[1] for a in aligned])
    q_per = np.array([a[2] for a in aligned])
    reps = np.maximum(np.ceil(min_periods / p_per), np.ceil(min_cycles / q_per)).astype(int)
    n_meas = reps * q_per
    omegas = 2 * np.pi * fa
    avg = info.avg
    if avg is None:
        raise DesignError("no averaged model at this operating point", key="power_stage")
    loop = _loop_function(avg, controller, ts)
    t_model = loop(omegas)
    v_out = info.v_expected
    if amplitude_v is None:
        gvd = np.abs(avg.freqresp("v_out", "d", fa))
        amp = duty_amplitude * gvd * np.abs(1 + t_model) / np.maximum(np.abs(t_model), 1e-12)
        amp = np.minimum(
            amp, 0.02 * v_out * np.abs(1 + t_model) / np.maximum(np.abs(t_model), 1e-12)
        )
        amp = np.minimum(amp, 0.05 * v_out)
    else:
        amp = np.broadcast_to(np.asarray(amplitude_v, dtype=float), fa.shape).copy()
        if not np.all(np.isfinite(amp) & (amp > 0)):
            raise DesignError(f"must be > 0 V, got {amplitude_v!r}", key="amplitude_v")
    # settling of the batch: slowest closed-loop mode to settle_accuracy
    rho = min(info.rho, 1 - 1e-9)
    analog = isinstance(controller, AnalogController)
    start_err = 0.05 if analog else 1.0
    n_settle = int(min(max(math.ceil(math.log(settle_accuracy / start_err) / math.log(rho)), 10),
                       max_cycles))  # fmt: skip
    n_settle = (np.ceil(n_settle / q_per) * q_per).astype(int)
    total = int(np.max(n_settle + n_meas))
    # ---- batch -----------------------------------------------------------------------------
    b = fa.size
    members = np.arange(b)
    circuit = Circuit(runner.circuit.model, f_sw, controller if analog else None, omegas)
    lay = circuit.lay
    w = np.zeros((b, lay.size))
    old = runner.lay
    w[:, 0:2] = runner.w[0, 0:2]
    w[:, lay.z] = runner.w[0, old.z]
    w[:, lay.u] = runner.w[0, old.u]
    w[:, lay.ref] = runner.w[0, old.ref]
    w[:, lay.s2] = amp  # s_1 = A sin(w t), s_2 = A cos(w t), t from the batch start
    if analog:
        # start on the averaged model's sinusoidal steady state: X = Im(Xh e^{j w t}) at t = 0
        acl, binj = _closed_loop_matrices(avg, controller)
        eye = np.eye(acl.shape[0])
        for i in range(b):
            xh = np.linalg.solve(1j * omegas[i] * eye - acl, binj * amp[i])
            # v_inj = Im(A e^{j w t}): phasor of the response is xh, value Im(xh) at t = 0
            w[i, 0:2] += xh[0:2].imag
            w[i, lay.z] += xh[2:].imag
    steps: list[Any] = []
    pendings: list[deque] = []
    if not analog:
        n_delay = runner.n_delay
        phi = runner.phi
        for _ in range(b):
            steps.append(copy.deepcopy(runner.step))
            pendings.append(copy.deepcopy(runner.pending))
    times = np.arange(points) * (ts / points)
    acc = np.zeros((b, 2), dtype=complex)
    tables = _functional_tables(circuit)
    every = max(1, total // 50)
    # members still running (batch indices); a member leaves the batch once its DFT window is
    # complete, so the long low-frequency windows finish on a small batch (one row: the
    # scalar period of Circuit.cycle)
    live = members.copy()
    end = n_settle + n_meas
    for k in range(total):
        t_on = None
        if analog:
            if controller.pwm == "sampled":
                d = controller.modulator_gain * circuit.v_control(w)
                t_on = np.clip(d, 0.0, controller.duty_max) * ts
        else:
            if n_delay == 0:
                _digital_samples(circuit, controller, w, None, 0.0, live, steps, pendings)
            t_on = np.array([pq.popleft() for pq in pendings]) * ts
        cyc = circuit.cycle(w, live, t_on)
        if not analog and n_delay > 0:
            _digital_samples(circuit, controller, w, cyc, phi * ts, live, steps, pendings)
        measuring = k >= n_settle[live]
        if np.any(measuring):
            rows = np.flatnonzero(measuring)
            ids = live[rows]
            sub = Cycle(
                cyc.w_end[rows], cyc.t_on[rows], cyc.seg_kind[rows], cyc.seg_t0[rows],
                cyc.seg_w0[rows], cyc.dcm[rows],
            )  # fmt: skip
            vals = _sample_functionals(circuit, tables, sub, ids, times)
            va = vals[:, :, 0]
            vb = va + vals[:, :, 1]
            tt = (k - n_settle[ids])[:, None] * ts + times[None, :]
            ph = np.exp(-1j * omegas[ids, None] * tt)
            acc[ids, 0] += np.sum(va * ph, axis=1)
            acc[ids, 1] += np.sum(vb * ph, axis=1)
        w = cyc.w_end
        keep = end[live] > k + 1
        if not np.all(keep):
            live, w = live[keep], w[keep]
            if not analog:
                steps = [st for st, kp in zip(steps, keep, strict=True) if kp]
                pendings = [pq for pq, kp in zip(pendings, keep, strict=True) if kp]
            if live.size == 0:
                break
        if progress is not None and k % every == 0:
            progress(0.3 + 0.7 * k / total)
    if progress is not None:
        progress(1.0)
    measured = -acc[:, 0] / acc[:, 1]
    return LoopGainMeasurement(
        f_hz=fa,
        measured=measured,
        model=t_model,
        amplitude_v=amp,
        cycles=total,
        settle_cycles=settle_cycles,
        wall_time_s=time.perf_counter() - start,
    )


def _digital_samples(circuit, controller, w, cyc, t_sample, members, steps, pendings) -> None:
    """Sample ``v_b`` for every member, step its controller, queue the duty."""
    lay = circuit.lay
    if cyc is None or t_sample == 0.0:
        ws = w
        vout = ws @ circuit.rows_vout[ON]
    else:
        wpts, kind = circuit.evaluate(cyc, members, np.array([t_sample]))
        ws = wpts[:, 0]
        vout = np.einsum("bs,bs->b", ws, circuit.rows_vout[kind[:, 0]])
    vb = circuit.sense_sign * (vout + ws[:, lay.s1])  # sensed: -v_b for the inverting stage
    for i in range(w.shape[0]):
        ref = float(ws[i, lay.ref])
        e = ref - (controller.v_ref - controller.sense(float(vb[i])))
        pendings[i].append(controller.actuate(steps[i](e)))


def measure_loop_gain(
    spec: Any,
    controller: Any,
    f_hz: Sequence[float] | None = None,
    *,
    points: int = 15,
    progress: Callable[[float], None] | None = None,
    **options: Any,
) -> LoopGainMeasurement:
    """Loop gain of a design measured by injection: ``loopwright simulate --frequency-response``.

    Parameters
    ----------
    spec : DesignSpec
        Design at its nominal line and load.
    controller : object
        See :func:`~loopwright.simulate.controller_for_design`.
    f_hz : sequence of float, optional
        Frequencies [Hz]. Default: ``points`` log-spaced from ``f_c/10`` to
        ``min(10 f_c, f_sw/4)`` (``f_c`` the averaged loop's crossover; without one,
        ``f_sw/200`` to ``f_sw/4``).
    points : int
        Number of default frequencies (``--points N``).
    progress : callable, optional
        Called with the fraction done.
    **options
        Passed to :func:`loop_gain_by_injection`.

    Returns
    -------
    LoopGainMeasurement
        ``to_dict()`` gives the contract's JSON.

    Raises
    ------
    DesignError
        No controller, bad frequencies, or a loop that does not settle.

    References
    ----------
    .. [1] R. D. Middlebrook, "Measurement of loop gain in feedback systems," Int. J.
       Electronics 38(4):485-512, 1975.
    """
    ps = spec.power_stage
    model = controller_for_design(spec, controller)
    params = ps.parameters(i_out=ps.i_out)
    if f_hz is None:
        n = _count(points, "points", 1, 1000)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            info = _model_info(_topology(ps.topology), params, ps.v_in, ps.f_sw, None, model)
        if info.f_c is not None:
            lo, hi = info.f_c / 10.0, min(10.0 * info.f_c, ps.f_sw / 4.0)
        else:
            lo, hi = ps.f_sw / 200.0, ps.f_sw / 4.0
        f_hz = np.logspace(math.log10(lo), math.log10(hi), n)
    return loop_gain_by_injection(
        ps.topology, params, model, v_in=ps.v_in, f_sw=ps.f_sw, f_hz=f_hz, progress=progress,
        **options,
    )  # fmt: skip


def measure_linear_loop_gain(
    plant: tuple,
    compensator: tuple,
    f_hz: Sequence[float],
    *,
    amplitude_v: float = 1e-3,
    settle_time_s: float = 2e-3,
    periods: int = 60,
    dft_periods: int = 40,
    samples_per_period: int = 400,
) -> np.ndarray:
    """Injection on a linear (averaged) loop, solved exactly: a check of the procedure.

    The loop is ``plant`` (control input -> output node ``a``) and ``compensator`` (acting on
    ``-v_b``, ``v_b = v_a + v_inj``), both as ``(A, B, C, D)``; ``T = Gc P``. The closed loop
    with the oscillator is advanced sample by sample with the exact matrix exponential; the
    DFT uses the last ``dft_periods`` of ``periods`` injection periods after ``settle_time_s``.

    Parameters
    ----------
    plant, compensator : tuple of array_like
        State-space matrices (SISO).
    f_hz : sequence of float
        Frequencies. [Hz]
    amplitude_v : float
        Injection amplitude. [V]
    settle_time_s : float
        Settling before the injection periods are counted. [s]
    periods, dft_periods, samples_per_period : int
        Injection periods simulated after settling, periods in the DFT, samples per period.

    Returns
    -------
    ndarray of complex
        ``T = -V_a/V_b`` at each frequency.

    References
    ----------
    .. [1] R. D. Middlebrook, "Measurement of loop gain in feedback systems," Int. J.
       Electronics 38(4):485-512, 1975.
    """
    ap, bp, cp, dp = (np.atleast_2d(np.asarray(x, dtype=float)) for x in plant)
    ac, bc, cc, dc = (np.atleast_2d(np.asarray(x, dtype=float)) for x in compensator)
    n, m = ap.shape[0], ac.shape[0]
    if float(dp[0, 0]) != 0.0:
        raise DesignError("the plant must be strictly proper", key="plant")
    out = []
    for f in np.atleast_1d(np.asarray(f_hz, dtype=float)):
        om = 2 * np.pi * f
        # states [x, z, s1, s2]; v_a = cp x; v_b = v_a + s1; e = -v_b; u = cc z + dc e
        size = n + m + 2
        big = np.zeros((size, size))
        row_vb = np.zeros(size)
        row_vb[:n] = cp[0]
        row_vb[n + m] = 1.0
        row_u = np.zeros(size)
        row_u[n : n + m] = cc[0]
        row_u -= dc[0, 0] * row_vb
        big[:n, :n] = ap
        big[:n] += np.outer(bp[:, 0], row_u)
        big[n : n + m, n : n + m] = ac
        big[n : n + m] -= np.outer(bc[:, 0], row_vb)
        big[n + m, n + m + 1] = om
        big[n + m + 1, n + m] = -om
        h = 1.0 / (f * samples_per_period)
        phi = expm(big * h)
        w = np.zeros(size)
        w[n + m + 1] = amplitude_v
        n_settle = math.ceil(settle_time_s / h)
        total = n_settle + periods * samples_per_period
        first = total - dft_periods * samples_per_period
        acc_a = acc_b = 0j
        for i in range(total):
            if i >= first:
                t = (i - first) * h
                va = float(cp[0] @ w[:n])
                vb = va + w[n + m]
                e = np.exp(-1j * om * t)
                acc_a += va * e
                acc_b += vb * e
            w = phi @ w
        out.append(-acc_a / acc_b)
    return np.array(out)
