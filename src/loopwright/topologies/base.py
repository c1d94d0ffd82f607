"""What a topology is: linear state equations for each switching interval.

A topology is data for one engine. It says, for each interval of the switching period, the
linear state equations

    x' = A x + B u,    y = C x + D u

with named states, inputs and outputs. The averaging engine (:mod:`loopwright.averaging`) and
the switching simulator (:mod:`loopwright.simulate`) both consume this description and nothing
else, so adding a topology (SEPIC, Cuk, flyback, forward) is one new definition.

Sign conventions shared by all definitions:

* states ``x = [i_l, v_c]``: inductor current (A) and the voltage on the ideal part of the output
  capacitor (V, ESR excluded);
* inputs ``u = [v_in, i_load, v_f]``: line voltage (V), extra current *drawn* from the output node
  by the load besides the resistive load ``r_load`` (A; zero at the operating point, a
  small-signal input for the output impedance), and the rectifier diode's forward drop (V; zero
  for a synchronous rectifier);
* outputs ``y = [v_out, i_in]``: output voltage including the ESR drop (V) and the current drawn
  from the line source (A).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np

__all__ = [
    "Interval",
    "SwitchedModel",
    "PowerStageParameters",
    "STATES",
    "INPUTS",
    "OUTPUTS",
    "lc_interval",
]

STATES = ("i_l", "v_c")
INPUTS = ("v_in", "i_load", "v_f")
OUTPUTS = ("v_out", "i_in")


@dataclass(frozen=True)
class Interval:
    """Linear state equations that hold during one switching interval.

    Attributes
    ----------
    name : str
        ``"on"`` (main switch conducting), ``"off"`` (rectifier conducting) or ``"idle"``
        (both off, inductor current zero: the third interval of discontinuous conduction).
    a, b, c, d : numpy.ndarray
        State, input, output and feed-through matrices, shapes (n, n), (n, m), (p, n), (p, m).
    """

    name: str
    a: np.ndarray
    b: np.ndarray
    c: np.ndarray
    d: np.ndarray


@dataclass(frozen=True)
class SwitchedModel:
    """Switched state equations of a power stage, one :class:`Interval` per interval.

    Attributes
    ----------
    topology : str
        Topology name (``"buck"``, ``"boost"``, ``"buck-boost"``).
    on, off : Interval
        Equations while the main switch conducts (length ``d*Ts``) and while the rectifier
        conducts (length ``(1-d)*Ts`` in continuous conduction).
    idle : Interval or None
        Equations while neither conducts and the inductor current rests at zero (diode
        rectifier in discontinuous conduction). ``None`` for synchronous rectifiers, which
        conduct in both directions.
    inverting : bool
        True when the output voltage is negative with respect to the input's return.
    states, inputs, outputs : tuple of str
        Signal names, in the order of the matrix rows/columns.
    """

    topology: str
    on: Interval
    off: Interval
    idle: Interval | None
    inverting: bool
    states: tuple[str, ...] = STATES
    inputs: tuple[str, ...] = INPUTS
    outputs: tuple[str, ...] = OUTPUTS

    def index(self, kind: Literal["state", "input", "output"], name: str) -> int:
        """Position of a named signal."""
        names = {"state": self.states, "input": self.inputs, "output": self.outputs}[kind]
        return names.index(name)


@dataclass(frozen=True)
class PowerStageParameters:
    """Component values of a single-inductor, single-capacitor power stage (SI units).

    Attributes
    ----------
    inductance : float
        Inductor. [H]
    c_out : float
        Output capacitance. [F]
    g_load : float
        Load conductance ``1/r_load`` (0 for no load). [S]
    r_dcr : float
        Inductor winding resistance. [ohm]
    r_esr : float
        Capacitor equivalent series resistance. [ohm]
    r_on : float
        Main switch on-resistance. [ohm]
    rectifier : {"synchronous", "diode"}
        Rectifier kind.
    r_rect : float
        Synchronous rectifier on-resistance or diode series resistance. [ohm]
    v_f : float
        Diode forward drop (ignored for a synchronous rectifier). [V]
    """

    inductance: float
    c_out: float
    g_load: float
    r_dcr: float = 0.0
    r_esr: float = 0.0
    r_on: float = 0.0
    rectifier: Literal["synchronous", "diode"] = "synchronous"
    r_rect: float = 0.0
    v_f: float = 0.0
    extra: dict = field(default_factory=dict)

    @property
    def r_load(self) -> float:
        """Load resistance (inf for no load). [ohm]"""
        return np.inf if self.g_load == 0 else 1.0 / self.g_load


def lc_interval(
    name: str,
    p: PowerStageParameters,
    *,
    k_in: float,
    k_out: float,
    r_path: float,
    k_f: float,
    k_node: float,
    k_line: float,
) -> Interval:
    """Interval equations of a stage with one inductor and one output capacitor.

    The interval is described by its inductor loop and the currents it routes::

        L di_l/dt = k_in v_in + k_out v_out - r_path i_l - k_f v_f
        current delivered into the output node = k_node i_l
        current drawn from the line            = k_line i_l

    The output node holds the capacitor (``c_out`` in series with ``r_esr``), the resistive
    load ``1/g_load`` and the extra load current ``i_load``. Eliminating ``v_out`` (which
    depends on ``i_l`` through the ESR) gives the matrices.

    Notes
    -----
    With ``a = 1/(1 + r_esr g)`` and ``r_p = r_esr a`` (``r_esr`` parallel the load)::

        v_out = a v_c + r_p (k_node i_l - i_load)
        C dv_c/dt = a (k_node i_l - i_load) - g a v_c

    which is the output-node equation of Middlebrook & Cuk's per-interval models with
    parasitics [1]_ written with the load conductance, so that an open-circuit load is allowed.

    References
    ----------
    .. [1] R. D. Middlebrook and S. Cuk, "A general unified approach to modelling
       switching-converter power stages," IEEE PESC Record, 1976, pp. 18-34.
    """
    L, C, g, rc = p.inductance, p.c_out, p.g_load, p.r_esr
    if _is_symbolic(p):
        import sympy

        k_in, k_out, k_f, k_node, k_line = (
            sympy.Rational(k) for k in (k_in, k_out, k_f, k_node, k_line)
        )
    a = 1 / (1 + rc * g)
    rp = rc * a
    A = [
        [(-r_path + k_out * rp * k_node) / L, k_out * a / L],
        [a * k_node / C, -g * a / C],
    ]
    B = [
        [k_in / L, -k_out * rp / L, -k_f / L],
        [0, -a / C, 0],
    ]
    Cm = [[rp * k_node, a], [k_line, 0]]
    D = [[0, -rp, 0], [0, 0, 0]]
    if _is_symbolic(p):
        import sympy

        def exact(e):
            return sympy.nsimplify(e, rational=True) if isinstance(e, float) else e

        return Interval(name, *(sympy.Matrix(m).applyfunc(exact) for m in (A, B, Cm, D)))
    return Interval(name, *(np.array(m, dtype=float) for m in (A, B, Cm, D)))


def _is_symbolic(p: PowerStageParameters) -> bool:
    """True when the parameters are sympy expressions (the symbolic view of the engine)."""
    values = (p.inductance, p.c_out, p.g_load, p.r_dcr, p.r_esr, p.r_on, p.r_rect, p.v_f)
    return any(type(v).__module__.startswith("sympy") for v in values)
