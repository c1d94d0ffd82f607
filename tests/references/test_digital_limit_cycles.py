"""Limit-cycle resolution conditions, check DG-7 (METHODS 7.6-7.7, check table section 14).

Source: A. V. Peterchev and S. R. Sanders, "Quantization resolution and limit cycling in
digitally controlled PWM converters", IEEE Trans. Power Electronics 18(1):301-308, Jan. 2003
(condition 1, DPWM step at the output below the ADC step referred to the output, confirmed in a
secondary source; the integral-gain bound of condition 3 is from memory).

Scenario: buck Vg = 36 V, 12-bit ADC over 3.3 V, divider H = 0.1, DPWM counter clock 100 MHz,
fs = 250 kHz. Expected (tolerance rel 1e-4): ADC LSB at the output 8.0566 mV; DPWM 400 counts,
LSB 0.0025 in duty, 90.00 mV at the output; more than 4468.4 counts needed, i.e. at least 13
bits (effective clock 1.1171 GHz).
"""

from __future__ import annotations

import warnings

import control
import numpy as np
import pytest

from loopwright.discrete import DigitalOptions, design_digital, limit_cycle_check
from loopwright.errors import DesignError, DesignWarning


def test_dg7_resolution_figures():
    r = limit_cycle_check(36.0, 0.1, 12, 3.3, switching_frequency_hz=250e3, pwm_clock_hz=100e6)
    assert r.adc_lsb_output_v == pytest.approx(8.0566e-3, rel=1e-4)
    assert r.dpwm_counts == pytest.approx(400.0, rel=1e-4)
    assert r.dpwm_bits == pytest.approx(8.644, rel=1e-4)
    assert r.dpwm_lsb_duty == pytest.approx(0.0025, rel=1e-4)
    assert r.dpwm_lsb_output_v == pytest.approx(90.00e-3, rel=1e-4)
    assert r.counts_needed == pytest.approx(4468.4, rel=1e-4)
    assert r.bits_needed == 13
    assert r.clock_needed_hz == pytest.approx(1.1171e9, rel=1e-4)
    assert r.dpwm_finer_than_adc is False  # limit cycling expected with a plain 100 MHz counter


def test_dg7_counts_form_equals_clock_form():
    a = limit_cycle_check(36.0, 0.1, 12, 3.3, switching_frequency_hz=250e3, pwm_counts=400)
    b = limit_cycle_check(36.0, 0.1, 12, 3.3, switching_frequency_hz=250e3, pwm_clock_hz=100e6)
    for name in ("adc_lsb_output_v", "dpwm_counts", "dpwm_lsb_output_v", "counts_needed"):
        assert getattr(a, name) == getattr(b, name)
    assert a.bits_needed == b.bits_needed == 13


def test_dg7_condition_met_with_13_bits():
    """2^13 = 8192 counts > 4468.4: one DPWM step (4.39 mV) is below the ADC step (8.06 mV)."""
    r = limit_cycle_check(36.0, 0.1, 12, 3.3, switching_frequency_hz=250e3, pwm_counts=2**13)
    assert r.dpwm_finer_than_adc is True
    r12 = limit_cycle_check(36.0, 0.1, 12, 3.3, switching_frequency_hz=250e3, pwm_counts=2**12)
    assert r12.dpwm_finer_than_adc is False


def test_dg7_design_warns_and_reports():
    """The same figures through design_digital, for a buck Gvd = Vg/(LC s^2 + L/R s + 1) with an
    integrating type II controller: condition 1 fails (warning), integral action present."""
    vg, inductance, cap, r_load = 36.0, 22e-6, 100e-6, 4.0
    plant = control.tf2ss(control.tf([vg], [inductance * cap, inductance / r_load, 1.0]))
    wz, wp, wi = 2 * np.pi * 1.5e3, 2 * np.pi * 60e3, 300.0
    num = wi * np.array([1 / wz, 1.0])
    den = np.polymul([1.0, 0.0], [1 / wp, 1.0])
    opts = DigitalOptions(
        sample_rate_hz=250e3, adc_bits=12, adc_full_scale_v=3.3, pwm_clock_hz=100e6
    )
    with pytest.warns(DesignWarning, match="limit cycles expected"):
        d = design_digital(
            num, den, plant, modulator_gain=1 / 1.5, sense_gain=0.1, options=opts, f_c_hz=8e3
        )
    lc = d.limit_cycle
    assert lc.plant_dc_gain_v == pytest.approx(36.0, rel=1e-9)
    assert lc.adc_lsb_output_v == pytest.approx(8.0566e-3, rel=1e-4)
    assert lc.bits_needed == 13
    assert lc.integral_action is True
    # condition 3 by hand: r q_adc N, with r the accumulator gain of Fm Gc; Tustin maps
    # wI/s to (wI/K)(1 + z^-1)/(1 - z^-1), K = w/tan(w Ts/2) prewarped at fc: r = 2 wI Fm / K
    w = 2 * np.pi * 8e3
    k = w / np.tan(w / 250e3 / 2)
    r = d.controller.integral_gain
    assert r == pytest.approx(2 * wi / 1.5 / k, rel=1e-9)
    assert lc.integral_gain_lsb == pytest.approx(r * 3.3 / 4096 * 400, rel=1e-12)
    assert any("limit cycles expected" in w for w in d.warnings)


def test_dg7_bad_inputs():
    with pytest.raises(DesignError, match="adc_bits"):
        limit_cycle_check(36.0, 0.1, 0, 3.3, switching_frequency_hz=250e3, pwm_counts=400)
    with pytest.raises(DesignError, match="pwm"):
        limit_cycle_check(36.0, 0.1, 12, 3.3, switching_frequency_hz=250e3)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with pytest.raises(DesignError, match="adc_full_scale"):
            limit_cycle_check(36.0, 0.1, 12, -3.3, switching_frequency_hz=250e3, pwm_counts=400)
