"""Plant analysis over the corners of a design.

Expected values come from Erickson & Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
2001, Table 8.2 (ideal boost RHP zero ``D'^2 R/L``, ``w0 = D'/sqrt(LC)``; entries from memory)
and the ideal conversion ratios (common practice); the rest checks the wiring of the corners.
"""

from __future__ import annotations

import math
import warnings

import pytest

from loopwright.errors import ModelValidityWarning
from loopwright.plant import analyze_corner, analyze_plant, describe_corner
from loopwright.spec import corners, parse_design

BOOST = """\
name = "plant-boost"
[power_stage]
topology = "boost"
fsw = "200 kHz"
vin = "12 V"
vin_range = ["10 V", "14 V"]
vout = "24 V"
iout = "2 A"
iout_range = ["1 A", "2 A"]
[power_stage.inductor]
value = "22 uH"
tolerance = "20 %"
[power_stage.capacitor]
value = "220 uF"
[modulator]
ramp = "1 V"
[feedback]
vref = "1.2 V"
[target]
crossover = "auto"
phase_margin = "55 deg"
"""


@pytest.fixture(scope="module")
def boost_analysis():
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # an all-CCM synchronous stage raises no warning
        return analyze_plant(parse_design(BOOST))


def test_nominal_then_every_corner(boost_analysis):
    a = boost_analysis
    names = [c.name for c in corners(a.spec)]
    assert a.nominal.corner.name == "nominal" == names[0]
    assert [cp.corner.name for cp in a.corners] == names[1:]
    assert len(a.corners) == 2 * 2 * 2  # line x load x L extremes
    assert all(cp.valid for cp in (a.nominal, *a.corners))
    assert a.warnings == []


def test_each_corner_follows_table_8_2(boost_analysis):
    """Ideal boost at each corner: D = 1 - Vg/V, RHP zero D'^2 R/L, f0 = D'/(2 pi sqrt(LC))."""
    for cp in (boost_analysis.nominal, *boost_analysis.corners):
        c = cp.corner
        dp = c.v_in / 24.0
        r = 24.0 / c.i_out
        L = 22e-6 * c.l_scale
        C = 220e-6 * c.c_scale
        f = cp.model.features()
        assert cp.op.duty == pytest.approx(1 - dp, rel=1e-9)
        assert cp.op.v_out == pytest.approx(24.0, rel=1e-9)
        assert f.rhp_zero_hz == pytest.approx(dp**2 * r / L / (2 * math.pi), rel=1e-9)
        assert f.f0_hz == pytest.approx(dp / math.sqrt(L * C) / (2 * math.pi), rel=1e-9)


def test_lowest_rhp_zero_is_low_line_full_load_large_inductor(boost_analysis):
    # D'^2 R/L is smallest at the lowest line, the heaviest load and the largest inductance
    expected = (10.0 / 24.0) ** 2 * (24.0 / 2.0) / (22e-6 * 1.2) / (2 * math.pi)
    assert boost_analysis.lowest_rhp_zero_hz() == pytest.approx(expected, rel=1e-9)


def test_to_dict_wiring(boost_analysis):
    d = boost_analysis.to_dict()
    assert d["topology"] == "boost" and d["name"] == "plant-boost"
    assert d["operating_point"]["duty"] == pytest.approx(0.5, rel=1e-9)
    assert len(d["corners"]) == 8
    c0 = d["corners"][0]
    assert c0["name"] == boost_analysis.corners[0].corner.name
    assert set(c0["transfer_functions"]) == {
        "control_to_output",
        "line_to_output",
        "output_impedance",
    }


def test_high_duty_corner_carries_a_note():
    text = BOOST.replace('vout = "24 V"', 'vout = "150 V"').replace(
        'vref = "1.2 V"', 'vref = "2 V"'
    )
    with pytest.warns(ModelValidityWarning, match="above 0.9"):
        a = analyze_plant(parse_design(text))
    # ideal boost: D = 1 - 10/150 = 0.933 at low line
    low = [cp for cp in a.corners if cp.corner.v_in == 10.0]
    assert all(cp.op.duty == pytest.approx(1 - 10 / 150, rel=1e-9) for cp in low)
    assert all(any("above 0.9" in w for w in cp.warnings) for cp in low)
    assert any("above 0.9" in w for w in a.warnings)


def test_describe_corner():
    spec = parse_design(BOOST)
    cp = analyze_corner(spec, corners(spec)[0])
    text = describe_corner(cp)
    assert text.startswith("nominal: D = 0.5000")
    assert "24 V" in text and "CCM" in text and "100.0 %" in text


def test_inverting_output_reported_negative():
    text = BOOST.replace('"boost"', '"buck-boost"').replace('vout = "24 V"', 'vout = "-24 V"')
    a = analyze_plant(parse_design(text))
    assert a.nominal.op.v_out == pytest.approx(-24.0, rel=1e-9)
    # ideal inverting buck-boost: D = |V|/(|V| + Vg), Gvd(0) = -Vg/D'^2
    d = 24.0 / 36.0
    assert a.nominal.op.duty == pytest.approx(d, rel=1e-9)
    assert a.nominal.model.features().dc_gain == pytest.approx(-12.0 / (1 - d) ** 2, rel=1e-9)
