"""Symbolic view of the averaging engine (sympy).

The same topology definitions and the same averaging steps as the numeric path, run on sympy
symbols, give ``Gvd(s)`` and its salient features as expressions. sympy is imported here
only, lazily, so the numeric path never pays for it.

Symbols: ``L, C, R`` (inductor, capacitor, load), ``V_g`` (line), ``D`` (duty), ``r_L`` (DCR),
``r_C`` (ESR), ``R_on`` (main switch), ``R_r`` (rectifier resistance), ``V_F`` (diode drop).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from .topologies import TOPOLOGIES, PowerStageParameters

__all__ = ["SymbolicPlant", "symbolic_plant"]


@dataclass(frozen=True)
class SymbolicPlant:
    """Symbolic control-to-output transfer function and its features.

    Attributes
    ----------
    topology : str
    lossy : bool
        Whether parasitics are included.
    gvd : sympy.Expr
        ``Gvd(s)`` as a ratio of polynomials in ``s``.
    numerator, denominator : sympy.Expr
        Polynomials in ``s`` (denominator monic in ``s^2`` scaled to 1 at s = 0).
    dc_gain : sympy.Expr
    w0 : sympy.Expr
        Natural frequency of the LC pole pair ``sqrt(det A)``. [rad/s]
    q : sympy.Expr
        ``sqrt(det A)/(-trace A)``.
    zeros : list of sympy.Expr
        Roots of the numerator in ``s`` (a positive one is the RHP zero).
    rhp_zero : sympy.Expr or None
        The zero that is positive for positive component values (step-up stages). [rad/s]
    symbols : dict
        Name -> sympy Symbol.
    """

    topology: str
    lossy: bool
    gvd: Any
    numerator: Any
    denominator: Any
    dc_gain: Any
    w0: Any
    q: Any
    zeros: list
    rhp_zero: Any
    symbols: dict

    def evaluate(self, expr, **values) -> complex:
        """Substitute numbers for named symbols (``L=22e-6`` ...) and evaluate."""
        import sympy

        subs = {self.symbols[k]: v for k, v in values.items() if k in self.symbols}
        return complex(sympy.N(expr.subs(subs)))

    def pretty(self) -> str:
        """Human-readable block for the CLI."""
        import sympy

        d = self.symbols["D"]
        dp = sympy.Symbol("D'", positive=True)

        def f(expr):
            # written with the complement D' = 1 - D, the trade's habit for these stages
            if expr is None:
                return "none"
            if self.lossy:  # expanding the lossy forms makes them longer, not clearer
                return sympy.sstr(expr)
            try:
                e = sympy.factor_terms(sympy.expand(expr.subs(d, 1 - dp)))
                e = sympy.simplify(e) if len(str(e)) < 400 else e
            except (TypeError, ValueError, AttributeError):
                e = expr
            return sympy.sstr(e).replace("Abs(D')", "D'")

        kind = "lossy" if self.lossy else "ideal"
        lines = [
            f"{self.topology} ({kind}) control-to-output Gvd(s) = N(s)/Den(s)",
            f"  N(s)   = {f(self.numerator)}",
            f"  Den(s) = {f(self.denominator)}",
            f"  Gvd(0) = {f(self.dc_gain)}",
            f"  w0     = {f(self.w0)}",
            f"  Q      = {f(self.q)}",
            f"  RHP zero (rad/s) = {f(self.rhp_zero)}",
            *(["  (D' = 1 - D)"] if not self.lossy else []),
        ]
        return "\n".join(lines)


def symbolic_plant(topology: str, *, lossy: bool = False, rectifier: str = "diode"):
    """Run the averaging engine on symbols: ``Gvd(s)``, ``w0``, ``Q`` and the RHP zero.

    Parameters
    ----------
    topology : str
        ``buck``, ``boost`` or ``buck-boost``.
    lossy : bool
        Include DCR, ESR, switch and rectifier resistance and (for a diode) the forward drop.
    rectifier : {"diode", "synchronous"}
        Rectifier kind for the lossy model.

    Returns
    -------
    SymbolicPlant

    References
    ----------
    .. [1] R. D. Middlebrook and S. Cuk, "A general unified approach to modelling
       switching-converter power stages," IEEE PESC Record, 1976.
    """
    import sympy as sp

    L, C, R, Vg, D = sp.symbols("L C R V_g D", positive=True)
    s = sp.Symbol("s")  # complex frequency: zeros may lie in either half plane
    rL, rC, Ron, Rr, VF = sp.symbols("r_L r_C R_on R_r V_F", positive=True)
    syms = {"L": L, "C": C, "R": R, "V_g": Vg, "D": D, "s": s}
    if lossy:
        syms.update({"r_L": rL, "r_C": rC, "R_on": Ron, "R_r": Rr})
        if rectifier == "diode":
            syms["V_F"] = VF
        p = PowerStageParameters(
            inductance=L,
            c_out=C,
            g_load=1 / R,
            r_dcr=rL,
            r_esr=rC,
            r_on=Ron,
            rectifier=rectifier,  # type: ignore[arg-type]
            r_rect=Rr,
            v_f=VF if rectifier == "diode" else 0,
        )
    else:
        # the symbolic path needs sympy entries even where every parasitic is zero
        p = PowerStageParameters(
            inductance=L, c_out=C, g_load=1 / R, r_dcr=sp.Integer(0), rectifier="synchronous"
        )
    model = TOPOLOGIES[topology].build(p)
    on, off = model.on, model.off
    A = (D * on.a + (1 - D) * off.a).applyfunc(sp.cancel)
    B = D * on.b + (1 - D) * off.b
    Cm = D * on.c + (1 - D) * off.c
    u = sp.Matrix([Vg, 0, VF if (lossy and rectifier == "diode") else 0])
    X = (-A.LUsolve(B * u)).applyfunc(sp.factor)
    bd = ((on.a - off.a) * X + (on.b - off.b) * u).applyfunc(sp.cancel)
    ed = sp.cancel(((on.c - off.c) * X + (on.d - off.d) * u)[0, 0])
    n = A.shape[0]
    sI_A = s * sp.eye(n) - A
    den = sp.expand(sI_A.det())
    num = sp.expand((Cm[0, :] * sI_A.adjugate() * bd)[0, 0] + ed * den)
    # normalise so that the denominator is 1 at s = 0; coefficients factored per power of s
    d0 = sp.factor(den.subs(s, 0))

    def poly(expr):
        coeffs = sp.Poly(sp.expand(expr), s).all_coeffs()[::-1]
        return sum(
            (sp.factor(sp.cancel(c / d0)) * s**i for i, c in enumerate(coeffs)), sp.Integer(0)
        )

    num_n, den_n = poly(num), poly(den)
    gvd = num_n / den_n
    dc = sp.factor(num_n.subs(s, 0))
    detA = sp.factor(sp.cancel(A.det()))
    w0 = sp.sqrt(detA)
    q = sp.factor(sp.cancel(sp.sqrt(detA) / (-A.trace())))
    zeros = sp.solve(sp.numer(sp.together(num_n)), s)
    rhp = None
    probe = {L: 22e-6, C: 100e-6, R: 5.0, Vg: 12.0, D: 0.4, rL: 0.02, rC: 0.01}
    probe.update({Ron: 0.02, Rr: 0.02, VF: 0.4})
    for z in zeros:
        # a RHP zero is positive for positive component values: probe with a typical stage
        val = complex(sp.N(z.subs(probe)))
        if abs(val.imag) < 1e-9 * max(1.0, abs(val)) and val.real > 0:
            rhp = sp.factor(z)
    return SymbolicPlant(
        topology=topology,
        lossy=lossy,
        gvd=gvd,
        numerator=num_n,
        denominator=den_n,
        dc_gain=dc,
        w0=w0,
        q=q,
        zeros=list(zeros),
        rhp_zero=rhp,
        symbols=syms,
    )
