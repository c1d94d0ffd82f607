"""Open-loop output impedance and line-to-output of ideal CCM stages (Erickson & Maksimovic ch. 8).

Source
------
R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed., Kluwer 2001,
chapter 8 (section 8.2 transfer functions; section 8.3 graphical construction of impedances);
R. D. Middlebrook and S. Cuk, IEEE PESC 1976 (canonical model). Formulas from memory:

    den_buck = 1 + s L/R + s^2 L C,      den_bb = 1 + s L/(D'^2 R) + s^2 L C/D'^2

| converter  | Gvg(s)            | Zout(s)                      |
|------------|-------------------|------------------------------|
| buck       | D / den_buck      | s L / den_buck (= sL || 1/sC || R) |
| boost      | (1/D') / den_bb   | (s L/D'^2) / den_bb          |
| buck-boost | (-D/D') / den_bb  | (s L/D'^2) / den_bb          |

Zout is the impedance seen by a current injected into the output node with duty and line held.
Identity (derived): at w0 the ideal Zout equals R in all three stages, and
``|Gvg(j w0)| = |Gg0| Q``.

Invented scenarios (ideal switches, no ESR/DCR): A buck 36 V, D = 1/3, R = 4 ohm, L = 22 uH,
C = 100 uF; B boost 12 V, D = 0.5, R = 12 ohm, L = 47 uH, C = 220 uF; C buck-boost 9 V, D = 4/7,
R = 12 ohm, L = 33 uH, C = 150 uF. Expected values: the formulas above evaluated in double
precision outside this package. Tolerance: relative 1e-6 and 0.001 deg on the 1 kHz and f0 rows;
the 10 kHz rows to half a unit of their last printed digit; relative 1e-9 against the formulas.
"""

from __future__ import annotations

import cmath
import math

import pytest

from loopwright.averaging import analyze_stage
from loopwright.topologies import TOPOLOGIES, PowerStageParameters

TWO_PI = 2 * math.pi

IDEAL = {
    "buck": dict(vg=36.0, d=1 / 3, r=4.0, L=22e-6, C=100e-6),
    "boost": dict(vg=12.0, d=0.5, r=12.0, L=47e-6, C=220e-6),
    "buck-boost": dict(vg=9.0, d=4 / 7, r=12.0, L=33e-6, C=150e-6),
}

# converter, f (Hz; None = f0), |Gvg|, angle Gvg, |Zout| (ohm), angle Zout
TABLE = [
    ("buck", 1000.0, 0.364777, -2.167, 0.151269, 87.833),
    ("buck", None, 2.842676, -90.000, 4.000000, 0.000),
    ("buck", 10000.0, 0.043329, -177.425, 0.179683, -87.425),
    ("boost", 1000.0, 3.122865, -171.158, 1.844425, -81.158),
    ("boost", None, 25.962330, -90.000, 12.000000, 0.000),
    ("boost", 10000.0, 0.012324, -179.652, 0.072788, -89.652),
    ("buck-boost", 1000.0, 11.721854, 55.795, 9.924416, -34.205),
    ("buck-boost", None, 14.619478, 90.000, 12.000000, 0.000),
    ("buck-boost", 10000.0, 0.012650, 0.511, 0.107106, -89.489),
]


def model(name, **kw):
    s = dict(IDEAL[name], **kw)
    p = PowerStageParameters(inductance=s["L"], c_out=s["C"], g_load=1 / s["r"])
    return analyze_stage(TOPOLOGIES[name], p, v_in=s["vg"], v_out=1.0, f_sw=250e3, duty=s["d"])


def closed_forms(name, s, vg, d, r, L, C):
    dp = 1 - d
    if name == "buck":
        den = 1 + s * L / r + s**2 * L * C
        return d / den, s * L / den
    den = 1 + s * L / (dp**2 * r) + s**2 * L * C / dp**2
    gg0 = 1 / dp if name == "boost" else -d / dp
    return gg0 / den, (s * L / dp**2) / den


def f0_exact(name):
    s = IDEAL[name]
    le = s["L"] if name == "buck" else s["L"] / (1 - s["d"]) ** 2
    return 1 / (TWO_PI * math.sqrt(le * s["C"]))


@pytest.mark.parametrize(("name", "f", "gmag", "gdeg", "zmag", "zdeg"), TABLE)
def test_printed_values(name, f, gmag, gdeg, zmag, zdeg):
    m = model(name)
    fr = f0_exact(name) if f is None else f
    gvg = complex(m.freqresp("v_out", "v_in", fr))
    zout = complex(m.freqresp("v_out", "i_load", fr))
    if f == 10000.0:  # half a unit of the last printed digit
        tol_g, tol_z, tol_deg = 0.5e-6, 0.5e-6, 0.5e-3
    else:
        tol_g, tol_z, tol_deg = 1e-6 * gmag, 1e-6 * zmag, 1e-3
    assert abs(gvg) == pytest.approx(gmag, abs=max(tol_g, 0.5e-6))
    assert math.degrees(cmath.phase(gvg)) == pytest.approx(gdeg, abs=tol_deg)
    assert abs(zout) == pytest.approx(zmag, abs=max(tol_z, 0.5e-6))
    zdeg_got = math.degrees(cmath.phase(zout))
    if zdeg == 0.0:
        zdeg_got = (zdeg_got + 180.0) % 360.0 - 180.0
    assert zdeg_got == pytest.approx(zdeg, abs=tol_deg)


@pytest.mark.parametrize("name", list(IDEAL))
def test_against_closed_forms(name):
    s = IDEAL[name]
    m = model(name)
    for fr in (1.0, 50.0, 700.0, 1e3, 3e3, 10e3, 100e3):
        gvg, zout = closed_forms(name, 1j * TWO_PI * fr, s["vg"], s["d"], s["r"], s["L"], s["C"])
        assert m.freqresp("v_out", "v_in", fr) == pytest.approx(gvg, rel=1e-9)
        assert m.freqresp("v_out", "i_load", fr) == pytest.approx(zout, rel=1e-9)


@pytest.mark.parametrize("name", list(IDEAL))
@pytest.mark.parametrize("r", [1.0, 4.0, 12.0, 100.0])
def test_zout_equals_r_at_resonance(name, r):
    """Derived identity: the effective LC tank is open at w0, so Zout(j w0) = R exactly, and
    |Gvg(j w0)| = |Gg0| Q."""
    m = model(name, r=r)
    f = m.features("output_impedance")
    w0 = TWO_PI * f0_exact(name)
    z = m.freqresp("v_out", "i_load", w0 / TWO_PI)
    assert z == pytest.approx(r, rel=1e-9)
    q = m.features("line_to_output").q
    gg0 = m.features("line_to_output").dc_gain
    assert abs(m.freqresp("v_out", "v_in", w0 / TWO_PI)) == pytest.approx(abs(gg0) * q, rel=1e-9)
    assert f.dc_gain == pytest.approx(0.0, abs=1e-12)


def test_python_control_zout_is_injected_current_convention():
    """python-control view of Zout: positive resistive part at low frequency for a lossy stage
    (a current pushed into the output raises the output voltage)."""
    import control

    p = PowerStageParameters(inductance=22e-6, c_out=100e-6, g_load=0.25, r_dcr=0.02)
    m = analyze_stage(TOPOLOGIES["buck"], p, v_in=36.0, v_out=12.0, f_sw=250e3)
    # (rL || R) at DC, by Ohm's law
    assert control.dcgain(m.zout()) == pytest.approx(0.02 * 4 / 4.02, rel=1e-9)
