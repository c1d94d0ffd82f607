"""Type III zeros at the LC double pole, and the RHP-zero crossover limit: checks RT-1, RT-2.

Source: common practice (METHODS sec. 5.1, rules R2 and R5; no primary source established),
with the check values of METHODS sec. 5.3. RT-1 contrasts the placement with Venable's K factor
(H. D. Venable, "The K factor: a new mathematical tool for stability analysis and synthesis",
Powercon 10, 1983 -- from memory), whose type III makes plant 1 conditionally stable. The RHP
zero of the boost follows Erickson & Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
Table 8.2 (entries from memory), here computed from the averaged state space built inline.

Plant 1: P(s) = (Vg/VM)(1 + s rC C)/(1 + s (rC C + L/R) + s^2 L C (R + rC)/R), Vg = 36 V,
VM = 2.5 V, L = 22 uH, C = 100 uF, rC = 30 mohm, R = 4 ohm; fs = 250 kHz, fc = 25 kHz.

Tolerances (row RT-1): rel 1e-6, PM 0.001 deg; the -180 deg crossings were read in METHODS off
a 100001-point grid (the point before the sign change), hence 1 Hz and 0.02 dB. Row RT-2:
rel 1e-6 (half a unit of the last printed digit where larger).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from loopwright.compensators import (
    crossover_ceiling,
    rhp_zero_phase_deg,
    synthesize_k_factor,
    synthesize_resonance,
)
from loopwright.loop import transmission_zeros
from loopwright.margins import find_margins

VG, VM, L, C, RC, R = 36.0, 2.5, 22e-6, 100e-6, 30e-3, 4.0
FS = 250e3
FC = 25e3
WC = 2 * math.pi * FC


def plant_1(omega):
    s = 1j * np.asarray(omega, dtype=float)
    return (VG / VM) * (1 + s * RC * C) / (1 + s * (RC * C + L / R) + s**2 * L * C * (R + RC) / R)


F0 = 1 / (2 * math.pi * math.sqrt(L * C))
F_ESR = 1 / (2 * math.pi * RC * C)


def test_rt1_corner_frequencies():
    assert F0 == pytest.approx(3393.195, abs=5e-4)
    assert F_ESR == pytest.approx(53051.65, abs=5e-3)


def test_rt1_zeros_at_resonance():
    comp = synthesize_resonance(plant_1(WC), FC, F0, FS, f_esr_hz=F_ESR)
    assert comp.kind == "type3"
    assert comp.strategy == "resonance"
    assert comp.w_i == pytest.approx(10807.1466, rel=1e-6)
    assert comp.zeros_hz == pytest.approx([F0, F0], rel=1e-12)
    assert comp.poles_hz == pytest.approx([F_ESR, FS / 2], rel=1e-12)
    m = find_margins(lambda w: plant_1(w) * comp.freqresp(w), 100.0, 200e3)
    assert m.crossover_hz == pytest.approx(FC, rel=1e-9)
    assert m.phase_margin_deg == pytest.approx(64.6558, abs=0.001)
    assert m.phase_crossovers_hz == ()
    assert m.gain_margin_db == math.inf
    assert m.gain_reduction_margin_db is None
    assert not m.conditionally_stable


def test_rt1_kfactor_design_is_conditionally_stable():
    comp = synthesize_k_factor(plant_1(WC), FC, 60.0, "type3")
    m = find_margins(lambda w: plant_1(w) * comp.freqresp(w), 100.0, 200e3)
    assert m.crossover_hz == pytest.approx(FC, rel=1e-9)
    assert m.phase_crossovers_hz == pytest.approx([4146.3, 5186.9], abs=1.0)
    mags = [
        20 * math.log10(abs(plant_1(2 * math.pi * f) * comp.freqresp(2 * math.pi * f)))
        for f in m.phase_crossovers_hz
    ]
    assert mags == pytest.approx([33.73, 25.16], abs=0.02)
    assert m.conditionally_stable
    assert m.gain_reduction_margin_db == pytest.approx(25.16, abs=0.02)


def test_rt1_staggered_variant_puts_one_zero_at_half_f0():
    comp = synthesize_resonance(plant_1(WC), FC, F0, FS, f_esr_hz=F_ESR, zeros="staggered")
    assert comp.zeros_hz == pytest.approx([F0 / 2, F0], rel=1e-12)
    t = plant_1(WC) * comp.freqresp(WC)
    assert abs(t) == pytest.approx(1.0, rel=1e-12)


# -- RT-2: boost RHP zero and the crossover limit (scenario B stage) --------------------------
LB, RB, VO = 47e-6, 12.0, 24.0


def boost_control_to_output(v_in: float):
    """Ideal averaged boost, states (i_L, v_C), input duty: Erickson & Maksimovic ch. 7."""
    dp = v_in / VO  # D'
    i_l = VO / (dp * RB)
    a = np.array([[0.0, -dp / LB], [dp / C_B, -1 / (RB * C_B)]])
    b = np.array([VO / LB, -i_l / C_B])
    c = np.array([0.0, 1.0])
    return a, b, c, 0.0


C_B = 220e-6


@pytest.mark.parametrize(
    "v_in, fz, fz5, fz3",
    [(12.0, 10158.83, 2031.77, 3386.28), (9.0, 5714.34, 1142.87, 1904.78)],
)
def test_rt2_rhp_zero_and_crossover_limit(v_in, fz, fz5, fz3):
    zeros = transmission_zeros(*boost_control_to_output(v_in))[0]
    assert zeros.size == 1
    z = zeros[0]
    assert z.real > 0 and abs(z.imag) < 1e-9 * abs(z)
    f_rhp = z.real / (2 * math.pi)
    assert f_rhp == pytest.approx(fz, rel=1e-6)
    five = crossover_ceiling(200e3, f_rhp_hz=f_rhp, rhp_divisor=5)
    three = crossover_ceiling(200e3, f_rhp_hz=f_rhp)
    # printed to 0.01 Hz: half a unit of the last digit exceeds rel 1e-6 here
    assert five.f_c_max_hz == pytest.approx(fz5, abs=5e-3)
    assert three.f_c_max_hz == pytest.approx(fz3, abs=5e-3)
    assert five.limited_by == three.limited_by == "rhp-zero"
    assert five.rhp_phase_deg == pytest.approx(-11.310, abs=5e-4)
    assert three.rhp_phase_deg == pytest.approx(-18.435, abs=5e-4)


def test_rt2_rhp_phase_and_pole_placement():
    assert rhp_zero_phase_deg(10158.83 / 5, 10158.83) == pytest.approx(
        -math.degrees(math.atan(0.2))
    )
    # R5 for a converter with a RHP zero: second pole at min(f_RHPz, fs/2)
    p = 0.2 * np.exp(-1j * math.radians(170))
    comp = synthesize_resonance(p, 2e3, 782.582, 200e3, f_esr_hz=36e3, f_rhp_hz=10158.83)
    assert comp.poles_hz == pytest.approx([10158.83, 36e3], rel=1e-12)


def test_rt_common_practice_switching_limit():
    ceiling = crossover_ceiling(FS)
    assert ceiling.f_c_max_hz == pytest.approx(FS / 10)
    assert ceiling.limited_by == "switching"
    # a RHP zero far above fs/10 does not limit
    assert crossover_ceiling(FS, f_rhp_hz=1e6).limited_by == "switching"
