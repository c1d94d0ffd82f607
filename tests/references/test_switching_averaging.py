"""Switching-level steady state against the averaged model and textbook ripple formulas.

Sources
-------
* R. D. Middlebrook and S. Cuk, "A general unified approach to modelling switching-converter
  power stages," IEEE PESC Record 1976, pp. 18-34 (state-space averaging): the averaged
  operating point (``loopwright.averaging``, itself checked against METHODS section 1.4) must
  match the period average of the exact switched solution to within the small-ripple error;
  tolerance 0.5 % (the averaged model neglects second-order ripple terms).
* R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed., Kluwer 2001,
  ch. 2 (small-ripple approximation): buck ``di = (Vg - V) D/(L fs)``, ``dv = di/(8 C fs)``;
  boost ``di = Vg D/(L fs)``, ``dv = V D/(R C fs)``; inverting buck-boost ``di = Vg D/(L fs)``,
  ``dv = |V| D/(R C fs)``. Tolerance 2 %: the approximation neglects the ripple's effect on the
  slopes (relative error of order dv/V and of the damping over one period).
* Erickson & Maksimovic 2nd ed., ch. 5, Table 5.2 [from memory; the boost and buck-boost rows
  are confirmed in METHODS 9.1]: DCM conversion ratios, buck ``M = 2/(1 + sqrt(1 + 4K/D^2))``,
  boost ``M = (1 + sqrt(1 + 4 D^2/K))/2``, buck-boost ``M = -D/sqrt(K)``, ``K = 2L/(R Ts)``;
  scenarios A-dcm, B-dcm, C-dcm of METHODS 9.4 (ideal parts). Tolerance 1 %.
"""

from __future__ import annotations

import math

import pytest

from loopwright.averaging import analyze_stage
from loopwright.simulate import periodic_steady_state
from loopwright.topologies import TOPOLOGIES, PowerStageParameters

# METHODS scenario table: (topology, vin, duty, fs, L, C, R, rL, Ron, VF, RD, rC, Ron2)
SCENARIOS = {
    "A": ("buck", 36.0, 1 / 3, 250e3, 22e-6, 100e-6, 4.0, 0.020, 0.030, 0.5, 0.020, 0.030, 0.015),
    "B": ("boost", 12.0, 0.5, 200e3, 47e-6, 220e-6, 12.0, 0.050, 0.025, 0.45, 0.015, 0.020, 0.015),
    "C": ("buck-boost", 9.0, 4 / 7, 300e3, 33e-6, 150e-6, 12.0, 0.040, 0.030, 0.4, 0.020, 0.015,
          0.020),
}  # fmt: skip


def _params(sc, rectifier):
    _, _, _, _, L, C, R, rl, ron, vf, rd, rc, ron2 = sc
    if rectifier == "diode":
        return PowerStageParameters(L, C, 1 / R, rl, rc, ron, "diode", rd, vf)
    return PowerStageParameters(L, C, 1 / R, rl, rc, ron, "synchronous", ron2, 0.0)


@pytest.mark.parametrize("name", ["A", "B", "C"])
@pytest.mark.parametrize("rectifier", ["synchronous", "diode"])
def test_average_matches_averaged_operating_point(name, rectifier):
    """Middlebrook & Cuk 1976: period averages equal the averaged model's DC solution."""
    sc = SCENARIOS[name]
    topo, vin, duty, fs = sc[:4]
    p = _params(sc, rectifier)
    avg = analyze_stage(TOPOLOGIES[topo], p, v_in=vin, v_out=1.0, f_sw=fs, duty=duty)
    r = periodic_steady_state(topo, p, v_in=vin, f_sw=fs, duty=duty)
    assert r.steady and r.mode == "ccm"
    assert r.vout_avg == pytest.approx(avg.op.v_out, rel=5e-3)
    assert r.il_avg == pytest.approx(avg.op.i_l_avg, rel=5e-3)
    assert r.iin_avg == pytest.approx(avg.op.i_in_avg, rel=5e-3)
    # METHODS 1.4 printed values for the diode variants (D = 1/3, 0.5, 4/7)
    printed = {"A": 11.541632, "B": 22.975672, "C": -11.245983}
    if rectifier == "diode":
        assert r.vout_avg == pytest.approx(printed[name], rel=5e-3)


def _ideal(sc, rectifier="synchronous", r_load=None):
    _, _, _, _, L, C, R, *_ = sc
    r_load = R if r_load is None else r_load
    return PowerStageParameters(L, C, 1 / r_load, rectifier=rectifier)


@pytest.mark.parametrize("name", ["A", "B", "C"])
def test_ripple_matches_small_ripple_estimates(name):
    """Erickson & Maksimovic 2nd ed. ch. 2: inductor and capacitor ripple, ideal parts."""
    sc = SCENARIOS[name]
    topo, vg, d, fs, L, C, R = sc[:7]
    r = periodic_steady_state(topo, _ideal(sc), v_in=vg, f_sw=fs, duty=d)
    v = abs(r.vout_avg)
    if topo == "buck":
        di = (vg - v) * d / (L * fs)
        dv = di / (8 * C * fs)
    else:
        di = vg * d / (L * fs)
        dv = v * d / (R * C * fs)
    assert r.il_ripple_pp == pytest.approx(di, rel=0.02)
    assert r.vout_ripple_pp == pytest.approx(dv, rel=0.02)


def test_buck_ripple_with_esr_lies_between_the_two_terms():
    """Erickson & Maksimovic ch. 2 plus the ESR drop: capacitive ripple di/(8 C fs) and ESR ripple
    di rp (rp = rC || R, METHODS 1.2) peak at different instants, so the total lies between the
    larger and the sum (common practice)."""
    sc = SCENARIOS["A"]
    _, vg, d, fs, L, C, R = sc[:7]
    p = PowerStageParameters(L, C, 1 / R, r_esr=0.030)
    r = periodic_steady_state("buck", p, v_in=vg, f_sw=fs, duty=d)
    di = (vg - 12.0) * d / (L * fs)
    cap, esr = di / (8 * C * fs), di * 0.030 * R / (R + 0.030)
    assert max(cap, esr) <= r.vout_ripple_pp <= cap + esr


DCM = {  # METHODS 9.4: (topology, vg, target M, fs, R, L, C, D)
    "A-dcm": ("buck", 36.0, 1 / 3, 250e3, 40.0, 22e-6, 100e-6, 0.214087),
    "B-dcm": ("boost", 12.0, 2.0, 200e3, 240.0, 47e-6, 220e-6, 0.395811),
    "C-dcm": ("buck-boost", 9.0, -4 / 3, 300e3, 120.0, 33e-6, 150e-6, 0.541603),
}


@pytest.mark.parametrize("name", list(DCM))
def test_dcm_conversion_ratio(name):
    """Erickson & Maksimovic 2nd ed. Table 5.2 [from memory]: ideal DCM conversion ratio."""
    topo, vg, m_target, fs, R, L, C, D = DCM[name]
    K = 2 * L / (R / fs)
    m_formula = {
        "buck": 2 / (1 + math.sqrt(1 + 4 * K / D**2)),
        "boost": (1 + math.sqrt(1 + 4 * D**2 / K)) / 2,
        "buck-boost": -D / math.sqrt(K),
    }[topo]
    assert m_formula == pytest.approx(m_target, rel=1e-5)  # METHODS 9.4 duty reproduces M
    p = PowerStageParameters(L, C, 1 / R, rectifier="diode")
    r = periodic_steady_state(topo, p, v_in=vg, f_sw=fs, duty=D)
    assert r.steady
    assert r.mode == "dcm"
    assert r.vout_avg / vg == pytest.approx(m_formula, rel=0.01)


def test_synchronous_light_load_stays_ccm_with_negative_current():
    """METHODS 1.2: a synchronous rectifier conducts both ways, so the CCM average holds at light
    load (buck A ideal, R = 40 ohm: Vo = D Vg) and the inductor current goes negative."""
    sc = SCENARIOS["A"]
    p = _ideal(sc, r_load=40.0)
    r = periodic_steady_state("buck", p, v_in=36.0, f_sw=250e3, duty=1 / 3)
    assert r.mode == "ccm"
    assert r.vout_avg == pytest.approx(12.0, rel=1e-3)
    assert r.waveforms.i_l.min() < 0
