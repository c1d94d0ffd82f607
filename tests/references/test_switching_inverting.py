"""Closed loop of the inverting buck-boost on the switching model (negative output, sensed -v_out).

Sources
-------
* METHODS scenario C (inverting buck-boost, 9 V -> -12 V, 1 A, fs = 300 kHz, L = 33 uH,
  C = 150 uF, rL = 40 mohm, Ron = 30 mohm, VF = 0.4 V + RD = 20 mohm, rC = 15 mohm) and check row
  SSA-6: the lossy averaged model (R. D. Middlebrook and S. Cuk, "A general unified approach to
  modelling switching-converter power stages," IEEE PESC Record, 1976) reaches -12 V at
  D = 0.587309. The switching model regulated to -12 V runs at that duty up to the ripple terms
  the averaging neglects (second order in the ripple; 2e-3 allowed here).
* Capacitor charge balance (Erickson & Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
  sec. 2.3): the inductor feeds the output only while off, so ``(1 - D) I_L = |V|/R`` in steady
  state (up to the ripple terms, 1 % allowed).
* Integral action (physical law of a loop with an integrator): the sensed error goes to zero, so
  the output settles at ``-v_ref/H``; 0.5 % allowed for ADC/DPWM quantisation.
* Peterchev & Sanders 2003 (METHODS 7.6, condition 1): a DPWM finer than the ADC,
  ``|Gvd(0)| 2^-N < q_adc/H``, lets a quantised loop settle without a limit cycle.
* Series voltage injection (Middlebrook 1975, METHODS 10.2) against the averaged loop below
  ``fs/5`` within 1.5 dB and 8 deg (the tolerance of the buck and boost checks); the averaged loop
  of the inverting stage is the design flow's, built from ``-Gvd`` (python-control evaluates it).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from loopwright.design import design, loop_model
from loopwright.simulate import (
    AnalogController,
    DigitalController,
    LoadStep,
    controller_for_design,
    measure_loop_gain,
    simulate,
    simulate_design,
)
from loopwright.spec import load_design, parse_design

EXAMPLES = Path(__file__).parents[2] / "examples"

SCENARIO_C = """
name = "scenario-c"
[power_stage]
topology = "buck-boost"
fsw = "300 kHz"
vin = "9 V"
vout = "-12 V"
iout = "1 A"
[power_stage.inductor]
value = "33 uH"
dcr = "{dcr}"
[power_stage.capacitor]
value = "150 uF"
esr = "{esr}"
[power_stage.switch]
rds_on = "{ron}"
{rectifier}
[modulator]
ramp = "1 V"
[feedback]
vref = "1.2 V"
[target]
crossover = "auto"
phase_margin = "55 deg"
gain_margin = "10 dB"
compensator = "type3"
{digital}
"""
LOSSY = dict(dcr="40 mohm", esr="15 mohm", ron="30 mohm",
             rectifier='[power_stage.rectifier]\nkind = "diode"\nvf = "0.4 V"\nrd = "20 mohm"')  # fmt: skip
IDEAL = dict(dcr="0 ohm", esr="0 ohm", ron="0 ohm", rectifier="")
# q_adc/H = 2.5 V / 2^12 / 0.1 = 6.1 mV; |Gvd(0)| ~ 46 V: 46 V / 2^14 = 2.8 mV < 6.1 mV (METHODS 7.6)
DIGITAL = """[digital]
sample_rate = "300 kHz"
delay = "1.5"
method = "tustin"
format = "q15"
adc_bits = 12
adc_full_scale = "2.5 V"
pwm_counts = 16384
"""
D_SSA6 = 0.587309  # METHODS SSA-6: lossy averaged duty for -12 V


def _spec(parts: dict, digital: str = ""):
    return parse_design(SCENARIO_C.format(**parts, digital=digital))


@pytest.fixture(scope="module")
def lossy_analog():
    spec = _spec(LOSSY)
    return spec, design(spec)


@pytest.fixture(scope="module")
def lossy_digital():
    spec = _spec(LOSSY, DIGITAL)
    return spec, design(spec)


def test_analog_type3_regulates_scenario_c(lossy_analog):
    spec, res = lossy_analog
    assert res.compensator.kind == "type3"
    r = simulate_design(spec, res.compensator)
    assert r.loop == "analog" and r.steady and r.mode == "ccm"
    assert r.vout_avg == pytest.approx(-12.0, rel=5e-3)  # integral action
    assert r.vout_avg == pytest.approx(-12.0, rel=1e-4)
    assert r.duty_avg == pytest.approx(D_SSA6, abs=2e-3)  # METHODS SSA-6 (Middlebrook & Cuk)
    assert r.il_avg * (1 - r.duty_avg) == pytest.approx(1.0, rel=1e-2)  # charge balance, E&M 2.3
    assert r.duty_limited_cycles < r.cycles // 2


def test_digital_q15_regulates_scenario_c(lossy_digital):
    spec, res = lossy_digital
    ctl = controller_for_design(spec, res.digital)
    assert isinstance(ctl, DigitalController) and ctl.arithmetic == "fixed"
    assert ctl.adc_bits == 12 and ctl.pwm_counts == 16384
    r = simulate_design(spec, res.digital)
    assert r.loop == "digital" and r.steady
    assert r.vout_avg == pytest.approx(-12.0, rel=5e-3)  # integral action, ADC LSB = 6.1 mV
    assert r.duty_avg == pytest.approx(D_SSA6, abs=2e-3)  # METHODS SSA-6
    assert r.duty_avg < ctl.duty_max - 0.1


def test_digital_example_regulates_minus_five_volts():
    """The inverting example with its firmware controller: steady at -5 V (integral action)."""
    spec = load_design(EXAMPLES / "glacier-probe-inverter.toml")
    res = design(spec)
    r = simulate_design(spec, res.digital)
    assert r.steady and r.loop == "digital"
    assert r.vout_avg == pytest.approx(-5.0, rel=5e-3)
    # ideal-switch duty |V|/(|V| + Vg) = 5/17 (Erickson & Maksimovic ch. 2), losses add a little
    assert 5 / 17 <= r.duty_avg < 5 / 17 + 0.02


@pytest.mark.parametrize("kind", ["resistive", "current"])
def test_load_step_recovers_and_droops_towards_zero(lossy_analog, kind):
    """Heavier load on a negative rail: the capacitor discharges towards 0 V (the output rises),
    then integral action brings it back to -12 V."""
    spec, res = lossy_analog
    r = simulate_design(spec, res.compensator, load_step=LoadStep(0.5, 1.0, kind=kind))
    s = r.load_step
    assert r.steady and s.steady
    assert s.vout_avg_before == pytest.approx(-12.0, rel=1e-4)
    assert s.vout_avg_after == pytest.approx(-12.0, rel=1e-4)
    assert s.deviation_v > 0.02  # towards zero
    assert s.settling_time_s is not None and s.settling_time_s < 5e-3


def test_analog_injection_matches_the_design_loop_below_fs_over_5():
    """Scenario C ideal (SSA-7 stage): measured T within 1.5 dB / 8 deg of the averaged loop,
    which is the design flow's ``Gc Fm (-Gvd) H`` (python-control evaluation)."""
    spec = _spec(IDEAL)
    res = design(spec)
    f = np.logspace(math.log10(2e3), math.log10(60e3), 5)
    m = measure_loop_gain(spec, res.compensator, f)
    assert np.all(m.f_hz <= 300e3 / 5)
    assert np.all(np.abs(m.measured_mag_db - m.model_mag_db) < 1.5)
    dphase = (m.measured_phase_deg - m.model_phase_deg + 180) % 360 - 180
    assert np.all(np.abs(dphase) < 8.0)
    t_design = loop_model(spec, res.plant.nominal, res.compensator).loop_gain()
    ref = np.array([complex(t_design(1j * 2 * np.pi * fk)) for fk in m.f_hz])
    np.testing.assert_allclose(m.model, ref, rtol=1e-6)
    # negative feedback: below the crossover (|T| > 1, PM target 55 deg) the phase of T lies in
    # (-180, 0) deg; an inverted sense would put it 180 deg away
    low = np.abs(m.measured) > 1
    assert low.sum() >= 2
    assert np.all((m.measured_phase_deg[low] < 0) & (m.measured_phase_deg[low] > -180))


def test_digital_injection_matches_the_sampled_loop(lossy_digital):
    """Digital q15 loop on scenario C: measured against ``Gc(z) (-Gvd) H e^{-1.5 s Ts}``
    (METHODS 7.2 delay model, common practice) below fs/10."""
    spec, res = lossy_digital
    m = measure_loop_gain(spec, res.digital, [2.5e3, 9e3, 30e3])
    assert np.all(np.abs(m.measured_mag_db - m.model_mag_db) < 1.5)
    dphase = (m.measured_phase_deg - m.model_phase_deg + 180) % 360 - 180
    assert np.all(np.abs(dphase) < 8.0)


def test_ideal_stage_regulates_at_the_ideal_duty():
    """Scenario C ideal (L, C, R only): the loop settles at -v_ref/H = -12 V with the ideal duty
    ``D = |V|/(|V| + Vg) = 12/21`` (Erickson & Maksimovic 2nd ed. ch. 2; METHODS SSA-7)."""
    spec = _spec(IDEAL)
    res = design(spec)
    ps = spec.power_stage
    ctl = AnalogController.from_compensator(
        res.compensator, modulator_gain=spec.modulator_gain, sense_gain=spec.sense_gain,
        v_ref=spec.v_ref, duty_max=0.9,
    )  # fmt: skip
    r = simulate("buck-boost", ps.parameters(i_out=ps.i_out), v_in=9.0, f_sw=300e3, controller=ctl)
    assert r.steady and r.duty_limited_cycles < r.cycles // 2
    assert r.vout_avg == pytest.approx(-12.0, rel=1e-4)
    assert r.duty_avg == pytest.approx(12 / 21, abs=1e-3)
    assert r.il_avg == pytest.approx(12 / 12 / (9 / 21), rel=1e-3)  # I_L = I/D' (SSA-7: 2.333 A)
