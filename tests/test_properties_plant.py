"""Property tests of the averaging engine over random valid power stages.

Laws checked: energy conservation of a lossless converter and ``eta < 1`` with resistive losses
(physical laws); the ideal conversion ratios (common practice); the boost RHP zero ``D'^2 R/L``
(Erickson & Maksimovic, *Fundamentals of Power Electronics*, 2nd ed., 2001, Table 8.2, from
memory); the CCM/DCM boundary ``K < Kcrit(D)`` (same book, ch. 5); and the lossy DC conversion
ratios derived by hand from volt-second and charge balance (same book, ch. 3):

    buck:        V  = (D Vg - D' VF) R / (R + r)
    boost:       V  = (Vg - D' VF) D' R / (D'^2 R + r)
    buck-boost: |V| = (D Vg - D' VF) D' R / (D'^2 R + r)        r = rL + D Ron + D' Rrect

(without capacitor ESR, which in the boost and buck-boost carries pulsating current and adds a
small loss of its own).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from loopwright.averaging import DUTY_BOUNDS, analyze_stage
from loopwright.errors import DesignError
from loopwright.topologies import TOPOLOGIES, PowerStageParameters

SETTINGS = settings(max_examples=60, deadline=None)
NAMES = ["buck", "boost", "buck-boost"]
RATIO = {"buck": (0.1, 0.9), "boost": (1.1, 5.0), "buck-boost": (0.2, 5.0)}


def log_uniform(lo, hi):
    return st.floats(math.log10(lo), math.log10(hi)).map(lambda x: 10.0**x)


def parasitic(hi):
    # zero or a physical value (subnormal resistances are covered by a CLI regression test)
    return st.one_of(st.just(0.0), st.floats(1e-6, hi))


@st.composite
def stages(draw, *, lossless=False, esr_in_step_up=True, wide_ratio=False):
    name = draw(st.sampled_from(NAMES))
    rectifier = draw(st.sampled_from(["synchronous", "diode"]))
    L = draw(log_uniform(1e-6, 1e-3))
    C = draw(log_uniform(1e-6, 2e-3))
    r = draw(log_uniform(0.5, 200.0))
    vin = draw(st.floats(5.0, 60.0))
    fs = draw(log_uniform(20e3, 2e6))
    lo, hi = RATIO[name]
    if wide_ratio:
        lo, hi = {"buck": (0.005, 0.99), "boost": (1.01, 40.0), "buck-boost": (0.01, 40.0)}[name]
    m = draw(st.floats(lo, hi))
    par = dict(r_dcr=0.0, r_esr=0.0, r_on=0.0, r_rect=0.0, v_f=0.0)
    if not lossless:
        par["r_dcr"] = draw(st.floats(1e-3, 0.1))
        par["r_on"] = draw(parasitic(0.1))
        par["r_rect"] = draw(parasitic(0.1))
        if name == "buck" or esr_in_step_up:
            par["r_esr"] = draw(parasitic(0.1))
        if rectifier == "diode":
            par["v_f"] = draw(parasitic(0.8))
    p = PowerStageParameters(inductance=L, c_out=C, g_load=1 / r, rectifier=rectifier, **par)
    return name, p, vin, m * vin, fs


def closed_form_vout(name, p, vg, d):
    """Output at duty d in the stage's own polarity (|V| when it works as intended), from
    volt-second and charge balance (no ESR term)."""
    dp = 1 - d
    vf = p.v_f if p.rectifier == "diode" else 0.0
    r_loss = p.r_dcr + d * p.r_on + dp * p.r_rect
    R = p.r_load
    if name == "buck":
        return (d * vg - dp * vf) * R / (R + r_loss)
    if name == "boost":
        return (vg - dp * vf) * dp * R / (dp**2 * R + r_loss)
    return (d * vg - dp * vf) * dp * R / (dp**2 * R + r_loss)


def ideal_duty_book(name, vg, v):
    # common practice: D = V/Vg, 1 - Vg/V, |V|/(|V| + Vg)
    return {"buck": v / vg, "boost": 1 - vg / v, "buck-boost": v / (v + vg)}[name]


def k_crit_book(name, d):
    return {"buck": 1 - d, "boost": d * (1 - d) ** 2, "buck-boost": (1 - d) ** 2}[name]


@SETTINGS
@given(stages(lossless=True))
def test_lossless_power_balance(stage):
    name, p, vin, vout, fs = stage
    m = analyze_stage(TOPOLOGIES[name], p, v_in=vin, v_out=vout, f_sw=fs)
    op = m.op
    assert op.p_in == pytest.approx(op.p_out, rel=1e-9)
    assert op.duty == pytest.approx(ideal_duty_book(name, vin, vout), rel=1e-9)
    assert op.v_out == pytest.approx(-vout if name == "buck-boost" else vout, rel=1e-9)


@SETTINGS
@given(stages(), st.floats(0.05, 0.9))
def test_lossy_efficiency_below_one(stage, d):
    name, p, vin, _, fs = stage
    # the rectifier must conduct forward: the switch-on volt-seconds beat the diode drop
    vf = p.v_f if p.rectifier == "diode" else 0.0
    assume(d * vin > 1.5 * (1 - d) * vf)
    op = analyze_stage(TOPOLOGIES[name], p, v_in=vin, v_out=1.0, f_sw=fs, duty=d).op
    assert op.p_out > 0
    assert op.efficiency is not None
    assert 0 < op.efficiency < 1
    assert op.p_in > op.p_out


@SETTINGS
@given(
    st.floats(0.02, 0.95),
    log_uniform(0.5, 500.0),
    log_uniform(1e-6, 1e-3),
    log_uniform(1e-6, 1e-3),
)
def test_boost_ideal_rhp_zero(d, r, L, C):
    p = PowerStageParameters(inductance=L, c_out=C, g_load=1 / r)
    m = analyze_stage(TOPOLOGIES["boost"], p, v_in=10.0, v_out=1.0, f_sw=200e3, duty=d)
    fz = (1 - d) ** 2 * r / L / (2 * math.pi)
    assert m.features().rhp_zero_hz == pytest.approx(fz, rel=1e-7)


@SETTINGS
@given(stages())
def test_solved_duty_reproduces_vout(stage):
    name, p, vin, vout, fs = stage
    try:
        m = analyze_stage(TOPOLOGIES[name], p, v_in=vin, v_out=vout, f_sw=fs)
    except DesignError:
        assume(False)  # unreachable targets are the next test's business
        return
    assert abs(m.op.v_out) == pytest.approx(vout, rel=1e-9)
    assert (m.op.v_out < 0) == (name == "buck-boost")
    # the operating point is on the rising branch: more duty, more output magnitude
    sign = -1.0 if name == "buck-boost" else 1.0
    assert sign * m.features().dc_gain > 0
    if p.r_esr == 0.0 or name == "buck":
        # the same duty through the hand-derived conversion ratio
        assert closed_form_vout(name, p, vin, m.op.duty) == pytest.approx(vout, rel=1e-9)


@SETTINGS
@given(stages(esr_in_step_up=False, wide_ratio=True))
def test_no_crash_and_refusals_only_when_unreachable(stage):
    name, p, vin, vout, fs = stage
    try:
        m = analyze_stage(TOPOLOGIES[name], p, v_in=vin, v_out=vout, f_sw=fs)
    except DesignError as err:
        assert err.key == "power_stage.vout"
        assert "cannot be reached" in str(err)
        # output in the stage's own polarity over the engine's duty range
        grid = np.linspace(DUTY_BOUNDS[0], DUTY_BOUNDS[1], 20001)
        peak = max(closed_form_vout(name, p, vin, d) for d in grid)
        low = closed_form_vout(name, p, vin, DUTY_BOUNDS[0])
        assert vout > peak * (1 - 1e-6) or vout < low + 1e-6 * abs(low)
        return
    assert abs(m.op.v_out) == pytest.approx(vout, rel=1e-9)
    op = m.op
    assert op.mode in ("ccm", "dcm")
    assert DUTY_BOUNDS[0] <= op.duty <= DUTY_BOUNDS[1]
    assert math.isfinite(op.i_l_avg) and math.isfinite(op.p_in)
    for tf in ("control_to_output", "line_to_output", "output_impedance"):
        f = m.features(tf)
        assert math.isfinite(f.dc_gain)
        assert all(pole.real < 0 for pole in f.poles_hz)


@SETTINGS
@given(
    st.sampled_from(NAMES),
    st.floats(0.05, 0.95),
    log_uniform(1e-6, 1e-3),
    log_uniform(0.5, 1000.0),
    log_uniform(20e3, 2e6),
)
def test_mode_decision_is_k_below_kcrit(name, d, L, r, fs):
    k = 2 * L * fs / r
    kc = k_crit_book(name, d)
    assume(abs(k / kc - 1) > 1e-6)
    diode = PowerStageParameters(inductance=L, c_out=100e-6, g_load=1 / r, rectifier="diode")
    op = analyze_stage(TOPOLOGIES[name], diode, v_in=12.0, v_out=1.0, f_sw=fs, duty=d).op
    assert op.k == pytest.approx(k, rel=1e-12)
    assert op.mode == ("dcm" if k < kc else "ccm")
    sync = PowerStageParameters(inductance=L, c_out=100e-6, g_load=1 / r)
    op = analyze_stage(TOPOLOGIES[name], sync, v_in=12.0, v_out=1.0, f_sw=fs, duty=d).op
    assert op.mode == "ccm"
