"""CCM/DCM boundary and the DCM duty cycle (Erickson & Maksimovic ch. 5).

Source
------
R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed., Kluwer 2001,
chapter 5 ("The discontinuous conduction mode"), sections 5.1-5.3 and Table 5.2:
``K = 2 L/(R Ts)``; CCM when ``K > Kcrit(D)``, DCM when ``K < Kcrit(D)``.

| converter  | Kcrit(D)     | M in DCM                        | D for a given M (DCM) |
|------------|--------------|---------------------------------|-----------------------|
| buck       | 1 - D        | 2/(1 + sqrt(1 + 4K/D^2))        | M sqrt(K/(1 - M))     |
| boost      | D (1 - D)^2  | (1 + sqrt(1 + 4 D^2/K))/2       | sqrt(K M (M - 1))     |
| buck-boost | (1 - D)^2    | -D/sqrt(K)                      | abs(M) sqrt(K)        |

Status: the boost ``Kcrit``, the buck-boost ``Kcrit`` and ``M`` were confirmed; the buck row and
the buck and boost DCM conversion ratios are from memory.

Invented light-load scenarios (ideal parts): A-dcm buck 36 V -> 12 V, 250 kHz, L = 22 uH,
R = 40 ohm; B-dcm boost 12 V -> 24 V, 200 kHz, L = 47 uH, R = 240 ohm; C-dcm buck-boost
9 V -> -12 V, 300 kHz, L = 33 uH, R = 120 ohm. Expected values: the table evaluated in double
precision outside this package; tolerance relative 1e-6 or half a unit of the last printed digit.
"""

from __future__ import annotations

import math
import warnings

import pytest

from loopwright.averaging import analyze_stage
from loopwright.errors import ModelValidityWarning
from loopwright.plant import analyze_corner, analyze_plant
from loopwright.spec import corners, parse_design
from loopwright.topologies import TOPOLOGIES, PowerStageParameters

# name, topology, Vg, |V|, fs, L, C, R_dcm, full-load current, K, D, Kcrit
ROWS = [
    ("A-dcm", "buck", 36.0, 12.0, 250e3, 22e-6, 100e-6, 40.0, 3.0, 0.275000, 0.214087, 0.785913),
    ("B-dcm", "boost", 12.0, 24.0, 200e3, 47e-6, 220e-6, 240.0, 2.0, 0.078333, 0.395811, 0.144489),
    ("C-dcm", "buck-boost", 9.0, 12.0, 300e3, 33e-6, 150e-6, 120.0, 1.0, 0.165000, 0.541603,
     0.210128),
]  # fmt: skip
IDS = [r[0] for r in ROWS]


def k_crit_book(topology, d):
    return {"buck": 1 - d, "boost": d * (1 - d) ** 2, "buck-boost": (1 - d) ** 2}[topology]


def m_dcm_book(topology, d, k):
    if topology == "buck":
        return 2 / (1 + math.sqrt(1 + 4 * k / d**2))
    if topology == "boost":
        return (1 + math.sqrt(1 + 4 * d**2 / k)) / 2
    return -d / math.sqrt(k)


def close(got, printed):
    """Relative 1e-6, or half a unit of the sixth printed decimal."""
    return got == pytest.approx(printed, rel=1e-6, abs=0.5e-6)


@pytest.mark.parametrize("row", ROWS, ids=IDS)
def test_k_kcrit_and_dcm_duty(row):
    _, topo_name, vg, v, fs, L, C, r, _, k, d, kcrit = row
    topo = TOPOLOGIES[topo_name]
    k_got = 2 * L / (r / fs)
    assert close(k_got, k)
    m = v / vg
    d_got = topo.dcm_duty(m, k_got)
    assert close(d_got, d)
    assert close(topo.k_crit(d_got), kcrit)
    assert topo.k_crit(d_got) == pytest.approx(k_crit_book(topo_name, d_got), rel=1e-12)
    assert k_got < topo.k_crit(d_got)  # DCM
    # round trip through the DCM conversion ratio of the same table
    m_back = m_dcm_book(topo_name, d_got, k_got)
    assert abs(m_back) == pytest.approx(m, rel=1e-9)
    if topo.inverting:
        assert m_back < 0


@pytest.mark.parametrize("row", ROWS, ids=IDS)
def test_engine_reports_k_and_decides_dcm(row):
    _, topo_name, vg, v, fs, L, C, r, *_ = row
    k = row[9]
    p = PowerStageParameters(inductance=L, c_out=C, g_load=1 / r, rectifier="diode")
    m = analyze_stage(TOPOLOGIES[topo_name], p, v_in=vg, v_out=v, f_sw=fs)
    assert close(m.op.k, k)
    assert m.op.mode == "dcm"
    # at full load the same stage runs continuous
    p_full = PowerStageParameters(inductance=L, c_out=C, g_load=row[8] / v, rectifier="diode")
    assert analyze_stage(TOPOLOGIES[topo_name], p_full, v_in=vg, v_out=v, f_sw=fs).op.mode == "ccm"


@pytest.mark.parametrize("topo_name", ["buck", "boost", "buck-boost"])
@pytest.mark.parametrize("d", [0.2, 0.4, 0.6, 0.8])
def test_mode_flips_at_k_equal_kcrit(topo_name, d):
    """Ideal diode stage at a fixed duty: just above the critical load resistance
    ``R = 2 L fs / Kcrit(D)`` it is DCM, just below it CCM."""
    L, fs, C, vg = 20e-6, 200e3, 100e-6, 10.0
    r_crit = 2 * L * fs / k_crit_book(topo_name, d)
    for factor, mode in ((1.001, "dcm"), (0.999, "ccm")):
        p = PowerStageParameters(
            inductance=L, c_out=C, g_load=1 / (r_crit * factor), rectifier="diode"
        )
        m = analyze_stage(TOPOLOGIES[topo_name], p, v_in=vg, v_out=1.0, f_sw=fs, duty=d)
        assert m.op.mode == mode
        assert (m.op.k < m.op.k_crit) == (mode == "dcm")
        # a synchronous rectifier conducts both ways: never DCM
        ps = PowerStageParameters(inductance=L, c_out=C, g_load=1 / (r_crit * factor))
        assert (
            analyze_stage(TOPOLOGIES[topo_name], ps, v_in=vg, v_out=1.0, f_sw=fs, duty=d).op.mode
            == "ccm"
        )


def design_text(row, rectifier="diode"):
    _, topo_name, vg, v, fs, L, C, r, i_full, *_ = row
    sign = "-" if topo_name == "buck-boost" else ""
    return f"""
[power_stage]
topology = "{topo_name}"
fsw = {fs}
vin = {vg}
vout = "{sign}{v} V"
iout = {i_full}
iout_range = [{v / r}, {i_full}]
[power_stage.inductor]
value = {L}
[power_stage.capacitor]
value = {C}
[power_stage.rectifier]
kind = "{rectifier}"
[modulator]
ramp = "1 V"
[feedback]
vref = "1 V"
[target]
crossover = "auto"
phase_margin = "50 deg"
"""


@pytest.mark.parametrize("row", ROWS, ids=IDS)
def test_dcm_corner_is_reported_not_silently_ccm(row):
    spec = parse_design(design_text(row))
    cs = corners(spec)
    light = next(c for c in cs if c.i_out < row[8])
    with pytest.warns(ModelValidityWarning, match="discontinuous"):
        cp = analyze_corner(spec, light)
    assert cp.op.mode == "dcm"
    assert cp.model is None and not cp.valid
    assert any("discontinuous" in w for w in cp.warnings)
    assert close(cp.op.duty, row[10])
    assert close(cp.op.k, row[9])
    assert close(cp.op.k_crit, row[11])
    d = cp.to_dict()
    assert d["transfer_functions"] is None
    assert d["operating_point"]["mode"] == "dcm"
    assert d["operating_point"]["efficiency"] is None
    # the nominal (full-load) point is continuous and has its model
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        nominal = analyze_corner(spec, cs[0])
    assert nominal.op.mode == "ccm" and nominal.model is not None


@pytest.mark.parametrize("row", ROWS, ids=IDS)
def test_plant_analysis_warns_once_per_dcm_corner(row):
    spec = parse_design(design_text(row))
    with pytest.warns(ModelValidityWarning) as rec:
        analysis = analyze_plant(spec)
    dcm = [cp for cp in analysis.corners if cp.op.mode == "dcm"]
    assert len(dcm) == 1
    assert len([w for w in rec if issubclass(w.category, ModelValidityWarning)]) == 1
    assert dcm[0] not in analysis.valid_corners()
    # synchronous rectifier: the same light load stays continuous, no warning
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        sync = analyze_plant(parse_design(design_text(row, "synchronous")))
    assert all(cp.op.mode == "ccm" for cp in (sync.nominal, *sync.corners))
