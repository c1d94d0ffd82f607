"""State-space averaging of switched state equations (Middlebrook & Cuk).

The engine works on any :class:`~loopwright.topologies.SwitchedModel`: it weights each
interval's matrices by the fraction of the period the interval lasts, solves the averaged DC
equations for the duty cycle that yields the requested output (losses included), and linearises
about that operating point to give the small-signal models as python-control systems.

Notes
-----
With interval matrices ``(A1, B1, C1, E1)`` (switch on, ``d Ts``) and ``(A2, B2, C2, E2)``
(rectifier on, ``(1-d) Ts``)::

    A = D A1 + D' A2  (likewise B, C, E)
    X = -A^-1 B U,    Y = C X + E U
    x^' = A x^ + B u^ + Bd d^,   y^ = C x^ + E u^ + Ed d^
    Bd = (A1 - A2) X + (B1 - B2) U,   Ed = (C1 - C2) X + (E1 - E2) U

References
----------
.. [1] R. D. Middlebrook and S. Cuk, "A general unified approach to modelling
   switching-converter power stages," IEEE PESC Record, 1976, pp. 18-34; Int. J. Electronics
   42(6):521-550, 1977.
.. [2] R. W. Erickson and D. Maksimovic, Fundamentals of Power Electronics, 2nd ed., Kluwer,
   2001, sec. 7.3 (state-space averaging) and ch. 5 (CCM/DCM boundary).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal

import control
import numpy as np
from scipy import optimize

from .errors import DesignError
from .topologies import PowerStageParameters, SwitchedModel, Topology

__all__ = [
    "averaged_matrices",
    "dc_solution",
    "solve_duty",
    "OperatingPoint",
    "TransferFeatures",
    "AveragedModel",
    "average",
    "analyze_stage",
    "transfer_features",
    "DUTY_BOUNDS",
]

#: Duty cycles searched when solving for the operating point.
DUTY_BOUNDS = (1e-4, 0.995)

TRANSFER_NAMES = ("control_to_output", "line_to_output", "output_impedance")


def averaged_matrices(model: SwitchedModel, duty: float):
    """Duty-weighted averages ``(A, B, C, E)`` of the on and off interval matrices.

    Parameters
    ----------
    model : SwitchedModel
        Switched state equations.
    duty : float
        Fraction of the period the main switch conducts, in (0, 1).

    Returns
    -------
    tuple of numpy.ndarray
        ``A, B, C, E`` of the averaged model (works for sympy matrices too).
    """
    on, off = model.on, model.off
    dp = 1 - duty
    return (
        duty * on.a + dp * off.a,
        duty * on.b + dp * off.b,
        duty * on.c + dp * off.c,
        duty * on.d + dp * off.d,
    )


def dc_solution(model: SwitchedModel, duty: float, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Equilibrium states and outputs of the averaged model, ``X = -A^-1 B U``.

    Returns
    -------
    x, y : numpy.ndarray
        States ``[i_l, v_c]`` and outputs ``[v_out, i_in]`` in SI units.
    """
    A, B, C, E = averaged_matrices(model, duty)
    x = -np.linalg.solve(A, B @ u)
    return x, C @ x + E @ u


def solve_duty(
    model: SwitchedModel,
    u: np.ndarray,
    v_out: float,
    *,
    bounds: tuple[float, float] = DUTY_BOUNDS,
    key: str = "power_stage.vout",
) -> float:
    """Duty cycle at which the lossy averaged model delivers ``|v_out|``.

    The output magnitude rises with duty up to a peak set by the losses (the boost's
    ``M_max = 1/(2 sqrt(rL/R))``, Erickson & Maksimovic sec. 3.3) and falls beyond it; the
    solution is taken on the rising branch, the one a regulator operates on.

    Raises
    ------
    DesignError
        When the output cannot be reached at any duty cycle (names ``key`` and the range).
    """
    target = abs(v_out)
    sgn = -1.0 if model.inverting else 1.0

    def out(dd: float) -> float:
        # output in the stage's own polarity (positive when it works as intended)
        return sgn * float(dc_solution(model, dd, u)[1][0])

    grid = np.linspace(bounds[0], bounds[1], 397)
    mags = np.empty_like(grid)
    for i, dd in enumerate(grid):
        try:
            mags[i] = out(dd)
        except np.linalg.LinAlgError:
            mags[i] = np.nan
    mags = np.where(np.isfinite(mags), mags, -np.inf)
    i_peak = int(np.argmax(mags))
    if i_peak not in (0, len(grid) - 1):
        res = optimize.minimize_scalar(
            lambda dd: -out(dd),
            bounds=(grid[i_peak - 1], grid[i_peak + 1]),
            method="bounded",
            options={"xatol": 1e-12},
        )
        d_peak, v_peak = float(res.x), float(-res.fun)
    else:
        d_peak, v_peak = float(grid[i_peak]), float(mags[i_peak])
    v_low = out(bounds[0])
    if not (v_low <= target <= v_peak):
        raise DesignError(
            f"|vout| = {target:.6g} V cannot be reached by the {model.topology} stage at "
            f"vin = {u[0]:.6g} V with these losses: reachable range is {max(v_low, 0):.4g} V to "
            f"{v_peak:.4g} V (duty {bounds[0]:g} to {d_peak:.4f})",
            key=key,
        )
    return float(
        optimize.brentq(
            lambda dd: out(dd) - target,
            bounds[0],
            d_peak,
            xtol=1e-14,
            rtol=1e-14,
            maxiter=200,
        )
    )


@dataclass(frozen=True)
class OperatingPoint:
    """DC operating point of the averaged power stage.

    Attributes
    ----------
    duty : float
        Duty cycle of the main switch.
    v_in : float
        Line voltage. [V]
    v_out : float
        Output voltage, signed (negative for the inverting buck-boost). [V]
    i_out : float
        Load current (magnitude). [A]
    i_l_avg : float
        Average inductor current. [A]
    i_in_avg : float
        Average line current. [A]
    p_in, p_out : float
        Input and output power. [W]
    efficiency : float or None
        ``p_out / p_in`` (None where not computed, e.g. a DCM corner).
    mode : {"ccm", "dcm"}
        Conduction mode.
    i_l_ripple_pp : float
        Peak-to-peak inductor ripple (small-ripple estimate from the on-interval slope). [A]
    k, k_crit : float
        Erickson & Maksimovic's ``K = 2L/(R Ts)`` and ``Kcrit(D)`` (ch. 5); ``K < Kcrit``
        means DCM for a diode rectifier (synchronous rectifiers stay in CCM).
    """

    duty: float
    v_in: float
    v_out: float
    i_out: float
    i_l_avg: float
    i_in_avg: float
    p_in: float
    p_out: float
    efficiency: float | None
    mode: Literal["ccm", "dcm"]
    i_l_ripple_pp: float
    k: float
    k_crit: float

    def to_dict(self) -> dict:
        """Contract JSON fields plus extras."""
        return {
            "duty": self.duty,
            "vout": self.v_out,
            "iout": self.i_out,
            "il_avg": self.i_l_avg,
            "efficiency": self.efficiency,
            "mode": self.mode,
            "vin": self.v_in,
            "iin_avg": self.i_in_avg,
            "pin_w": self.p_in,
            "pout_w": self.p_out,
            "il_ripple_pp": self.i_l_ripple_pp,
            "k": self.k,
            "k_crit": self.k_crit,
        }


@dataclass(frozen=True)
class TransferFeatures:
    """Salient features of a small-signal transfer function.

    Attributes
    ----------
    dc_gain : float
        Value at s = 0 (signed).
    poles_hz, zeros_hz : tuple of complex
        s-plane roots divided by 2*pi. [Hz]
    f0_hz : float or None
        Natural frequency of the dominant (lowest) pole pair. [Hz]
    q : float or None
        Quality factor of that pair, ``w0 / -(p1 + p2)``.
    rhp_zero_hz : float or None
        Lowest right-half-plane zero (step-up stages). [Hz]
    esr_zero_hz : float or None
        Left-half-plane zero due to the capacitor ESR, ``1/(2 pi rC C)`` as found among
        the model's zeros. [Hz]
    """

    dc_gain: float
    poles_hz: tuple[complex, ...]
    zeros_hz: tuple[complex, ...]
    f0_hz: float | None
    q: float | None
    rhp_zero_hz: float | None
    esr_zero_hz: float | None

    def to_dict(self) -> dict:
        def pairs(roots):
            return [[float(r.real), float(r.imag)] for r in roots]

        return {
            "dc_gain": self.dc_gain,
            "poles_hz": pairs(self.poles_hz),
            "zeros_hz": pairs(self.zeros_hz),
            "f0_hz": self.f0_hz,
            "q": self.q,
            "rhp_zero_hz": self.rhp_zero_hz,
            "esr_zero_hz": self.esr_zero_hz,
        }


def _zeros(a, b, c, d) -> np.ndarray:
    """Invariant zeros of a SISO state-space system (generalised eigenvalues)."""
    from scipy import linalg

    n = a.shape[0]
    top = np.hstack([a, b.reshape(n, 1)])
    bottom = np.hstack([c.reshape(1, n), np.array([[d]])])
    m = np.vstack([top, bottom])
    nmat = np.zeros_like(m)
    nmat[:n, :n] = np.eye(n)
    with np.errstate(all="ignore"):
        w = linalg.eigvals(m, nmat)
    w = w[np.isfinite(w)]
    return w[np.abs(w) < 1e15]


def transfer_features(
    a: np.ndarray,
    b: np.ndarray,
    c: np.ndarray,
    d: float,
    *,
    esr_zero_guess_hz: float | None = None,
) -> TransferFeatures:
    """Poles, zeros, dominant pair and special zeros of ``c (sI - a)^-1 b + d``.

    Parameters
    ----------
    a : (n, n) ndarray
    b, c : (n,) ndarray
    d : float
    esr_zero_guess_hz : float, optional
        ``1/(2 pi rC C)``: the LHP real zero nearest to it (within a factor 1.5) is reported
        as the ESR zero.
    """
    poles = np.linalg.eigvals(a)
    zeros = _zeros(a, b, c, d)
    dc = float(d - c @ np.linalg.solve(a, b))
    order = np.argsort(np.abs(poles))
    f0 = q = None
    if len(poles) >= 2:
        p1, p2 = poles[order[0]], poles[order[1]]
        w0sq = (p1 * p2).real
        if w0sq > 0:
            w0 = math.sqrt(w0sq)
            f0 = w0 / (2 * math.pi)
            s = -(p1 + p2).real
            q = w0 / s if s != 0 else math.inf
    rhp = [z for z in zeros if z.real > 0 and abs(z.imag) < 1e-9 * abs(z)]
    rhp_hz = min(z.real for z in rhp) / (2 * math.pi) if rhp else None
    esr_hz = None
    if esr_zero_guess_hz:
        lhp = [
            -z.real / (2 * math.pi) for z in zeros if z.real < 0 and abs(z.imag) <= 1e-9 * abs(z)
        ]
        if lhp:
            best = min(lhp, key=lambda f: abs(math.log(f / esr_zero_guess_hz)))
            if abs(math.log(best / esr_zero_guess_hz)) < math.log(1.5):
                esr_hz = best
    return TransferFeatures(
        dc_gain=dc,
        poles_hz=tuple(complex(p) / (2 * math.pi) for p in poles[order]),
        zeros_hz=tuple(complex(z) / (2 * math.pi) for z in sorted(zeros, key=abs)),
        f0_hz=f0,
        q=q,
        rhp_zero_hz=rhp_hz,
        esr_zero_hz=esr_hz,
    )


@dataclass(frozen=True)
class AveragedModel:
    """Averaged small-signal model of a power stage at an operating point.

    The state-space system has inputs ``[d, v_in, i_load, v_f]`` (duty, line, current drawn
    from the output, diode drop) and outputs ``[v_out, i_in]``; :meth:`to_control` returns it
    as a named python-control ``StateSpace`` and the ``g_*`` methods pick SISO paths by name.

    Attributes
    ----------
    model : SwitchedModel
        The switched equations the model was averaged from.
    op : OperatingPoint
        DC operating point.
    a : (n, n) ndarray
        Averaged state matrix. [1/s]
    b : (n, 4) ndarray
        Input matrix, columns ``d, v_in, i_load, v_f``.
    c : (2, n) ndarray
        Output matrix, rows ``v_out, i_in``.
    d : (2, 4) ndarray
        Feed-through.
    f_sw : float
        Switching frequency. [Hz]
    esr_zero_hz : float or None
        ``1/(2 pi rC C)`` of the output capacitor.
    """

    model: SwitchedModel
    op: OperatingPoint
    a: np.ndarray
    b: np.ndarray
    c: np.ndarray
    d: np.ndarray
    f_sw: float
    esr_zero_hz: float | None = None
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    inputs = ("d", "v_in", "i_load", "v_f")
    outputs = ("v_out", "i_in")

    def to_control(self) -> control.StateSpace:
        """The full averaged model as a python-control ``StateSpace`` with named signals."""
        return control.ss(
            self.a,
            self.b,
            self.c,
            self.d,
            inputs=list(self.inputs),
            outputs=list(self.outputs),
            states=list(self.model.states),
            name=f"{self.model.topology}_averaged",
        )

    def path(self, output: str, input: str, *, sign: float = 1.0):
        """SISO path ``(a, b, c, d)`` from a named input to a named output."""
        i = self.inputs.index(input)
        o = self.outputs.index(output)
        return self.a, sign * self.b[:, i], self.c[o], sign * float(self.d[o, i])

    def _ss(self, output, input, sign=1.0, name=None):
        a, b, c, d = self.path(output, input, sign=sign)
        return control.ss(a, b.reshape(-1, 1), c.reshape(1, -1), [[d]], name=name)

    def gvd(self) -> control.StateSpace:
        """Control-to-output ``v_out/d`` [V per unit duty]."""
        return self._ss("v_out", "d", name="Gvd")

    def gvg(self) -> control.StateSpace:
        """Line-to-output ``v_out/v_in``."""
        return self._ss("v_out", "v_in", name="Gvg")

    def zout(self) -> control.StateSpace:
        """Open-loop output impedance ``v_out/i_inj`` for a current injected into the output
        node (``i_inj = -i_load``). [ohm]"""
        return self._ss("v_out", "i_load", sign=-1.0, name="Zout")

    def gid(self) -> control.StateSpace:
        """Control-to-input-current ``i_in/d``. [A]"""
        return self._ss("i_in", "d", name="Gid")

    def yin(self) -> control.StateSpace:
        """Open-loop input admittance ``i_in/v_in``. [S]"""
        return self._ss("i_in", "v_in", name="Yin")

    def features(self, name: str = "control_to_output") -> TransferFeatures:
        """Features of ``control_to_output``, ``line_to_output`` or ``output_impedance``."""
        if name not in self._cache:
            io = {
                "control_to_output": ("v_out", "d", 1.0),
                "line_to_output": ("v_out", "v_in", 1.0),
                "output_impedance": ("v_out", "i_load", -1.0),
                "input_current": ("i_in", "d", 1.0),
            }[name]
            self._cache[name] = transfer_features(
                *self.path(io[0], io[1], sign=io[2]), esr_zero_guess_hz=self.esr_zero_hz
            )
        return self._cache[name]

    def freqresp(self, output: str, input: str, f_hz: np.ndarray) -> np.ndarray:
        """Complex frequency response of a named path at frequencies ``f_hz``."""
        sign = -1.0 if input == "i_load" else 1.0
        a, b, c, d = self.path(output, input, sign=sign)
        s = 2j * np.pi * np.asarray(f_hz, dtype=float)
        n = a.shape[0]
        eye = np.eye(n)
        out = np.array([c @ np.linalg.solve(si * eye - a, b) + d for si in np.ravel(s)])
        return out.reshape(np.shape(f_hz))


def average(
    model: SwitchedModel,
    duty: float,
    u: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Small-signal matrices at a duty cycle: ``(a, b, c, d, x)``.

    ``b`` and ``d`` gain a first column for the duty perturbation (``Bd``, ``Ed``) ahead of the
    model's own inputs.
    """
    A, B, C, E = averaged_matrices(model, duty)
    x = -np.linalg.solve(A, B @ u)
    bd = (model.on.a - model.off.a) @ x + (model.on.b - model.off.b) @ u
    ed = (model.on.c - model.off.c) @ x + (model.on.d - model.off.d) @ u
    b = np.column_stack([bd, B])
    d = np.column_stack([ed, E])
    return A, b, C, d, x


def analyze_stage(
    topology: Topology,
    params: PowerStageParameters,
    *,
    v_in: float,
    v_out: float,
    f_sw: float,
    duty: float | None = None,
) -> AveragedModel:
    """Operating point and averaged small-signal model of a power stage.

    Parameters
    ----------
    topology : Topology
        Registry entry (``loopwright.topologies.TOPOLOGIES[name]``).
    params : PowerStageParameters
        Component values and load.
    v_in : float
        Line voltage. [V]
    v_out : float
        Requested output magnitude. [V]
    f_sw : float
        Switching frequency. [Hz]
    duty : float, optional
        Evaluate at this duty cycle instead of solving for ``v_out``.

    Returns
    -------
    AveragedModel
        With ``op.mode == "dcm"`` where a diode rectifier runs discontinuous; callers must not
        use the CCM small-signal model there (see :func:`loopwright.plant.analyze_corner`).
    """
    model = topology.build(params)
    v_f = params.v_f if params.rectifier == "diode" else 0.0
    u = np.array([v_in, 0.0, v_f])
    if duty is None:
        duty = solve_duty(model, u, v_out)
    a, b, c, d, x = average(model, duty, u)
    y = c @ x + d[:, 1:] @ u
    vout, iin = float(y[0]), float(y[1])
    i_out = abs(vout) * params.g_load
    p_out = vout**2 * params.g_load
    p_in = v_in * iin
    # small-ripple inductor ripple from the on-interval slope (Erickson & Maksimovic ch. 2)
    slope_on = float((model.on.a @ x + model.on.b @ u)[0])
    ripple = abs(slope_on) * duty / f_sw
    k = 2 * params.inductance * params.g_load * f_sw
    k_crit = topology.k_crit(duty)
    dcm = params.rectifier == "diode" and abs(x[0]) < ripple / 2
    op = OperatingPoint(
        duty=float(duty),
        v_in=float(v_in),
        v_out=vout,
        i_out=i_out,
        i_l_avg=float(x[0]),
        i_in_avg=iin,
        p_in=p_in,
        p_out=p_out,
        efficiency=(p_out / p_in) if p_in > 0 else None,
        mode="dcm" if dcm else "ccm",
        i_l_ripple_pp=ripple,
        k=k,
        k_crit=k_crit,
    )
    esr = params.r_esr
    tau_esr = esr * params.c_out
    f_esr = 1 / (2 * math.pi * tau_esr) if tau_esr > 0 else None
    return AveragedModel(model=model, op=op, a=a, b=b, c=c, d=d, f_sw=f_sw, esr_zero_hz=f_esr)
