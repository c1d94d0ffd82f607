"""K-factor synthesis and the classical compensator networks: checks KF-1 to KF-6.

Source: H. Dean Venable, "The K factor: a new mathematical tool for stability analysis and
synthesis", Proceedings of Powercon 10, San Diego, March 1983 -- from memory (the paper was
not re-read; METHODS sec. 13, key V83). The op-amp and OTA network transfer functions and the
component equations are those of METHODS sec. 4.2-4.4, re-derived there by circuit analysis
[derived]; the check values are the worked examples of METHODS sec. 4.5 (check table rows
KF-1 to KF-6).

Plants, built here from the textbook closed forms (an independent route):

* plant 1 (METHODS "Scenarios"): P(s) = (Vg/VM)(1 + s rC C)/(1 + s (rC C + L/R)
  + s^2 L C (R + rC)/R), Vg = 36 V, VM = 2.5 V, L = 22 uH, C = 100 uF, rC = 30 mohm, R = 4 ohm.
  It contains no divider H: the op-amp network realises it (H = 1 in loopwright's terms).
* plant 2: P2(s) = 5 (1 + s/wz)/(1 + s/wp), fp = 500 Hz, fz = 53.05 kHz.

Tolerances: as in the check table (rel 1e-5 for KF-1..3 and KF-5..6, rel 1e-6 for KF-4, PM
1e-6 deg for KF-1), widened to half a unit of the last printed digit where a value is printed
with fewer digits (the check table's own rule).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from loopwright.compensators import (
    Compensator,
    k_factor,
    k_factor_design,
    required_boost_deg,
    synthesize_k_factor,
)
from loopwright.margins import find_margins
from loopwright.realization import compensator_from_components, realize_opamp, realize_ota

VG, VM, L, C, RC, R = 36.0, 2.5, 22e-6, 100e-6, 30e-3, 4.0
R1 = 10e3


def plant_1(omega):
    s = 1j * np.asarray(omega, dtype=float)
    return (VG / VM) * (1 + s * RC * C) / (1 + s * (RC * C + L / R) + s**2 * L * C * (R + RC) / R)


def plant_2(omega):
    s = 1j * np.asarray(omega, dtype=float)
    return 5.0 * (1 + s / (2 * math.pi * 53.05e3)) / (1 + s / (2 * math.pi * 500.0))


def printed(text: str, rel: float):
    """Expected value printed as ``text``: tolerance max(rel, half a unit of the last digit)."""
    value = float(text)
    decimals = len(text.split(".")[1]) if "." in text else 0
    return pytest.approx(value, abs=max(rel * abs(value), 0.5 * 10.0**-decimals))


def network_response(parts: dict, omega: float) -> complex:
    """Zf/Zi of the inverting op-amp network from its impedances (circuit analysis)."""
    s = 1j * omega
    zf = 1 / (s * parts["C2"] + 1 / (parts["R2"] + 1 / (s * parts["C1"])))
    zi = parts["R1"]
    if "R3" in parts:
        zi = 1 / (1 / parts["R1"] + 1 / (parts["R3"] + 1 / (s * parts["C3"])))
    return zf / zi


# -- KF-1: plant 1, fc = 25 kHz, PM = 60 deg, type III, R1 = 10 kohm (Venable 1983, from memory)
FC1 = 25e3
WC1 = 2 * math.pi * FC1


def test_kf1_plant_and_k_factor():
    p = plant_1(WC1)
    assert abs(p) == printed("0.296403", 1e-5)
    assert math.degrees(np.angle(p)) == printed("-153.3438", 1e-5)
    design = k_factor_design(p, FC1, 60.0, "type3")
    assert design.boost_deg == printed("123.3438", 1e-5)
    assert design.k == printed("15.700732", 1e-5)
    assert math.sqrt(design.k) == printed("3.962415", 1e-5)
    assert design.gain == printed("3.373785", 1e-5)
    assert design.compensator.zeros_hz == pytest.approx([6309.284] * 2, rel=1e-5)
    assert design.compensator.poles_hz == pytest.approx([99060.374] * 2, rel=1e-5)


def test_kf1_opamp_components_and_exact_loop():
    comp = synthesize_k_factor(plant_1(WC1), FC1, 60.0, "type3")
    parts = realize_opamp(comp, R1, h=1.0).components
    assert parts["R2"] == printed("9093.65", 1e-5)
    assert parts["R3"] == printed("680.238", 1e-5)
    assert parts["C1"] * 1e9 == printed("2.77397", 1e-5)
    assert parts["C2"] * 1e12 == printed("188.696", 1e-5)
    assert parts["C3"] * 1e9 == printed("2.36189", 1e-5)
    # "check" row: Gc(j wc) P(j wc) evaluated with the computed parts, from the impedances
    t = network_response(parts, WC1) * plant_1(WC1)
    assert abs(t) == pytest.approx(1.0, abs=1e-9)
    assert 180.0 + math.degrees(np.angle(t)) == pytest.approx(60.0, abs=1e-6)
    # and with the margin finder on the exact response of the re-derived compensator
    rebuilt = compensator_from_components("type3", parts, 1.0)
    m = find_margins(lambda w: plant_1(w) * rebuilt.freqresp(w), 100.0, 1e6)
    assert m.crossover_hz == pytest.approx(FC1, rel=1e-9)
    assert m.phase_margin_deg == pytest.approx(60.0, abs=1e-6)


# -- KF-2 / KF-3: plant 2, fc = 20 kHz, PM = 60 deg, type II (Venable 1983, from memory) ------
FC2 = 20e3
WC2 = 2 * math.pi * FC2


def test_kf2_type2_opamp():
    p = plant_2(WC2)
    assert abs(p) == printed("0.133546", 1e-5)
    assert math.degrees(np.angle(p)) == printed("-67.9113", 1e-5)
    assert required_boost_deg(p, 60.0) == printed("37.9113", 1e-5)
    assert k_factor(required_boost_deg(p, 60.0), "type2") == printed("2.046283", 1e-5)
    comp = synthesize_k_factor(p, FC2, 60.0, "type2")
    assert comp.zeros_hz[0] == printed("9773.819", 1e-5)
    assert comp.poles_hz[0] == printed("40925.662", 1e-5)
    parts = realize_opamp(comp, R1, h=1.0).components
    assert parts["R2"] == printed("98373.8", 1e-5)
    assert parts["C1"] * 1e12 == printed("165.53", 1e-5)
    assert parts["C2"] * 1e12 == printed("51.9346", 1e-5)
    t = network_response(parts, WC2) * p
    assert abs(t) == pytest.approx(1.0, abs=1e-9)
    assert 180.0 + math.degrees(np.angle(t)) == pytest.approx(60.0, abs=1e-6)


def test_kf3_ota_type2_counts_divider_once():
    """OTA gm = 1 mS, H = 0.1: loopwright's Gc sits after the divider, so the plant seen by
    the synthesis is H P2; the OTA (H inside its gain) and the op-amp network (R1 = divider
    top, realising H Gc) then both give the published parts."""
    h = 0.1
    comp = synthesize_k_factor(h * plant_2(WC2), FC2, 60.0, "type2")
    ota = realize_ota(comp, 1e-3, h).components
    assert ota["R"] == printed("98373.8", 1e-5)
    assert ota["C1"] * 1e12 == printed("165.53", 1e-5)
    assert ota["C2"] * 1e12 == printed("51.9346", 1e-5)
    assert 1e-3 * h * ota["R"] == printed("9.83738", 1e-5)
    opamp = realize_opamp(comp, R1, h).components
    for name, ota_name in (("R2", "R"), ("C1", "C1"), ("C2", "C2")):
        assert opamp[name] == pytest.approx(ota[ota_name], rel=1e-12)
    # the OTA loop from vo: gm H Z(s) P2 has |T| = 1 and PM = 60 deg at fc
    s = 1j * WC2
    z = 1 / (s * ota["C2"] + 1 / (ota["R"] + 1 / (s * ota["C1"])))
    t = 1e-3 * h * z * plant_2(WC2)
    assert abs(t) == pytest.approx(1.0, abs=1e-9)
    assert 180.0 + math.degrees(np.angle(t)) == pytest.approx(60.0, abs=1e-6)


# -- KF-4: plant 2, type I (METHODS sec. 4.1) -------------------------------------------------
def test_kf4_type1():
    p = plant_2(WC2)
    design = k_factor_design(p, FC2, 20.0, "type1")
    assert design.compensator.w_i == printed("940973.8206", 1e-6)
    assert design.phase_margin_deg == printed("22.0887", 1e-6)
    parts = realize_opamp(design.compensator, R1, h=1.0).components
    assert parts["C1"] * 1e12 == printed("106.273", 1e-6)
    m = find_margins(lambda w: plant_2(w) * design.compensator.freqresp(w), 10.0, 1e7)
    assert m.phase_margin_deg == printed("22.0887", 1e-6)
    assert m.crossover_hz == pytest.approx(FC2, rel=1e-9)


# -- KF-5 / KF-6: general synthesis from poles, zeros and gain (METHODS sec. 4.4, derived) ----
def test_kf5_general_type3():
    two_pi = 2 * math.pi
    comp = Compensator(
        "type3",
        10807.1466,
        (two_pi * 3393.195, two_pi * 3393.195),
        (two_pi * 53051.65, two_pi * 125e3),
        strategy="resonance",
    )
    parts = realize_opamp(comp, R1, h=1.0).components
    assert parts["R2"] == printed("5415.37", 1e-5)
    assert parts["R3"] == printed("279.03", 1e-5)
    assert parts["C1"] * 1e9 == printed("8.6613", 1e-5)
    assert parts["C2"] * 1e12 == printed("591.833", 1e-5)
    assert parts["C3"] * 1e9 == printed("4.56309", 1e-5)
    for f, expected in ((1e3, "1.869006"), (25e3, "3.373784"), (100e3, "5.473181")):
        assert abs(network_response(parts, two_pi * f)) == printed(expected, 1e-5)
    # plateaus of sec. 4.5
    low = parts["R2"] * parts["C1"] / (R1 * (parts["C1"] + parts["C2"]))
    high = parts["R2"] * (R1 + parts["R3"]) / (R1 * parts["R3"])
    assert low == printed("0.506900", 1e-5)
    assert high == printed("19.94937", 1e-5)


def test_kf6_general_type2():
    two_pi = 2 * math.pi
    comp = Compensator("type2", two_pi * 1e3, (two_pi * 2e3,), (two_pi * 50e3,), "manual")
    parts = realize_opamp(comp, R1, h=1.0).components
    assert parts["R2"] == printed("5208.33", 1e-5)
    assert parts["C1"] * 1e9 == printed("15.2789", 1e-5)
    assert parts["C2"] * 1e12 == printed("636.62", 1e-5)
    assert abs(network_response(parts, two_pi * 10e3)) == printed("0.500000", 1e-5)
    assert comp.w_i / comp.zeros_rad[0] == pytest.approx(0.5, rel=1e-12)
