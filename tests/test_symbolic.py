"""Symbolic view of the averaging engine.

Ideal forms against Erickson & Maksimovic, *Fundamentals of Power Electronics*, 2nd ed., 2001,
Table 8.2 (entries from memory; buck-boost ``Gd0 = V/(D D')``, the derived value, see the
recorded disagreement in tests/references/test_erickson_table_8_2.py), compared symbolically
(sympy simplification of the difference is zero). The lossy forms are checked by an independent
evaluation path: the symbolic ``Gvd(s)`` with numbers substituted must equal the numeric engine's
frequency response (linear algebra on floats) for the invented lossy stages of Middlebrook & Cuk
style (buck 36 V -> 12 V, boost 12 V -> 24 V, buck-boost 9 V -> -12 V; parasitics as in
tests/references/test_middlebrook_cuk_ssa.py), to relative 1e-9.
"""

from __future__ import annotations

import math

import pytest
import sympy as sp

from loopwright.averaging import analyze_stage
from loopwright.symbolic import symbolic_plant
from loopwright.topologies import TOPOLOGIES, PowerStageParameters


@pytest.fixture(scope="module", params=["buck", "boost", "buck-boost"])
def ideal(request):
    return symbolic_plant(request.param)


def table_8_2(name, sym):
    """Gd0, w0, Q, wz of Table 8.2 written with D' = Dp (a positive symbol)."""
    L, C, R, Vg, D = (sym[k] for k in ("L", "C", "R", "V_g", "D"))
    Dp = sp.Symbol("Dp", positive=True)
    if name == "buck":
        V = D * Vg
        return V / D, 1 / sp.sqrt(L * C), R * sp.sqrt(C / L), None, Dp
    if name == "boost":
        V = Vg / Dp
        return V / Dp, Dp / sp.sqrt(L * C), Dp * R * sp.sqrt(C / L), Dp**2 * R / L, Dp
    V = -D * Vg / Dp
    return V / (D * Dp), Dp / sp.sqrt(L * C), Dp * R * sp.sqrt(C / L), Dp**2 * R / (D * L), Dp


def same(a, b, subs) -> bool:
    return sp.simplify(sp.sympify(a).subs(subs) - sp.sympify(b).subs(subs)) == 0


def test_ideal_features_equal_table_8_2(ideal):
    sym = ideal.symbols
    gd0, w0, q, wz, Dp = table_8_2(ideal.topology, sym)
    D = sym["D"]
    to_dp = {D: 1 - Dp} if ideal.topology != "buck" else {}
    tbl = {D: 1 - Dp}
    if ideal.topology == "buck":
        assert same(ideal.dc_gain, gd0, {})
        assert same(ideal.w0, w0, {})
        assert same(ideal.q, q, {})
        assert ideal.rhp_zero is None
    else:
        assert same(ideal.dc_gain, gd0.subs(tbl), to_dp)
        assert same(ideal.w0, w0, to_dp)
        assert same(ideal.q, q, to_dp)
        assert same(ideal.rhp_zero, wz.subs(tbl), to_dp)


def test_ideal_gvd_equals_standard_form(ideal):
    sym = ideal.symbols
    s, D = sym["s"], sym["D"]
    gd0, w0, q, wz, Dp = table_8_2(ideal.topology, sym)
    num = gd0 * (1 - s / wz) if wz is not None else gd0
    standard = num / (1 + s / (q * w0) + (s / w0) ** 2)
    if ideal.topology == "buck":
        assert sp.simplify(ideal.gvd - standard) == 0
    else:
        assert sp.simplify(ideal.gvd.subs(D, 1 - Dp) - standard.subs(D, 1 - Dp)) == 0


def test_buck_boost_gd0_is_minus_vg_over_dprime_squared():
    sp_bb = symbolic_plant("buck-boost")
    Vg, D = sp_bb.symbols["V_g"], sp_bb.symbols["D"]
    assert sp.simplify(sp_bb.dc_gain - (-Vg / (1 - D) ** 2)) == 0
    # and not the recalled printed entry V/(D D'^2) with V = -D Vg/D'
    assert sp.simplify(sp_bb.dc_gain - (-D * Vg / (1 - D)) / (D * (1 - D) ** 2)) != 0


# ----------------------------------------------------------------------------- lossy
LOSSY = {
    "buck": dict(Vg=36.0, D=1 / 3, R=4.0, L=22e-6, C=100e-6, rL=0.02, Ron=0.03, VF=0.5, RD=0.02,
                 rC=0.03),
    "boost": dict(Vg=12.0, D=0.5, R=12.0, L=47e-6, C=220e-6, rL=0.05, Ron=0.025, VF=0.45,
                  RD=0.015, rC=0.02),
    "buck-boost": dict(Vg=9.0, D=4 / 7, R=12.0, L=33e-6, C=150e-6, rL=0.04, Ron=0.03, VF=0.4,
                       RD=0.02, rC=0.015),
}  # fmt: skip


def compare_lossy(name, rectifier):
    v = LOSSY[name]
    symb = symbolic_plant(name, lossy=True, rectifier=rectifier)
    vf = v["VF"] if rectifier == "diode" else 0.0
    p = PowerStageParameters(
        inductance=v["L"], c_out=v["C"], g_load=1 / v["R"], r_dcr=v["rL"], r_esr=v["rC"],
        r_on=v["Ron"], rectifier=rectifier, r_rect=v["RD"], v_f=vf,
    )  # fmt: skip
    m = analyze_stage(TOPOLOGIES[name], p, v_in=v["Vg"], v_out=1.0, f_sw=200e3, duty=v["D"])
    values = dict(
        L=v["L"], C=v["C"], R=v["R"], V_g=v["Vg"], D=v["D"], r_L=v["rL"], r_C=v["rC"],
        R_on=v["Ron"], R_r=v["RD"], V_F=vf,
    )  # fmt: skip
    gvd = sp.lambdify(
        symb.symbols["s"],
        symb.gvd.subs({symb.symbols[k]: x for k, x in values.items() if k in symb.symbols}),
    )
    for f in (0.0, 100.0, 1e3, 5e3, 10e3, 50e3):
        s = 2j * math.pi * f
        assert complex(gvd(s)) == pytest.approx(complex(m.freqresp("v_out", "d", f)), rel=1e-9)
    assert symb.evaluate(symb.dc_gain, **values).real == pytest.approx(
        m.features().dc_gain, rel=1e-9
    )
    f = m.features()
    w0 = symb.evaluate(symb.w0, **values).real
    assert w0 / (2 * math.pi) == pytest.approx(f.f0_hz, rel=1e-9)
    assert symb.evaluate(symb.q, **values).real == pytest.approx(f.q, rel=1e-9)
    if f.rhp_zero_hz is None:
        assert symb.rhp_zero is None
    else:
        wz = symb.evaluate(symb.rhp_zero, **values).real
        assert wz / (2 * math.pi) == pytest.approx(f.rhp_zero_hz, rel=1e-9)
    # the numerator's roots are the engine's zeros, both ways
    zs = [complex(symb.evaluate(z, **values)) / (2 * math.pi) for z in symb.zeros]
    assert len(zs) == len(f.zeros_hz)
    for z in zs:
        assert min(abs(z - e) / abs(e) for e in f.zeros_hz) < 1e-8


@pytest.mark.parametrize("rectifier", ["diode", "synchronous"])
def test_lossy_buck_symbolic_equals_numeric(rectifier):
    compare_lossy("buck", rectifier)


@pytest.mark.slow
@pytest.mark.parametrize("name", ["boost", "buck-boost"])
def test_lossy_step_up_symbolic_equals_numeric(name):
    compare_lossy(name, "diode")


def test_lossy_buck_dc_gain_closed_form():
    """Hand-derived: V = (D Vg - D' VF) R/(R + rL + D Ron + D' RD), so
    dV/dD = R ((Vg + VF)(R + rL + RD) - ... ) is what the symbolic Gvd(0) must equal."""
    symb = symbolic_plant("buck", lossy=True)
    S = symb.symbols
    D, Vg, VF, R = S["D"], S["V_g"], S["V_F"], S["R"]
    r_loss = S["r_L"] + D * S["R_on"] + (1 - D) * S["R_r"]
    v = (D * Vg - (1 - D) * VF) * R / (R + r_loss)
    assert sp.simplify(symb.dc_gain - sp.diff(v, D)) == 0


def test_symbolic_zeros_include_esr_zero():
    """The ESR adds the left-half-plane zero s = -1/(rC C) (Erickson & Maksimovic 2nd ed.,
    sec. 8.2, from memory); the lossy buck Gvd numerator has exactly that root."""
    symb = symbolic_plant("buck", lossy=True)
    S = symb.symbols
    assert len(symb.zeros) == 1
    assert sp.simplify(symb.zeros[0] + 1 / (S["C"] * S["r_C"])) == 0
