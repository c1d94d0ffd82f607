"""Closed-loop figures of a voltage-mode buck loop (output impedance, reference and load step).

Source: R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed., Kluwer,
2001, ch. 9 (closed-loop output impedance ``Zout/(1 + T)``, reference-to-output ``T/(1 + T)``);
the worked check values are METHODS rows CL-1, CL-2 and CL-3 (scenario A: 36 V -> 12 V buck,
L = 22 uH, C = 100 uF, rC = 30 mohm, R = 4 ohm, ramp 2.5 V, type III with zeros at the LC
double pole, poles at the ESR zero and fs/2, w_i = 10807.1466 rad/s). The load-step estimate
``dI/(2 pi fc C)`` is common practice (CL-3). Grid-dependent rows carry METHODS' looser
tolerances (0.1 % on frequencies, 1e-4 relative on impedances, 0.1 % on the step figures).

The plant is produced by loopwright's own averaging engine (ideal switches, ESR), the
compensator by its Compensator class, and the step figures by its closed_loop module; the
expectations come from the closed-form loop.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from loopwright.averaging import analyze_stage
from loopwright.closed_loop import disturbance_step, reference_step
from loopwright.compensators import Compensator
from loopwright.topologies import TOPOLOGIES, PowerStageParameters

VG, VM, L, C, RC, R, FS = 36.0, 2.5, 22e-6, 100e-6, 0.030, 4.0, 250e3


@pytest.fixture(scope="module")
def loop():
    params = PowerStageParameters(inductance=L, c_out=C, g_load=1 / R, r_esr=RC)
    stage = analyze_stage(TOPOLOGIES["buck"], params, v_in=VG, v_out=12.0, f_sw=FS, duty=1 / 3)
    f0 = 1 / (2 * math.pi * math.sqrt(L * C))
    f_esr = 1 / (2 * math.pi * RC * C)
    w0 = 2 * math.pi * f0
    comp = Compensator("type3", 10807.1466, (w0, w0), (2 * math.pi * f_esr, math.pi * FS),
                       strategy="resonance")  # fmt: skip
    return stage, comp


def test_cl1_output_impedance(loop):
    """CL-1: open-loop |Zout| peak 2593.485 mohm at 3380.6 Hz; closed loop peak 73.691 mohm at
    14315.4 Hz; |Zcl(1 kHz)| = 5.0506 mohm (Erickson & Maksimovic ch. 9)."""
    stage, comp = loop
    f = np.geomspace(10, 316e3, 200001)
    zout = stage.freqresp("v_out", "i_load", f)
    t = comp.freqresp(2 * np.pi * f) * stage.freqresp("v_out", "d", f) / VM
    zcl = zout / (1 + t)
    i = int(np.argmax(np.abs(zout)))
    assert abs(zout[i]) == pytest.approx(2.593485, rel=1e-4)
    assert f[i] == pytest.approx(3380.6, rel=1e-3)
    j = int(np.argmax(np.abs(zcl)))
    assert abs(zcl[j]) == pytest.approx(0.073691, rel=1e-4)
    assert f[j] == pytest.approx(14315.4, rel=1e-3)
    k = int(np.argmin(np.abs(f - 1e3)))
    assert abs(zcl[k]) == pytest.approx(5.0506e-3, rel=1e-4)


def test_cl2_reference_step_overshoot(loop):
    """CL-2: the normalised reference step T/(1 + T) overshoots 14.677 % (tolerance 0.05 %),
    far above the 4.977 % second-order estimate (Peretz & Ben-Yaakov: compensator zeros in
    the closed loop)."""
    stage, comp = loop
    t_sys = comp.to_control() * stage.gvd() * (1 / VM)
    step = reference_step(t_sys, f_c_hz=25e3, t_end_s=400e-6, n_points=40001)
    assert 100 * step.overshoot == pytest.approx(14.677, abs=0.05)


def test_cl3_load_step(loop):
    """CL-3 (common practice estimate beside it): a 1 A load step gives a minimum deviation of
    -52.5673 mV at 6.73 us; the estimate dI/(2 pi fc C) = 63.662 mV is conservative."""
    stage, comp = loop
    k = comp.to_control() * (1 / VM)
    step = disturbance_step(stage.to_control(), k, "i_load", 1.0, f_c_hz=25e3, t_end_s=400e-6,
                            n_points=40001)  # fmt: skip
    assert step.peak_deviation == pytest.approx(-52.5673e-3, rel=1e-3)
    assert step.peak_time_s == pytest.approx(6.73e-6, abs=0.02e-6)
    estimate = 1.0 / (2 * math.pi * 25e3 * C)
    assert estimate == pytest.approx(63.662e-3, rel=1e-5)
    assert abs(step.peak_deviation) < estimate
