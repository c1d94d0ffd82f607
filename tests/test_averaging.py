"""The averaging engine: DC facts of the trade, signal wiring, python-control interop, errors.

Expected values are facts of the trade (common practice; Erickson & Maksimovic, *Fundamentals of
Power Electronics*, 2nd ed., 2001, ch. 2: ideal conversion ratios, inductor ripple), physical laws
(power balance of a lossless converter) and python-control as a general-purpose reference.
"""

from __future__ import annotations

import math

import control
import numpy as np
import pytest

from loopwright.averaging import DUTY_BOUNDS, analyze_stage, averaged_matrices, solve_duty
from loopwright.errors import DesignError
from loopwright.topologies import TOPOLOGIES, PowerStageParameters

BUCK, BOOST, BB = (TOPOLOGIES[n] for n in ("buck", "boost", "buck-boost"))


def ideal(topo, d, *, vg=12.0, r=10.0, L=22e-6, C=100e-6, fs=200e3, **kw):
    p = PowerStageParameters(inductance=L, c_out=C, g_load=1 / r, **kw)
    return analyze_stage(topo, p, v_in=vg, v_out=1.0, f_sw=fs, duty=d)


# ----------------------------------------------------------------------------- facts of the trade
@pytest.mark.parametrize("d", [0.1, 0.25, 0.5, 0.75, 0.9])
def test_ideal_buck_vout_is_d_vin(d):
    # common practice: ideal buck V = D Vg
    assert ideal(BUCK, d, vg=48.0).op.v_out == pytest.approx(d * 48.0, rel=1e-12)


def test_ideal_boost_doubles_at_half_duty_and_tenfold_at_0_9():
    # common practice: ideal boost V = Vg/(1 - D)
    assert ideal(BOOST, 0.5, vg=5.0).op.v_out == pytest.approx(10.0, rel=1e-12)
    assert ideal(BOOST, 0.9, vg=5.0).op.v_out == pytest.approx(50.0, rel=1e-9)


@pytest.mark.parametrize("d", [0.2, 0.5, 0.8])
def test_ideal_buck_boost_inverts(d):
    # common practice: ideal inverting buck-boost V = -D Vg/(1 - D)
    assert ideal(BB, d).op.v_out == pytest.approx(-d * 12.0 / (1 - d), rel=1e-12)


@pytest.mark.parametrize("topo", [BUCK, BOOST, BB], ids=lambda t: t.name)
@pytest.mark.parametrize("d", [0.2, 0.5, 0.7])
def test_ideal_converters_conserve_power(topo, d):
    # a lossless converter: Vg Ig = V I, so the average currents scale inversely to the voltages
    op = ideal(topo, d).op
    assert op.p_in == pytest.approx(op.p_out, rel=1e-12)
    assert op.i_in_avg / op.i_out == pytest.approx(abs(op.v_out) / op.v_in, rel=1e-12)
    assert op.efficiency == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize("topo", [BUCK, BOOST, BB], ids=lambda t: t.name)
def test_average_inductor_current(topo):
    """Charge balance (common practice): buck IL = I; boost IL = Iin = I/D';
    buck-boost IL = I/D'."""
    d = 0.4
    op = ideal(topo, d).op
    expected = op.i_out if topo is BUCK else op.i_out / (1 - d)
    assert op.i_l_avg == pytest.approx(expected, rel=1e-12)


def test_buck_inductor_ripple():
    # common practice: buck ripple = (Vg - V) D Ts / L
    op = ideal(BUCK, 0.25, vg=48.0, L=10e-6, fs=500e3).op
    assert op.i_l_ripple_pp == pytest.approx((48.0 - 12.0) * 0.25 / 500e3 / 10e-6, rel=1e-12)


def test_boost_inductor_ripple():
    # common practice: boost ripple = Vg D Ts / L
    op = ideal(BOOST, 0.6, vg=12.0, L=47e-6, fs=200e3).op
    assert op.i_l_ripple_pp == pytest.approx(12.0 * 0.6 / 200e3 / 47e-6, rel=1e-12)


@pytest.mark.parametrize(
    ("topo", "vg", "v", "d"),
    [(BUCK, 36.0, 12.0, 1 / 3), (BOOST, 12.0, 48.0, 0.75), (BB, 12.0, 4.0, 0.25)],
    ids=["buck", "boost", "buck-boost"],
)
def test_solved_duty_is_ideal_duty_for_ideal_parts(topo, vg, v, d):
    p = PowerStageParameters(inductance=22e-6, c_out=100e-6, g_load=0.1)
    m = analyze_stage(topo, p, v_in=vg, v_out=v, f_sw=200e3)
    assert m.op.duty == pytest.approx(d, rel=1e-10)
    assert topo.ideal_duty(vg, v) == pytest.approx(d, rel=1e-12)
    assert abs(m.op.v_out) == pytest.approx(v, rel=1e-12)


# ----------------------------------------------------------------------------- small-signal wiring
def test_buck_input_current_paths():
    """Ideal buck: Iin = D^2 Vg/R, so Gid(0) = dIin/dD = 2 D Vg/R and the input conductance at
    fixed duty is dIin/dVg = D^2/R (power balance, differentiated)."""
    d, vg, r = 0.4, 20.0, 5.0
    m = ideal(BUCK, d, vg=vg, r=r)
    assert m.op.i_in_avg == pytest.approx(d**2 * vg / r, rel=1e-12)
    assert control.dcgain(m.gid()) == pytest.approx(2 * d * vg / r, rel=1e-9)
    assert control.dcgain(m.yin()) == pytest.approx(d**2 / r, rel=1e-9)


def test_to_control_has_named_signals():
    m = ideal(BOOST, 0.5, r_dcr=0.01, r_esr=0.01)
    sys_ = m.to_control()
    assert isinstance(sys_, control.StateSpace)
    assert sys_.input_labels == ["d", "v_in", "i_load", "v_f"]
    assert sys_.output_labels == ["v_out", "i_in"]
    assert sys_.state_labels == ["i_l", "v_c"]
    # the named SISO views are the matching entries of the full model
    for f in (50.0, 2e3, 30e3):
        s = 2j * math.pi * f
        full = sys_(s)
        assert complex(m.gvd()(s)) == pytest.approx(complex(full[0, 0]), rel=1e-12)
        assert complex(m.gvg()(s)) == pytest.approx(complex(full[0, 1]), rel=1e-12)
        # Zout is for a current injected into the node, i.e. minus the drawn load current
        assert complex(m.zout()(s)) == pytest.approx(-complex(full[0, 2]), rel=1e-12)
        assert m.freqresp("v_out", "i_load", f) == pytest.approx(complex(m.zout()(s)), rel=1e-12)


def test_freqresp_scalar_and_vector():
    m = ideal(BUCK, 0.5)
    assert np.shape(m.freqresp("v_out", "d", 1e3)) == ()
    f = np.array([1.0, 10.0, 100.0, 1000.0])
    out = m.freqresp("v_out", "d", f)
    assert out.shape == (4,)
    assert out[2] == pytest.approx(m.freqresp("v_out", "d", 100.0), rel=1e-15)


def test_freqresp_keeps_the_shape_of_a_2d_grid():
    m = ideal(BUCK, 0.5)
    f = np.array([[1.0, 10.0], [100.0, 1000.0]])
    out = m.freqresp("v_out", "d", f)
    assert out.shape == (2, 2)
    assert out[1, 0] == pytest.approx(m.freqresp("v_out", "d", 100.0), rel=1e-15)


def test_averaged_matrices_weighting():
    p = PowerStageParameters(inductance=1e-5, c_out=1e-4, g_load=0.5, r_dcr=0.1, r_esr=0.05)
    sw = BOOST.build(p)
    a, b, c, e = averaged_matrices(sw, 0.3)
    assert np.allclose(a, 0.3 * sw.on.a + 0.7 * sw.off.a, rtol=1e-15, atol=0)
    assert np.allclose(c, 0.3 * sw.on.c + 0.7 * sw.off.c, rtol=1e-15, atol=0)


# ----------------------------------------------------------------------------- errors
def test_buck_cannot_step_up():
    p = PowerStageParameters(inductance=22e-6, c_out=100e-6, g_load=0.25)
    with pytest.raises(DesignError, match="power_stage.vout") as info:
        analyze_stage(BUCK, p, v_in=12.0, v_out=15.0, f_sw=200e3)
    assert "reachable range" in str(info.value)


def test_boost_cannot_step_down():
    p = PowerStageParameters(inductance=22e-6, c_out=100e-6, g_load=0.25)
    with pytest.raises(DesignError, match="power_stage.vout"):
        analyze_stage(BOOST, p, v_in=12.0, v_out=9.0, f_sw=200e3)


def test_duty_beyond_search_bounds_is_refused_not_clamped():
    # an ideal buck needs D = 0.999 for 35.964 V from 36 V: beyond the engine's duty bound
    p = PowerStageParameters(inductance=22e-6, c_out=100e-6, g_load=0.25)
    assert DUTY_BOUNDS[1] < 0.999
    with pytest.raises(DesignError, match="power_stage.vout"):
        analyze_stage(BUCK, p, v_in=36.0, v_out=36.0 * 0.999, f_sw=200e3)


def test_custom_key_in_solver_error():
    p = PowerStageParameters(inductance=22e-6, c_out=100e-6, g_load=0.25)
    sw = BUCK.build(p)
    with pytest.raises(DesignError, match="corner.vout"):
        solve_duty(sw, np.array([12.0, 0.0, 0.0]), 20.0, key="corner.vout")


def test_diode_buck_output_below_diode_drop_is_reachable():
    """Volt-second balance (Erickson & Maksimovic ch. 3): V = (D Vg - D' VF) R/(R + r) reaches
    0.3 V at D = (0.3 (R + r)/R + VF)/(Vg + VF) with VF = 0.5 V, Vg = 36 V."""
    vg, vf, r, rr = 36.0, 0.5, 4.0, 0.04
    p = PowerStageParameters(
        inductance=22e-6, c_out=100e-6, g_load=1 / r, r_dcr=rr, rectifier="diode", v_f=vf
    )
    d_expected = (0.3 * (r + rr) / r + vf) / (vg + vf)
    m = analyze_stage(BUCK, p, v_in=vg, v_out=0.3, f_sw=250e3)
    assert m.op.duty == pytest.approx(d_expected, rel=1e-9)
