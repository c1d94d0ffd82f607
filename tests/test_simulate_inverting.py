"""Switching simulator: the inverting stage's sense sign, the crossing solver, the injection batch.

Outside references: the output polarity of the three stages (Erickson & Maksimovic 2nd ed.
ch. 2: the buck-boost inverts), ``numpy.roots`` for the cell-polynomial root, and the
independence of injection batch members (each member is its own circuit, so a frequency measured
alone equals the same frequency measured in a batch; the batch path itself is checked against
the scalar period in test_simulate.py).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from loopwright.design import design
from loopwright.simulate import (
    AnalogController,
    DigitalController,
    controller_for_design,
    loop_gain_by_injection,
)
from loopwright.simulate._circuit import Circuit, sense_sign
from loopwright.simulate._propagator import _root1, _root_in_cell
from loopwright.simulate.engine import _closed_loop_rho, _model_info, _topology
from loopwright.spec import load_design
from loopwright.topologies import TOPOLOGIES, PowerStageParameters

EXAMPLES = Path(__file__).parents[1] / "examples"
# METHODS scenario C, ideal stage (SSA-7): 9 V -> -12 V, R = 12 ohm, fs = 300 kHz
C_IDEAL = PowerStageParameters(33e-6, 150e-6, 1 / 12)
FS = 300e3
WZ, WP = 2 * math.pi * 450.0, 2 * math.pi * 40e3


def _type3_ctl(**kw) -> AnalogController:
    """Type III, double zero at 450 Hz (about half f0 = 969 Hz), double pole at 40 kHz."""
    wi = 1300.0
    num = wi * WP**2 / WZ**2 * np.polymul([1, WZ], [1, WZ])
    den = np.polymul([1, 0], np.polymul([1, WP], [1, WP]))
    return AnalogController.from_transfer_function(
        num, den, modulator_gain=1.0, sense_gain=0.1, v_ref=1.2, **kw
    )


def test_sense_sign_follows_the_output_polarity():
    """Only the buck-boost inverts (E&M ch. 2: M = -D/D'); its sensed quantity is -v_out."""
    assert {k: sense_sign(t) for k, t in TOPOLOGIES.items()} == {
        "buck": 1.0, "boost": 1.0, "buck-boost": -1.0
    }  # fmt: skip
    ctl = _type3_ctl()
    circ = Circuit(TOPOLOGIES["buck-boost"].build(C_IDEAL), FS, ctl)
    lay = circ.lay
    w = np.zeros(lay.size)
    w[lay.vc] = -12.0  # output -12 V, reference 1.2 V: sensed error 1.2 - 0.1 * 12 = 0
    w[lay.ref] = 1.2
    row = circ.mats[0][0, lay.z, :]  # z' = A z + B e: the error row times B
    assert np.allclose(row @ w, 0.0, atol=1e-9 * np.max(np.abs(row)))


def test_cell_root_matches_numpy_roots():
    """Safeguarded Newton on the cell polynomial against numpy.roots, including polynomials
    with an exactly representable root (where the iteration must stop, not bisect away)."""
    rng = np.random.default_rng(7)
    r_hi = 1e-7
    coefs, expect = [], []
    for i in range(40):
        root = r_hi * (0.5 if i % 4 == 0 else rng.uniform(0.05, 0.95))
        slope = -rng.uniform(0.5, 2.0)
        # p(r) = slope (r - root) (1 + a r + b r^2): one root in the cell, p(0) > 0
        a, b = rng.uniform(-1, 1) / r_hi, rng.uniform(-1, 1) / r_hi**2 * 0.1
        poly = slope * np.polymul([1.0, -root], [b, a, 1.0])  # highest power first
        c = poly[::-1].tolist() + [0.0] * 4  # ascending, padded like a Taylor row
        coefs.append(c)
        rts = np.roots(poly)
        real = rts[np.isreal(rts)].real
        expect.append(real[(real >= 0) & (real <= r_hi)][0])
    got = _root_in_cell(np.array(coefs), np.full(len(coefs), r_hi))
    np.testing.assert_allclose(got, expect, rtol=1e-12, atol=1e-12 * r_hi)
    for c, e in zip(coefs, expect, strict=True):
        assert _root1(c, r_hi) == pytest.approx(e, rel=1e-12, abs=1e-12 * r_hi)


@pytest.mark.parametrize("kind", ["analog", "digital"])
def test_injection_batch_members_are_independent(kind):
    """Members leave the batch when their window is done; a frequency measured alone gives the
    same loop gain as in the batch (inverting stage, analog and digital)."""
    if kind == "analog":
        ctl = _type3_ctl()
    else:
        import scipy.signal

        num = 1300.0 * WP**2 / WZ**2 * np.polymul([1, WZ], [1, WZ])
        den = np.polymul([1, 0], np.polymul([1, WP], [1, WP]))
        b, a, _ = scipy.signal.cont2discrete((0.5 * num, den), 1 / FS, method="bilinear")
        ctl = DigitalController(np.ravel(b), np.ravel(a), sense_gain=0.1, v_ref=1.2)
    f = [3e3, 25e3]
    kw = dict(v_in=9.0, f_sw=FS)
    batch = loop_gain_by_injection("buck-boost", C_IDEAL, ctl, f_hz=f, **kw)
    for i, fi in enumerate(f):
        one = loop_gain_by_injection("buck-boost", C_IDEAL, ctl, f_hz=[fi], **kw)
        assert one.f_hz[0] == batch.f_hz[i]
        assert one.measured[0] == pytest.approx(batch.measured[i], rel=1e-7)
    assert np.all(np.abs(batch.measured_mag_db - batch.model_mag_db) < 1.5)


def test_model_crossover_is_the_designed_one_for_a_loop_with_a_dip():
    """A type III with its zeros below f0 dips under 0 dB before the resonance; the crossover the
    simulator uses (soft start, default sweep) is the last downward crossing, the design's."""
    spec = load_design(EXAMPLES / "glacier-probe-inverter.toml")
    res = design(spec)
    ps = spec.power_stage
    ctl = controller_for_design(spec, res.digital)
    info = _model_info(
        _topology(ps.topology), ps.parameters(i_out=ps.i_out), ps.v_in, ps.f_sw, None, ctl
    )
    _, f_c = _closed_loop_rho(info.avg, ctl, 1 / ps.f_sw)
    assert f_c == pytest.approx(res.nominal.analysis.crossover_hz, rel=0.05)
