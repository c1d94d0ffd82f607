"""Digital controller checks DG-1 to DG-6 (METHODS sections 7.1-7.7, check table section 14).

Sources (as cited in METHODS section 13):

* G. F. Franklin, J. D. Powell, M. L. Workman, *Digital Control of Dynamic Systems*, 3rd ed.,
  Addison-Wesley 1998, ch. 6: Tustin with prewarping, ZOH equivalent, matched pole-zero
  (from memory).
* S. Buso, P. Mattavelli, *Digital Control in Power Electronics*, Morgan & Claypool 2006, and
  L. Corradini, D. Maksimovic, P. Mattavelli, R. Zane, *Digital Control of High-Frequency
  Switched-Mode Power Converters*, Wiley-IEEE Press 2015: z-domain loop gain with the ZOH plant
  and the computation delay (from memory).
* A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing*: direct form I, coefficient
  quantisation (from memory).
* H. D. Venable, "The K factor: a new mathematical tool for stability analysis and synthesis",
  Proc. Powercon 10, 1983 (from memory): the analog type III design of DG-1.
* Reference libraries: scipy.signal.cont2discrete (bilinear / zoh) and python-control's
  sample_system (Tustin with a prewarp frequency matches magnitude and phase there, as its
  documentation states).

Scenario: METHODS "plant 1", P(s) = (Vg/VM) (1 + s rC C)/(1 + s (rC C + L/R) + s^2 L C (R + rC)/R),
Vg = 36 V, VM = 2.5 V, L = 22 uH, C = 100 uF, rC = 30 mohm, R = 4 ohm; fs = 250 kHz,
Td = 1.5 Ts, fc = 10 kHz, PM = 50 deg. Tolerances are those of rows DG-1 to DG-6, widened to
half a unit of the last printed digit where a value is printed with fewer digits.
"""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
import scipy.signal

from loopwright.discrete import (
    DigitalOptions,
    design_digital,
    discretize,
    quantise,
    run_fixed_point,
    run_float,
    sample_plant,
)

VG, VM, L, C, RC, R = 36.0, 2.5, 22e-6, 100e-6, 30e-3, 4.0
FS = 250e3
TS = 1.0 / FS
FC = 10e3
WC = 2 * math.pi * FC
PM = 50.0
DELAY = 1.5

# plant 1 (includes 1/VM), highest power of s first
P_NUM = np.array([RC * C, 1.0]) * VG / VM
P_DEN = np.array([L * C * (R + RC) / R, RC * C + L / R, 1.0])


def plant_1(s):
    return np.polyval(P_NUM, s) / np.polyval(P_DEN, s)


def dg1_compensator():
    """Venable's type III (METHODS 4.1 / 7.7) on P(s) e^{-s 1.5 Ts}, computed inline."""
    p = plant_1(1j * WC) * np.exp(-1j * WC * DELAY * TS)
    phase = math.degrees(np.angle(p))
    if phase > 0:
        phase -= 360.0  # unwrapped, as METHODS 4.1 step 2
    boost = PM - phase - 90.0
    k = math.tan(math.radians(boost / 4 + 45.0)) ** 2
    wz, wp = WC / math.sqrt(k), WC * math.sqrt(k)
    shape = abs((1 + 1j * WC / wz) ** 2 / (1j * WC * (1 + 1j * WC / wp) ** 2))
    w_i = (1.0 / abs(p)) / shape
    num = w_i * np.polymul([1 / wz, 1.0], [1 / wz, 1.0])
    den = np.polymul([1.0, 0.0], np.polymul([1 / wp, 1.0], [1 / wp, 1.0]))
    return dict(
        abs_p=abs(p), phase=phase, boost=boost, k=k, wz=wz, wp=wp, w_i=w_i, num=num, den=den
    )


@pytest.fixture(scope="module")
def comp():
    return dg1_compensator()


@pytest.fixture(scope="module")
def tustin(comp):
    return discretize(comp["num"], comp["den"], TS, "tustin", prewarp_hz=FC)


@pytest.fixture(scope="module")
def plant_ss():
    return control.tf2ss(control.tf(P_NUM, P_DEN))


@pytest.fixture(scope="module")
def dg_design(comp, plant_ss):
    # plant 1 already holds the modulator gain 1/VM and no divider: Fm = H = 1 here
    opts = DigitalOptions(sample_rate_hz=FS, delay_samples=DELAY, method="tustin")
    return design_digital(
        comp["num"],
        comp["den"],
        plant_ss,
        modulator_gain=1.0,
        sense_gain=1.0,
        options=opts,
        f_c_hz=FC,
    )


# ---- DG-1 (Venable, from memory; METHODS 7.7) -------------------------------------------------
def test_dg1_analog_type3_on_plant_with_delay(comp):
    """DG-1: plant phase -186.9833 deg, boost 146.9833, K 47.518158, zeros 1450.675 Hz,
    poles 68933.416 Hz, wI 701.0171 rad/s (rel 1e-6, or half the last printed digit)."""
    assert comp["abs_p"] == pytest.approx(1.886217, rel=1e-6)
    assert comp["phase"] == pytest.approx(-186.9833, abs=5e-5)
    assert comp["boost"] == pytest.approx(146.9833, abs=5e-5)
    assert comp["k"] == pytest.approx(47.518158, rel=1e-6)
    assert comp["wz"] / (2 * math.pi) == pytest.approx(1450.675, rel=1e-6)
    assert comp["wp"] / (2 * math.pi) == pytest.approx(68933.416, rel=1e-6)
    assert comp["w_i"] == pytest.approx(701.0171, rel=1e-6)


def test_dg1_continuous_loop_with_delay_meets_the_design(dg_design):
    """DG-3 continuous row: T(s) e^{-s 1.5 Ts} crosses at 10000 Hz with PM 50.000 deg."""
    lc = dg_design.loop_continuous_delay
    assert lc.crossover_hz == pytest.approx(10000.0, abs=2.0)
    assert lc.phase_margin_deg == pytest.approx(50.000, abs=0.01)


# ---- DG-2 (Franklin, Powell & Workman ch. 6, from memory) ---------------------------------------
DG2_B = [0.9429243174, -0.8750470372, -0.9417027652, 0.8762685894]
DG2_A = [1.0, -1.1380866645, 0.1428536463, -0.0047669817]


def test_dg2_tustin_prewarped_coefficients(tustin):
    assert tustin.b == pytest.approx(DG2_B, abs=1e-9)
    assert tustin.a == pytest.approx(DG2_A, abs=1e-9)
    assert tustin.has_integrator


def test_dg2_prewarp_constant():
    """Tustin of 1/s is (1/K)(1 + z^-1)/(1 - z^-1): K = wc / tan(wc Ts/2) = 497365.3306 1/s,
    plain Tustin 2/Ts = 500000."""
    warped = discretize([1.0], [1.0, 0.0], TS, "tustin", prewarp_hz=FC)
    plain = discretize([1.0], [1.0, 0.0], TS, "tustin")
    assert 1.0 / warped.b[0] == pytest.approx(497365.3306, abs=5e-5)
    assert 1.0 / plain.b[0] == pytest.approx(500000.0, rel=1e-12)


def test_dg2_response_equals_analog_at_fc(tustin, comp):
    gz = tustin.freqresp(np.array([WC]))[0]
    gs = np.polyval(comp["num"], 1j * WC) / np.polyval(comp["den"], 1j * WC)
    assert abs(gz) == pytest.approx(0.530161689, abs=5e-10)
    assert abs(gs) == pytest.approx(0.530161689, abs=5e-10)
    assert abs(gz / gs - 1.0) < 1e-12  # magnitude and phase (METHODS: ~4e-14 deg)


def test_dg2_denominator_roots(tustin):
    """Roots 1 (integrator), 0.06904332, 0.06904334 (a double root split by rounding)."""
    roots = np.sort(np.real_if_close(tustin.poles, tol=1e6).real)
    assert roots[-1] == pytest.approx(1.0, abs=1e-12)
    assert roots[0] == pytest.approx(0.06904333, abs=2e-8)
    assert roots[1] == pytest.approx(0.06904333, abs=2e-8)


def test_dg2_tustin_matches_scipy_bilinear(comp, tustin):
    """scipy.signal.cont2discrete: bilinear with dt' = 2/K is Tustin prewarped (K = 2/dt')."""
    k = WC / math.tan(WC * TS / 2)
    b, a, _ = scipy.signal.cont2discrete((comp["num"], comp["den"]), 2.0 / k, method="bilinear")
    b = np.ravel(b) / a[0]
    a = a / a[0]
    np.testing.assert_allclose(tustin.b, b, rtol=0, atol=1e-12)
    np.testing.assert_allclose(tustin.a, a, rtol=0, atol=1e-12)
    # gbt with alpha = 1/2 is the same transform
    b2, a2, _ = scipy.signal.cont2discrete(
        (comp["num"], comp["den"]), 2.0 / k, method="gbt", alpha=0.5
    )
    np.testing.assert_allclose(tustin.b, np.ravel(b2) / a2[0], rtol=0, atol=1e-12)


def test_dg2_tustin_matches_python_control_sample_system(comp, tustin):
    """python-control documents that Tustin with prewarp_frequency matches magnitude and phase
    there; its coefficients must equal ours."""
    sysc = control.tf(comp["num"], comp["den"])
    sysd = control.sample_system(sysc, TS, method="tustin", prewarp_frequency=WC)
    num = np.ravel(sysd.num[0][0])
    den = np.ravel(sysd.den[0][0])
    np.testing.assert_allclose(num / den[0], tustin.b, rtol=0, atol=1e-10)
    np.testing.assert_allclose(den / den[0], tustin.a, rtol=0, atol=1e-10)
    ref = complex(sysd(np.exp(1j * WC * TS)))
    ours = complex(tustin.to_control()(np.exp(1j * WC * TS)))
    assert abs(ours / ref - 1.0) < 1e-10
    gs = np.polyval(comp["num"], 1j * WC) / np.polyval(comp["den"], 1j * WC)
    assert abs(ref) == pytest.approx(abs(gs), rel=1e-10)
    assert np.angle(ref / gs) == pytest.approx(0.0, abs=1e-10)


def test_zoh_controller_matches_scipy(comp):
    """Step-invariant equivalent vs scipy.signal.cont2discrete(method='zoh')."""
    ours = discretize(comp["num"], comp["den"], TS, "zoh")
    b, a, _ = scipy.signal.cont2discrete((comp["num"], comp["den"]), TS, method="zoh")
    np.testing.assert_allclose(ours.b, np.ravel(b) / a[0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(ours.a, a / a[0], rtol=0, atol=1e-9)


# ---- DG-3 (Buso & Mattavelli; Corradini et al., from memory) ------------------------------------
def test_dg3_zoh_plant_poles(plant_ss):
    """ZOH plant poles 0.98880918 +- 0.08386872j = e^{p Ts} (tolerance 1e-8), and equal to
    python-control's sample_system(..., 'zoh')."""
    sp = sample_plant(plant_ss, TS, 1.0)
    poles = sp.poles
    poles = poles[np.argsort(poles.imag)]
    np.testing.assert_allclose(poles.real, [0.98880918, 0.98880918], atol=1e-8)
    np.testing.assert_allclose(poles.imag, [-0.08386872, 0.08386872], atol=1e-8)
    ref = control.sample_system(plant_ss, TS, method="zoh")
    np.testing.assert_allclose(np.sort_complex(poles), np.sort_complex(ref.poles()), atol=1e-12)
    cont = np.linalg.eigvals(plant_ss.A)
    np.testing.assert_allclose(np.sort_complex(poles), np.sort_complex(np.exp(cont * TS)))


def test_dg3_sampled_loop_figures(dg_design):
    """Discrete loop (ZOH plant, one-sample delay): fc 9981.3 Hz (2 Hz), PM 50.078 deg (0.01)."""
    lz = dg_design.loop_z
    assert lz.crossover_hz == pytest.approx(9981.3, abs=2.0)
    assert lz.phase_margin_deg == pytest.approx(50.078, abs=0.01)
    assert lz.closed_loop_stable is True


def test_dg3_grid_reading_as_in_methods(tustin, plant_ss):
    """The reading METHODS describes: 400000 linear points, 100 Hz .. 0.999 fs/2, nearest |T|=1."""
    sp = sample_plant(plant_ss, TS, 1.0)
    f = np.linspace(100.0, 0.999 * FS / 2, 400000)
    w = 2 * np.pi * f
    t = tustin.freqresp(w) * sp.freqresp(w)
    i = int(np.argmin(np.abs(np.abs(t) - 1.0)))
    assert f[i] == pytest.approx(9981.3, abs=2.0)
    assert 180.0 + math.degrees(np.angle(t[i])) == pytest.approx(50.078, abs=0.01)


def test_delay_phase_at_crossover_common_practice(dg_design):
    """Phase lost to hold + delay at fc vs the common-practice -360 fc Td/fs = -21.6 deg.

    The ZOH is only approximately e^{-s Ts/2} (its own share is -7.2 deg here); the exact
    sampled loop must agree with the estimate to 0.1 deg, i.e. within 1.4 % of that share."""
    estimate = -360.0 * FC * DELAY / FS
    assert estimate == pytest.approx(-21.6)
    assert dg_design.delay_phase_estimate_deg == pytest.approx(estimate)
    assert dg_design.phase_lost_at_fc_deg == pytest.approx(estimate, abs=0.1)
    zoh_share = 180.0 * FC / FS
    assert abs(dg_design.phase_lost_at_fc_deg - estimate) < 0.02 * zoh_share


# ---- DG-4 (matched pole-zero, Franklin et al. ch. 6, from memory) -------------------------------
DG4_A = [1.0, -1.3536885636, 0.3849624636, -0.0312739]


def test_dg4_matched_all_infinite_zeros_to_minus_one(comp):
    m = discretize(comp["num"], comp["den"], TS, "matched", prewarp_hz=FC)
    assert m.b == pytest.approx([0.7455721049, -0.6921849602, -0.7446164001, 0.693140665], abs=1e-8)
    assert m.a[:3] == pytest.approx(DG4_A[:3], abs=1e-8)
    assert m.a[3] == pytest.approx(DG4_A[3], abs=5e-8)  # printed to 7 decimals
    phase = math.degrees(np.angle(m.freqresp(np.array([WC]))[0]))
    assert phase == pytest.approx(53.1036, abs=1e-3)


def test_dg4_matched_keep_one_sample(comp):
    m = discretize(
        comp["num"],
        comp["den"],
        TS,
        "matched",
        prewarp_hz=FC,
        matched_infinite_zeros="drop-one",
    )
    assert m.b[0] == 0.0
    assert m.b[1:] == pytest.approx([1.4793860923, -2.8528398424, 1.3753500876], abs=1e-8)
    assert m.a[:3] == pytest.approx(DG4_A[:3], abs=1e-8)
    phase = math.degrees(np.angle(m.freqresp(np.array([WC]))[0]))
    assert phase == pytest.approx(45.9036, abs=1e-3)


def test_dg4_gain_matched_at_fc(comp):
    gs = np.polyval(comp["num"], 1j * WC) / np.polyval(comp["den"], 1j * WC)
    assert math.degrees(np.angle(gs)) == pytest.approx(56.9833, abs=1e-4)
    for variant in ("minus-one", "drop-one"):
        m = discretize(comp["num"], comp["den"], TS, "matched", FC, variant)
        assert abs(m.freqresp(np.array([WC]))[0]) == pytest.approx(abs(gs), rel=1e-12)


# ---- DG-5 (Oppenheim & Schafer; METHODS 7.5) ----------------------------------------------------
def test_dg5_q15_with_one_guard_bit(tustin):
    q = quantise(tustin, "q15")
    fx = q.fixed_point
    assert fx.guard_bits == 1
    assert fx.shift == 14
    assert list(fx.b_int) == [15449, -14337, -15429, 14357]
    assert list(fx.a_int) == [16384, -18646, 2341, -79]
    assert sum(fx.a_int) == 0
    assert fx.integrator_adjusted  # plain rounding gives a3 = -78 and a sum of +1
    plain = [round(v * 2**14) for v in tustin.a]
    assert plain[-1] == -78 and sum(plain) == 1
    assert q.integrator_exact is True
    assert q.max_gain_error_db == pytest.approx(0.0068, abs=1e-4)
    assert q.max_phase_error_deg == pytest.approx(0.0243, abs=1e-4)
    assert q.f_band_hz == pytest.approx((100.0, 124e3))


# ---- DG-6 (direct form I test vectors; METHODS 7.4-7.5) -----------------------------------------
B_Q14 = [15449, -14337, -15429, 14357]
A_Q14 = [16384, -18646, 2341, -79]


def test_dg6_float_vector():
    u = run_float(DG2_B, DG2_A, [100.0] * 40, dtype=np.float64)
    expected = [94.2924, 114.1007, 29.0039, 17.4031, 16.4511, 16.6193, 16.8913, 17.1724]
    assert u[:8] == pytest.approx(expected, abs=1e-4)
    assert u[39] == pytest.approx(26.1929, abs=1e-4)


def test_dg6_integer_history_stalls():
    u = run_fixed_point(B_Q14, A_Q14, 14, [100] * 40, u_min_int=0, u_max_int=4095)
    assert u[:8].tolist() == [94, 114, 29, 17, 16, 16, 16, 16]
    assert u[39] == 16


def test_dg6_q14_history_tracks_float():
    u = run_fixed_point(B_Q14, A_Q14, 14, [100] * 40, history_frac_bits=14)
    assert u[:8].tolist() == [94, 114, 29, 17, 16, 17, 17, 17]
    assert u[39] == 26


def test_dg6_clamp_anti_windup():
    u = run_fixed_point(B_Q14, A_Q14, 14, [5000] * 6, u_min_int=0, u_max_int=4095)
    assert u.tolist() == [4095, 4095, 0, 0, 32, 49]
