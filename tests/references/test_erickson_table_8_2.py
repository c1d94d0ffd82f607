"""Salient features of the ideal CCM transfer functions: Erickson & Maksimovic Table 8.2.

Source
------
R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed., Kluwer 2001,
section 8.2.2, Table 8.2 ("Salient features of the small-signal CCM transfer functions of some
basic DC-DC converters"); the standard forms

    Gvd(s) = Gd0 (1 - s/wz) / (1 + s/(Q w0) + (s/w0)^2),   Gvg(s) = Gg0 / (same denominator)

| converter  | Gg0   | Gd0              | w0           | Q               | wz (RHP)        |
|------------|-------|------------------|--------------|-----------------|-----------------|
| buck       | D     | V/D = Vg         | 1/sqrt(LC)   | R sqrt(C/L)     | none            |
| boost      | 1/D'  | V/D' = Vg/D'^2   | D'/sqrt(LC)  | D' R sqrt(C/L)  | D'^2 R/L        |
| buck-boost | -D/D' | V/(D D') = -Vg/D'^2 | D'/sqrt(LC) | D' R sqrt(C/L) | D'^2 R/(D L)   |

The table's role and the RHP zero of the boost and buck-boost are confirmed; the individual
entries are from memory. Known disagreement, recorded: the printed buck-boost ``Gd0`` is
recalled as ``V/(D D'^2)``; the static derivative ``dV/dD = -Vg/D'^2`` and the table's own boost
row give ``V/(D D')``, which is what this test expects (the recalled entry would give 114.3 V in
scenario C instead of 49 V).

ESR zero (section 8.2 and 2.2 of the same chapter, from memory): the exact ideal-switch buck with
capacitor ESR ``rC`` is ``Gvd(s) = Vg (1 + s rC C) / (1 + s (L/R + rC C) + s^2 L C (R + rC)/R)``.

Boost with inductor winding resistance only (same book, ch. 3, from memory):
``M = (1/D') / (1 + rL/(D'^2 R))``, ``eta = 1/(1 + rL/(D'^2 R))``, peak ``M_max = 1/(2 sqrt(rL/R))``
at ``D' = sqrt(rL/R)``.

Invented scenarios (ideal switches): A buck 36 V, D = 1/3, R = 4 ohm, L = 22 uH, C = 100 uF;
B boost 12 V, D = 0.5, R = 12 ohm, L = 47 uH, C = 220 uF; C buck-boost 9 V, D = 4/7, R = 12 ohm,
L = 33 uH, C = 150 uF. Tolerances: the table formulas are exact (relative 1e-9); the printed
values relative 1e-6 (or half a unit of the last printed digit), angles 0.001 deg.
"""

from __future__ import annotations

import cmath
import math

import numpy as np
import pytest
from scipy import optimize

from loopwright.averaging import analyze_stage
from loopwright.errors import DesignError
from loopwright.topologies import TOPOLOGIES, PowerStageParameters

TWO_PI = 2 * math.pi

IDEAL = {
    "buck": dict(vg=36.0, d=1 / 3, r=4.0, L=22e-6, C=100e-6, fs=250e3),
    "boost": dict(vg=12.0, d=0.5, r=12.0, L=47e-6, C=220e-6, fs=200e3),
    "buck-boost": dict(vg=9.0, d=4 / 7, r=12.0, L=33e-6, C=150e-6, fs=300e3),
}


def model(name, *, duty=None, **kw):
    s = dict(IDEAL[name], **kw)
    p = PowerStageParameters(inductance=s["L"], c_out=s["C"], g_load=1 / s["r"])
    d = s["d"] if duty is None else duty
    return analyze_stage(TOPOLOGIES[name], p, v_in=s["vg"], v_out=1.0, f_sw=s["fs"], duty=d)


def table_8_2(name, vg, d, r, L, C):
    """Gg0, Gd0, w0, Q, wz of Table 8.2 (wz None for the buck)."""
    dp = 1 - d
    if name == "buck":
        v = d * vg
        return d, v / d, 1 / math.sqrt(L * C), r * math.sqrt(C / L), None
    if name == "boost":
        v = vg / dp
        return 1 / dp, v / dp, dp / math.sqrt(L * C), dp * r * math.sqrt(C / L), dp**2 * r / L
    v = -d * vg / dp
    return (
        -d / dp,
        v / (d * dp),
        dp / math.sqrt(L * C),
        dp * r * math.sqrt(C / L),
        dp**2 * r / (d * L),
    )


@pytest.mark.parametrize("name", list(IDEAL))
@pytest.mark.parametrize("d", [0.15, 0.3, 0.5, 0.7, 0.85])
@pytest.mark.parametrize("r", [2.0, 12.0, 50.0])
def test_features_equal_table_formulas(name, d, r):
    s = dict(IDEAL[name], d=d, r=r)
    gg0, gd0, w0, q, wz = table_8_2(name, s["vg"], d, r, s["L"], s["C"])
    m = model(name, d=d, r=r)
    fvd = m.features("control_to_output")
    fvg = m.features("line_to_output")
    assert fvg.dc_gain == pytest.approx(gg0, rel=1e-9)
    assert fvd.dc_gain == pytest.approx(gd0, rel=1e-9)
    assert fvd.f0_hz == pytest.approx(w0 / TWO_PI, rel=1e-9)
    assert fvd.q == pytest.approx(q, rel=1e-9)
    assert fvg.f0_hz == pytest.approx(w0 / TWO_PI, rel=1e-9)
    if wz is None:
        assert fvd.rhp_zero_hz is None
        assert fvd.zeros_hz == ()
    else:
        assert fvd.rhp_zero_hz == pytest.approx(wz / TWO_PI, rel=1e-9)
    # the standard form itself, at a few frequencies
    for f in (10.0, 0.5 * w0 / TWO_PI, 3 * w0 / TWO_PI, 40e3):
        sj = 1j * TWO_PI * f
        den = 1 + sj / (q * w0) + (sj / w0) ** 2
        num = gd0 * (1 - sj / wz) if wz else gd0
        assert m.freqresp("v_out", "d", f) == pytest.approx(num / den, rel=1e-9)
        assert m.freqresp("v_out", "v_in", f) == pytest.approx(gg0 / den, rel=1e-9)


def test_buck_a_printed_values():
    f = model("buck").features()
    assert f.f0_hz == pytest.approx(3393.195, rel=1e-6)
    assert f.q == pytest.approx(8.52803, rel=1e-6)
    assert f.dc_gain == pytest.approx(36.0, rel=1e-9)
    assert f.rhp_zero_hz is None


def test_boost_b_printed_values():
    f = model("boost").features()
    assert f.f0_hz == pytest.approx(782.582, rel=1e-6)
    assert f.q == pytest.approx(12.98116, rel=1e-6)
    assert f.rhp_zero_hz == pytest.approx(10158.83, rel=1e-6)
    assert f.dc_gain == pytest.approx(48.0, rel=1e-9)
    assert model("boost").features("line_to_output").dc_gain == pytest.approx(2.0, rel=1e-9)


def test_buck_boost_c_printed_values():
    m = model("buck-boost")
    f = m.features()
    assert f.f0_hz == pytest.approx(969.484, rel=1e-6)
    assert f.q == pytest.approx(10.96461, rel=1e-6)
    assert f.rhp_zero_hz == pytest.approx(18602.53, rel=1e-6)
    assert f.dc_gain == pytest.approx(-49.0, rel=1e-9)
    assert m.features("line_to_output").dc_gain == pytest.approx(-4 / 3, rel=1e-9)


def test_buck_boost_gd0_is_static_derivative_not_recalled_entry():
    """Recorded disagreement: Gd0 = V/(D D') = dV/dD, not the recalled V/(D D'^2)."""
    vg, d = 9.0, 4 / 7
    dp = 1 - d
    gd0 = model("buck-boost").features().dc_gain
    # static derivative of V(D) = -D Vg/D' by central difference of the engine's own DC solution
    h = 1e-6
    dvdd = (model("buck-boost", duty=d + h).op.v_out - model("buck-boost", duty=d - h).op.v_out) / (
        2 * h
    )
    assert gd0 == pytest.approx(dvdd, rel=1e-6)
    v = -d * vg / dp
    assert gd0 == pytest.approx(v / (d * dp), rel=1e-12)
    assert abs(gd0) != pytest.approx(abs(v / (d * dp**2)), rel=1e-3)  # 49 V, not 114.3 V


def test_python_control_views_agree():
    """python-control (general-purpose reference) sees the same systems."""
    import control

    for name in IDEAL:
        m = model(name)
        for sys_, fname, inp in (
            (m.gvd(), "control_to_output", "d"),
            (m.gvg(), "line_to_output", "v_in"),
        ):
            assert control.dcgain(sys_) == pytest.approx(m.features(fname).dc_gain, rel=1e-9)
            for f in (100.0, 1e3, 20e3):
                val = complex(sys_(1j * TWO_PI * f))
                assert val == pytest.approx(m.freqresp("v_out", inp, f), rel=1e-9)
        poles = np.sort_complex(control.poles(m.gvd()) / TWO_PI)
        assert poles == pytest.approx(np.sort_complex(np.array(m.features().poles_hz)), rel=1e-9)
        zeros = control.zeros(m.gvd()) / TWO_PI
        fz = m.features().rhp_zero_hz
        if fz is None:
            assert len(zeros) == 0
        else:
            assert max(zeros.real) == pytest.approx(fz, rel=1e-9)


# ----------------------------------------------------------------------------- ESR zero
def test_buck_esr_exact_form_and_printed_values():
    vg, r, L, C, rc = 36.0, 4.0, 22e-6, 100e-6, 30e-3
    p = PowerStageParameters(inductance=L, c_out=C, g_load=1 / r, r_esr=rc)
    m = analyze_stage(TOPOLOGIES["buck"], p, v_in=vg, v_out=12.0, f_sw=250e3, duty=1 / 3)
    f = m.features()
    assert f.esr_zero_hz == pytest.approx(53051.65, rel=1e-6)
    assert f.esr_zero_hz == pytest.approx(1 / (TWO_PI * rc * C), rel=1e-9)
    assert f.f0_hz == pytest.approx(3380.541, rel=1e-6)
    assert f.q == pytest.approx(5.53879, rel=1e-6)
    for fr in (1.0, 500.0, 3380.0, 10e3, 50e3, 200e3):
        s = 1j * TWO_PI * fr
        exact = vg * (1 + s * rc * C) / (1 + s * (L / r + rc * C) + s**2 * L * C * (r + rc) / r)
        assert m.freqresp("v_out", "d", fr) == pytest.approx(exact, rel=1e-9)
    for fr, mag, deg in ((10e3, 4.71554, -165.383), (50e3, 0.22716, -135.994)):
        z = m.freqresp("v_out", "d", fr)
        assert abs(z) == pytest.approx(mag, rel=1e-6, abs=0.5e-5)
        assert math.degrees(cmath.phase(z)) == pytest.approx(deg, abs=0.001)
    # ESR lowers Q and moves w0 by sqrt(R/(R + rC))
    assert f.f0_hz == pytest.approx(1 / (TWO_PI * math.sqrt(L * C)) * math.sqrt(r / (r + rc)))


# ----------------------------------------------------------------------------- boost with DCR
def boost_dcr(d):
    p = PowerStageParameters(inductance=47e-6, c_out=220e-6, g_load=1 / 12.0, r_dcr=0.05)
    return analyze_stage(TOPOLOGIES["boost"], p, v_in=12.0, v_out=24.0, f_sw=200e3, duty=d)


@pytest.mark.parametrize(
    ("d", "m_exp", "eta"), [(0.5, 1.967213, 0.983607), (0.8, 4.528302, 0.905660)]
)
def test_boost_dcr_conversion_ratio_and_efficiency(d, m_exp, eta):
    op = boost_dcr(d).op
    assert op.v_out / 12.0 == pytest.approx(m_exp, rel=1e-6)
    assert op.efficiency == pytest.approx(eta, rel=1e-6)
    dp = 1 - d
    k = 1 / (1 + 0.05 / (dp**2 * 12.0))
    assert op.v_out / 12.0 == pytest.approx(k / dp, rel=1e-9)
    assert op.efficiency == pytest.approx(k, rel=1e-9)


def test_boost_dcr_peak_conversion_ratio():
    res = optimize.minimize_scalar(
        lambda d: -boost_dcr(d).op.v_out, bounds=(0.9, 0.97), method="bounded",
        options={"xatol": 1e-10},
    )  # fmt: skip
    assert -res.fun / 12.0 == pytest.approx(7.74597, rel=1e-6)
    assert res.x == pytest.approx(0.93545, abs=1e-5)
    assert -res.fun / 12.0 == pytest.approx(1 / (2 * math.sqrt(0.05 / 12.0)), rel=1e-9)


def test_boost_dcr_solver_uses_rising_branch_and_refuses_beyond_peak():
    p = PowerStageParameters(inductance=47e-6, c_out=220e-6, g_load=1 / 12.0, r_dcr=0.05)
    m_max = 1 / (2 * math.sqrt(0.05 / 12.0))
    ok = analyze_stage(TOPOLOGIES["boost"], p, v_in=12.0, v_out=12.0 * m_max * 0.999, f_sw=200e3)
    assert ok.op.duty < 1 - math.sqrt(0.05 / 12.0)  # left of the peak
    assert ok.features().dc_gain > 0  # rising branch: more duty, more output
    with pytest.raises(DesignError, match="power_stage.vout"):
        analyze_stage(TOPOLOGIES["boost"], p, v_in=12.0, v_out=12.0 * m_max * 1.001, f_sw=200e3)
