"""Tests of loopwright.compensators: the Compensator object, K-factor and resonance synthesis.

External references: python-control (``tf`` evaluation of num/den), the margin finder on the
exact response (crossover and phase margin achieved), closed-loop poles (stability verdict),
Venable's K-factor relations (Powercon 10, 1983 -- from memory): ``B = 2 atan K - 90`` for
type II and ``4 atan sqrt K - 180`` for type III; Erickson & Maksimovic, *Fundamentals of
Power Electronics*, 2nd ed., Table 8.2 (from memory) for the canonical boost plant.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import scipy.signal
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from loopwright.compensators import (
    BOOST_LIMIT_DEG,
    Compensator,
    InfeasibleSynthesisError,
    boost_from_k,
    check_k_factor,
    crossover_ceiling,
    k_factor,
    k_factor_design,
    max_k_factor_crossover_hz,
    plant_phase_deg,
    required_boost_deg,
    synthesize_k_factor,
    synthesize_resonance,
)
from loopwright.errors import DesignError, DesignWarning
from loopwright.loop import analyze_loops
from loopwright.margins import find_margins

TWO_PI = 2 * math.pi
VG, VM, L, C, RC, R = 36.0, 2.5, 22e-6, 100e-6, 30e-3, 4.0


def plant_1(omega):
    s = 1j * np.asarray(omega, dtype=float)
    return (VG / VM) * (1 + s * RC * C) / (1 + s * (RC * C + L / R) + s**2 * L * C * (R + RC) / R)


# -- Compensator ------------------------------------------------------------------------------
COMPS = [
    Compensator("type1", 5e3, strategy="manual"),
    Compensator("type2", 3e4, (TWO_PI * 2e3,), (TWO_PI * 60e3,), strategy="manual"),
    Compensator("type3", 1e4, (TWO_PI * 3e3,) * 2, (TWO_PI * 60e3, TWO_PI * 120e3), "manual"),
]


@pytest.mark.parametrize("comp", COMPS, ids=lambda c: c.kind)
def test_compensator_views_agree(comp):
    w = TWO_PI * np.geomspace(1.0, 1e6, 25)
    ref = comp.w_i / (1j * w)
    for wz in comp.zeros_rad:
        ref = ref * (1 + 1j * w / wz)
    for wp in comp.poles_rad:
        ref = ref / (1 + 1j * w / wp)
    assert comp.freqresp(w) == pytest.approx(ref, rel=1e-12)
    assert np.polyval(comp.num, 1j * w) / np.polyval(comp.den, 1j * w) == pytest.approx(
        ref, rel=1e-9
    )
    assert comp.to_control()(1j * w) == pytest.approx(ref, rel=1e-9)
    a, b, c, d = comp.statespace()
    assert a.shape == (comp.order, comp.order)
    h = np.array([(c @ np.linalg.solve(1j * wk * np.eye(comp.order) - a, b))[0, 0] for wk in w])
    assert h + d[0, 0] == pytest.approx(ref, rel=1e-9)
    assert comp.den[0] == 1.0 and comp.den[-1] == 0.0
    assert comp.zeros_hz == pytest.approx([z / TWO_PI for z in comp.zeros_rad])
    assert comp.poles_hz == pytest.approx([p / TWO_PI for p in comp.poles_rad])
    assert isinstance(comp.freqresp(1e3), complex)


def test_statespace_drops_cancelling_sections():
    comp = Compensator("type2", 1e3, (5e3,), (5e3,), strategy="manual")
    a, _b, _c, _d = comp.statespace()
    assert a.shape == (1, 1)
    assert comp.freqresp(7e3) == pytest.approx(1e3 / 7e3j)


@pytest.mark.parametrize(
    "kwargs, key",
    [
        (dict(kind="type4", w_i=1.0), "kind"),
        (dict(kind="type1", w_i=0.0), "w_i"),
        (dict(kind="type1", w_i=math.nan), "w_i"),
        (dict(kind="type2", w_i=1.0, zeros_rad=(1.0,)), "poles_rad"),
        (dict(kind="type1", w_i=1.0, zeros_rad=(1.0,)), "zeros_rad"),
        (dict(kind="type2", w_i=1.0, zeros_rad=(-1.0,), poles_rad=(2.0,)), "zeros_rad"),
        (dict(kind="type2", w_i=1.0, zeros_rad=(1.0,), poles_rad=(2.0,), k=-2.0), "k"),
    ],
)
def test_compensator_rejects_bad_fields(kwargs, key):
    with pytest.raises(DesignError, match=key):
        Compensator(**kwargs)


# -- K factor ---------------------------------------------------------------------------------
@pytest.mark.parametrize("kind", ["type2", "type3"])
@pytest.mark.parametrize("boost", [1.0, 37.9, 79.0, 89.0])
def test_k_factor_and_boost_are_inverse(kind, boost):
    if kind == "type3":
        boost *= 2
    assert boost_from_k(k_factor(boost, kind), kind) == pytest.approx(boost, abs=1e-10)


def test_k_factor_ranges():
    assert k_factor(0.0, "type1") == 1.0
    with pytest.raises(DesignError, match="boost_deg"):
        k_factor(10.0, "type1")
    with pytest.raises(DesignError, match="boost_deg"):
        k_factor(90.0, "type2")
    with pytest.raises(DesignError, match="boost_deg"):
        k_factor(180.0, "type3")


def test_plant_phase_is_read_as_a_lag():
    p = np.exp(1j * math.radians(173.0))  # -187 deg, e.g. LC plus delay
    assert plant_phase_deg(p) == pytest.approx(-187.0)
    assert required_boost_deg(p, 50.0) == pytest.approx(147.0)
    assert required_boost_deg(p, 50.0, plant_phase_deg=173.0) == pytest.approx(-213.0)
    with pytest.raises(DesignError, match="plant_phase_deg"):
        required_boost_deg(p, 50.0, plant_phase_deg=-150.0)
    with pytest.raises(DesignError, match="plant_at_fc"):
        required_boost_deg(0.0, 50.0)
    with pytest.raises(DesignError, match="phase_margin_deg"):
        required_boost_deg(p, 190.0)


def test_type2_infeasible_message_and_ceiling():
    wc = TWO_PI * 25e3
    with pytest.raises(InfeasibleSynthesisError) as info:
        synthesize_k_factor(plant_1(wc), 25e3, 60.0, "type2", plant_response=plant_1)
    issue = info.value.issue
    assert isinstance(info.value, DesignError)
    assert issue.suggested_kind == "type3"
    assert issue.boost_needed_deg == pytest.approx(123.3438, abs=1e-4)
    assert issue.boost_limit_deg == BOOST_LIMIT_DEG["type2"] == 80.0
    assert "type II gives at most 80 deg of boost (needs 123.3 deg" in str(info.value)
    assert "use type III or a crossover below" in str(info.value)
    # at the reported ceiling the type II boost is exactly at its limit, just above it is not
    y = issue.max_crossover_hz
    assert y is not None and y < 25e3
    assert required_boost_deg(plant_1(TWO_PI * y), 60.0) == pytest.approx(80.0, abs=1e-6)
    assert required_boost_deg(plant_1(TWO_PI * y * 1.001), 60.0) > 80.0
    synthesize_k_factor(plant_1(TWO_PI * y * 0.999), y * 0.999, 60.0, "type2")
    assert check_k_factor(plant_1(wc), 25e3, 60.0, "type3") is None


def test_type3_beyond_its_limit_and_lead_plant():
    p = np.exp(-1j * math.radians(250.0))
    with pytest.raises(InfeasibleSynthesisError, match="type III gives at most 160 deg"):
        synthesize_k_factor(p, 1e4, 60.0, "type3")
    # a plant that needs no boost: types II/III refuse, type I fits
    lead = 0.5 * np.exp(-1j * math.radians(10.0))
    with pytest.raises(InfeasibleSynthesisError, match="use type I") as info:
        synthesize_k_factor(lead, 1e4, 60.0, "type3")
    assert info.value.issue.suggested_kind == "type1"
    design = k_factor_design(lead, 1e4, 60.0, "type1")
    assert design.phase_margin_deg == pytest.approx(80.0)
    assert design.k == 1.0


def test_max_crossover_none_and_full_range():
    assert max_k_factor_crossover_hz(plant_1, 60.0, "type1", 1e4, 1e5) is None
    assert max_k_factor_crossover_hz(plant_1, 60.0, "type3", 1e2, 1e5) == 1e5


def boost_plant(v_in, l_ind, c_out, r_esr, r_load, v_out, v_ramp):
    """Canonical CCM boost control-to-output (x 1/VM) with ESR zero, Table 8.2 values."""
    dp = v_in / v_out
    w0 = dp / math.sqrt(l_ind * c_out)
    q = dp * r_load * math.sqrt(c_out / l_ind)
    wz = dp**2 * r_load / l_ind
    w_esr = 1 / (r_esr * c_out)
    gd0 = v_in / dp**2 / v_ramp
    num = gd0 * np.polymul([-1 / wz, 1], [1 / w_esr, 1])
    den = [1 / w0**2, 1 / (q * w0), 1]
    return num, den, wz / TWO_PI, w0 / TWO_PI


def _check_synthesis(num, den, fc, pm, kind, f_lo, f_hi):
    def plant(w):
        s = 1j * np.asarray(w, dtype=float)
        return np.polyval(num, s) / np.polyval(den, s)

    p_fc = plant(TWO_PI * fc)
    needed = required_boost_deg(p_fc, pm)
    try:
        comp = synthesize_k_factor(p_fc, fc, pm, kind)
    except InfeasibleSynthesisError as err:
        # infeasible requests never report success, and only when truly infeasible
        assert needed > BOOST_LIMIT_DEG[kind] or needed <= 0.0
        assert err.issue.boost_needed_deg == pytest.approx(needed)
        return None
    assert 0.0 < needed <= BOOST_LIMIT_DEG[kind]
    m = find_margins(lambda w: plant(w) * comp.freqresp(w), f_lo, f_hi)
    assert m.crossover_hz == pytest.approx(fc, rel=0.02)
    assert m.phase_margin_deg == pytest.approx(pm, abs=1.0)
    # closed-loop poles from a state-space form of the plant
    a, b, c, d = scipy.signal.tf2ss(num, den)
    res = analyze_loops(a, b[:, 0], c[0], d[0, 0], comp, f_min_hz=f_lo, f_max_hz=f_hi)[0]
    if not res.margins.conditionally_stable and res.margins.gain_reduction_margin_db is None:
        assert res.closed_loop_stable  # unconditionally stable by the margins
    return comp


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    l_ind=st.floats(4.7e-6, 100e-6),
    c_out=st.floats(22e-6, 1000e-6),
    r_esr=st.floats(1e-3, 100e-3),
    r_load=st.floats(1.0, 50.0),
    v_in=st.floats(5.0, 60.0),
    f_sw=st.floats(100e3, 1e6),
    fc_frac=st.floats(0.0, 1.0),
    pm=st.floats(40.0, 75.0),
    kind=st.sampled_from(["type2", "type3"]),
)
def test_k_factor_property_buck(l_ind, c_out, r_esr, r_load, v_in, f_sw, fc_frac, pm, kind):
    f0 = 1 / (TWO_PI * math.sqrt(l_ind * c_out))
    lo, hi = 3 * f0, f_sw / 8
    assume(hi > lo)
    fc = lo * (hi / lo) ** fc_frac
    num = np.array([r_esr * c_out, 1.0]) * v_in / 1.5
    den = [l_ind * c_out * (r_load + r_esr) / r_load, r_esr * c_out + l_ind / r_load, 1.0]
    _check_synthesis(num, den, fc, pm, kind, fc / 1e3, fc * 1e3)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    v_in=st.floats(6.0, 20.0),
    ratio=st.floats(1.3, 3.0),
    l_ind=st.floats(10e-6, 100e-6),
    c_out=st.floats(47e-6, 470e-6),
    r_esr=st.floats(5e-3, 50e-3),
    r_load=st.floats(5.0, 50.0),
    fc_frac=st.floats(0.0, 1.0),
    pm=st.floats(40.0, 70.0),
    kind=st.sampled_from(["type2", "type3"]),
)
def test_k_factor_property_boost(v_in, ratio, l_ind, c_out, r_esr, r_load, fc_frac, pm, kind):
    num, den, f_rhp, f0 = boost_plant(v_in, l_ind, c_out, r_esr, r_load, v_in * ratio, 1.5)
    lo, hi = 1.5 * f0, crossover_ceiling(1e6, f_rhp_hz=f_rhp).f_c_max_hz
    assume(hi > lo)
    fc = lo * (hi / lo) ** fc_frac
    _check_synthesis(num, den, fc, pm, kind, fc / 1e3, fc * 1e3)


# -- resonance placement ----------------------------------------------------------------------
def test_resonance_warnings_and_errors():
    p = plant_1(TWO_PI * 25e3)
    f0 = 3393.195
    with pytest.warns(DesignWarning, match="below 2 f0"):
        synthesize_resonance(plant_1(TWO_PI * 5e3), 5e3, f0, 250e3, f_esr_hz=53e3)
    with pytest.warns(DesignWarning, match="pole"):
        synthesize_resonance(p, 25e3, f0, 250e3, f_esr_hz=20e3)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        comp = synthesize_resonance(p, 25e3, f0, 250e3)  # no ESR: first pole at fs/2 as well
    assert comp.poles_hz == pytest.approx([125e3, 125e3])
    with pytest.raises(DesignError, match="f_c_hz"):
        synthesize_resonance(p, 130e3, f0, 250e3)
    with pytest.raises(DesignError, match="f0_hz"):
        synthesize_resonance(p, 25e3, 200e3, 250e3)
    with pytest.raises(DesignError, match="zeros"):
        synthesize_resonance(p, 25e3, f0, 250e3, zeros="triple")
    with pytest.raises(DesignError, match="f_esr_hz"):
        synthesize_resonance(p, 25e3, f0, 250e3, f_esr_hz=-1.0)


def test_crossover_ceiling_errors():
    with pytest.raises(DesignError, match="sw_divisor"):
        crossover_ceiling(250e3, sw_divisor=1.5)
    with pytest.raises(DesignError, match="f_sw_hz"):
        crossover_ceiling(0.0)
