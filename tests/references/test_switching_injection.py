"""Loop gain by series voltage injection (Middlebrook 1975; METHODS 10).

Sources
-------
* R. D. Middlebrook, "Measurement of loop gain in feedback systems," Int. J. Electronics
  38(4):485-512, 1975 [citation confirmed; relations from memory, derived in METHODS 10.1].
* METHODS check rows LG-1 (time-domain injection on the averaged plant-1 loop, 1 mV, 400 samples
  per period, 2 ms settling, DFT over the last 40 of 60 periods; tolerance 0.5 % and 0.1 deg) and
  LG-2 (combination of voltage and current injection; abs 1e-6).
* Switching model against the averaged loop ``T = Gc Fm Gvd H`` (Middlebrook & Cuk 1976 averaging)
  below ``fs/5``: within 1.5 dB and 8 deg (the averaged model neglects sampling and ripple effects
  of the PWM, which grow towards ``fs/2``; the brief's tolerance).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal

from loopwright.simulate import (
    AnalogController,
    DigitalController,
    loop_gain_by_injection,
    measure_linear_loop_gain,
    middlebrook_combination,
)
from loopwright.topologies import PowerStageParameters

VG, VM, L, C, RC, R, FS = 36.0, 2.5, 22e-6, 100e-6, 0.030, 4.0, 250e3
WZ, WP1, WP2, WI = 2 * math.pi * 3393.195, 2 * math.pi * 53051.65, math.pi * FS, 10807.1466


def _type3(wi):
    num = wi * WP1 * WP2 / WZ**2 * np.polymul([1, WZ], [1, WZ])
    den = np.polymul([1, 0], np.polymul([1, WP1], [1, WP2]))
    return num, den


def test_lg2_combination_formula():
    """METHODS LG-2: T = 2 at -120 deg, Zs/Zl = 0.3."""
    t_true = 2 * np.exp(-1j * math.radians(120))
    ratio = 0.3
    tv = t_true * (1 + ratio) + ratio
    ti = t_true * (1 + 1 / ratio) + 1 / ratio
    assert tv == pytest.approx(-1 - 2.251666j, abs=1e-6)
    assert ti == pytest.approx(-1 - 7.505553j, abs=1e-6)
    assert middlebrook_combination(tv, ti) == pytest.approx(-1 - 1.732051j, abs=1e-6)


def test_lg1_injection_on_the_averaged_loop():
    """METHODS LG-1: plant 1 with the zeros-at-f0 type III, T = Gc P."""
    num_p = [VG / VM * RC * C, VG / VM]
    den_p = [L * C * (R + RC) / R, RC * C + L / R, 1.0]
    plant = scipy.signal.tf2ss(num_p, den_p)
    comp = scipy.signal.tf2ss(*_type3(WI))
    t = measure_linear_loop_gain(plant, comp, [2e3, 25e3, 60e3])
    expected = [(25.31826, -39.1985), (0.99999, -115.3431), (0.37172, -121.5295)]
    for got, (mag, ph) in zip(t, expected, strict=True):
        assert abs(got) == pytest.approx(mag, rel=5e-3)
        assert math.degrees(np.angle(got)) == pytest.approx(ph, abs=0.1)


def test_switching_loop_gain_matches_averaged_model_analog():
    """Scenario A buck with the plant-1 type III (wI / H for the contract's T = Gc Fm Gvd H)."""
    ctl = AnalogController.from_transfer_function(
        *_type3(WI / 0.1), modulator_gain=1 / VM, sense_gain=0.1, v_ref=1.2
    )
    p = PowerStageParameters(L, C, 1 / R, r_esr=RC)
    f = np.logspace(math.log10(2e3), math.log10(45e3), 8)
    m = loop_gain_by_injection("buck", p, ctl, v_in=VG, f_sw=FS, f_hz=f)
    assert np.all(m.f_hz < FS / 5)
    assert np.all(np.abs(m.f_hz / f - 1) <= 0.02)
    assert np.all(np.abs(m.measured_mag_db - m.model_mag_db) < 1.5)
    dphase = (m.measured_phase_deg - m.model_phase_deg + 180) % 360 - 180
    assert np.all(np.abs(dphase) < 8.0)
    d = m.to_dict()
    assert set(d) >= {"f_hz", "measured_mag_db", "measured_phase_deg", "model_mag_db",
                      "model_phase_deg"}  # fmt: skip


def test_switching_loop_gain_matches_model_digital():
    """Digital loop (Tustin of 0.4 x the type III, 1.5-sample delay): measured against the
    model ``Gc(z) Gvd H e^{-1.5 s Ts}`` (METHODS 7.2 delay model, common practice)."""
    num, den = _type3(WI / 0.1)
    b, a, _ = scipy.signal.cont2discrete((0.4 * num / VM, den), 1 / FS, method="bilinear")
    ctl = DigitalController(np.ravel(b), np.ravel(a), sense_gain=0.1, v_ref=1.2)
    p = PowerStageParameters(L, C, 1 / R, r_esr=RC)
    m = loop_gain_by_injection("buck", p, ctl, v_in=VG, f_sw=FS, f_hz=[3e3, 10e3, 20e3])
    assert np.all(np.abs(m.measured_mag_db - m.model_mag_db) < 1.5)
    dphase = (m.measured_phase_deg - m.model_phase_deg + 180) % 360 - 180
    assert np.all(np.abs(dphase) < 8.0)
