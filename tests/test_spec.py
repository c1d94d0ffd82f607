"""Design files: schema validation, bad-input messages and the corners to prove.

Expected values are the design-file contract (units, defaults, one error per problem naming the
key) and Ohm's law for the load given as a resistance (common practice).
"""

from __future__ import annotations

import itertools
import math

import pytest

from _designs import minimal_buck
from loopwright.errors import DesignError
from loopwright.spec import corners, load_design, parse_design

BASE = minimal_buck("unit-buck")

FULL = """\
name = "trail-lamp-buck"

[power_stage]
topology = "buck"
fsw = "250 kHz"
vin = "36 V"
vin_range = ["30 V", "42 V"]
vout = "12 V"
iout = "3 A"
iout_range = ["0.3 A", "3 A"]

[power_stage.inductor]
value = "22 uH"
dcr = "15 mohm"
tolerance = "20 %"

[power_stage.capacitor]
value = "100 uF"
esr = "10 mohm"
tolerance = "10 %"

[power_stage.switch]
rds_on = "20 mohm"

[power_stage.rectifier]
kind = "synchronous"
rds_on = "12 mohm"

[modulator]
ramp = "1.5 V"

[feedback]
vref = "1.2 V"

[target]
crossover = "20 kHz"
phase_margin = "55 deg"
gain_margin = "10 dB"
compensator = "type3"

[realization]
kind = "op-amp"
series = "E96"
r1 = "10 kohm"

[digital]
sample_rate = "250 kHz"
delay = "1.5"
method = "tustin"
format = "q15"
"""


def edit(text: str, old: str, new: str) -> str:
    assert old in text, old
    return text.replace(old, new, 1)


def bad(text: str, key: str, fragment: str = "") -> DesignError:
    with pytest.raises(DesignError) as info:
        parse_design(text)
    msg = str(info.value)
    assert key in msg, msg
    assert fragment in msg, msg
    return info.value


# ----------------------------------------------------------------------------- values
def test_minimal_file_defaults():
    spec = parse_design(BASE)
    ps = spec.power_stage
    assert spec.name == "unit-buck"
    assert (ps.topology, ps.rectifier) == ("buck", "synchronous")
    assert ps.f_sw == 250e3 and ps.v_in == 36.0 and ps.v_out == 12.0 and ps.i_out == 3.0
    assert ps.v_in_range == (36.0, 36.0) and ps.i_out_range == (3.0, 3.0)
    assert ps.inductance == pytest.approx(22e-6) and ps.c_out == pytest.approx(100e-6)
    assert (ps.r_dcr, ps.r_esr, ps.r_on, ps.r_rect, ps.v_f) == (0, 0, 0, 0, 0)
    assert (ps.l_tolerance, ps.c_tolerance) == (0, 0)
    assert spec.target.crossover_hz is None
    assert spec.target.phase_margin_deg == 55.0
    assert spec.realization is None and spec.digital is None


def test_full_contract_file():
    spec = parse_design(FULL)
    ps = spec.power_stage
    assert ps.v_in_range == (30.0, 42.0)
    assert ps.i_out_range == pytest.approx((0.3, 3.0))
    assert ps.r_dcr == pytest.approx(15e-3) and ps.r_esr == pytest.approx(10e-3)
    assert ps.l_tolerance == pytest.approx(0.2) and ps.c_tolerance == pytest.approx(0.1)
    assert ps.r_on == pytest.approx(20e-3) and ps.r_rect == pytest.approx(12e-3)
    # Fm = 1/ramp and H = vref/|vout|, as the contract defines them
    assert spec.modulator_gain == pytest.approx(1 / 1.5)
    assert spec.sense_gain == pytest.approx(0.1)
    assert spec.target.crossover_hz == 20e3
    assert spec.target.gain_margin_db == 10.0
    assert spec.target.compensator == "type3"
    assert spec.realization.kind == "op-amp" and spec.realization.r1 == pytest.approx(10e3)
    d = spec.digital
    assert (d.sample_rate_hz, d.delay_samples, d.method, d.number_format) == (
        250e3,
        1.5,
        "tustin",
        "q15",
    )


def test_plain_si_numbers_accepted():
    text = edit(BASE, 'value = "22 uH"', "value = 22e-6")
    text = edit(text, 'fsw = "250 kHz"', "fsw = 250000")
    ps = parse_design(text).power_stage
    assert ps.inductance == 22e-6 and ps.f_sw == 250e3


def test_rload_instead_of_iout():
    # Ohm's law (common practice): 12 V across 4 ohm draws 3 A
    text = edit(BASE, 'iout = "3 A"', 'rload = "4 ohm"')
    assert parse_design(text).power_stage.i_out == pytest.approx(3.0)


def test_inverting_output_may_carry_its_sign():
    text = edit(BASE, '"buck"', '"buck-boost"')
    for vout in ('"-12 V"', '"12 V"', '"-48 V"'):
        ps = parse_design(edit(text, '"12 V"', vout)).power_stage
        assert ps.v_out == pytest.approx(abs(float(vout.strip('"').split()[0])))


def test_diode_rectifier():
    text = BASE + ""
    text = edit(
        text,
        "[modulator]",
        '[power_stage.rectifier]\nkind = "diode"\nvf = "0.45 V"\nrd = "20 mohm"\n\n[modulator]',
    )
    ps = parse_design(text).power_stage
    assert (ps.rectifier, ps.v_f, ps.r_rect) == ("diode", pytest.approx(0.45), pytest.approx(0.02))


def test_load_design_names_from_file(tmp_path):
    f = tmp_path / "my-stage.toml"
    f.write_text(BASE.replace('name = "unit-buck"\n', ""), encoding="utf-8")
    spec = load_design(f)
    assert spec.name == "my-stage"
    assert spec.source_path == str(f)


# ----------------------------------------------------------------------------- errors
@pytest.mark.parametrize(
    ("old", "new", "key", "fragment"),
    [
        ('value = "22 uH"', 'value = "22 uF"', "power_stage.inductor.value", "expected H"),
        ('value = "22 uH"', 'value = "22 uH"\ndcrr = "1 mohm"', "inductor.dcrr", "unknown key"),
        ('value = "22 uH"', 'valeu = "22 uH"', "power_stage.inductor.value", "missing"),
        ('vin = "36 V"\n', "", "power_stage.vin", "missing"),
        ('value = "22 uH"', 'value = "0 uH"', "power_stage.inductor.value", "> 0"),
        ('value = "22 uH"', 'value = "-1 uH"', "power_stage.inductor.value", "> 0"),
        ('value = "100 uF"', 'value = "0 F"', "power_stage.capacitor.value", "> 0"),
        ('fsw = "250 kHz"', 'fsw = "0 Hz"', "power_stage.fsw", "> 0"),
        ('fsw = "250 kHz"', 'fsw = "-250 kHz"', "power_stage.fsw", "> 0"),
        ('value = "22 uH"', 'value = "nan uH"', "power_stage.inductor.value", ""),
        ('value = "22 uH"', "value = nan", "power_stage.inductor.value", "finite"),
        ('value = "100 uF"', "value = inf", "power_stage.capacitor.value", "finite"),
        ('vin = "36 V"', "vin = -inf", "power_stage.vin", "finite"),
        ('vout = "12 V"', 'vout = "40 V"', "power_stage.vout", "steps down"),
        ('topology = "buck"', 'topology = "boost"', "power_stage.vout", "steps up"),
        ('topology = "buck"', 'topology = "cuk"', "power_stage.topology", "allowed"),
        ('topology = "buck"', "topology = 3", "power_stage.topology", "string"),
        ('iout = "3 A"', 'iout = "3 A"\nrload = "4 ohm"', "power_stage.iout", "exactly one"),
        ('iout = "3 A"\n', "", "power_stage.iout", "exactly one"),
        ('iout = "3 A"', 'iout = "0 A"', "power_stage.iout", "> 0"),
        ('ramp = "2.5 V"', 'ramp = "0 V"', "modulator.ramp", "> 0"),
        ('vref = "1.2 V"', 'vref = "12 V"', "feedback.vref", "below"),
        ('crossover = "auto"', 'crossover = "125 kHz"', "target.crossover", "fsw/2"),
        ('crossover = "auto"', 'crossover = "0 Hz"', "target.crossover", "auto"),
        ('phase_margin = "55 deg"', 'phase_margin = "150 deg"', "target.phase_margin", "120"),
        ('phase_margin = "55 deg"', 'phase_margin = "55 dB"', "target.phase_margin", "deg"),
        ('phase_margin = "55 deg"', "", "target.phase_margin", "missing"),
        ('name = "unit-buck"', 'name = "a/b"', "name", "folder"),
        ('name = "unit-buck"', 'name = "x"\nnmae = "y"', "nmae", "unknown key"),
        ("[modulator]", "[modulator]\nramp_pp = 1", "modulator.ramp_pp", "unknown key"),
        ("[feedback]", "[feedbak]", "feedback", "missing"),
        ('vin = "36 V"', 'vin = "36 V"\nvin_range = ["40 V", "30 V"]', "vin_range", "above"),
        ('vin = "36 V"', 'vin = "36 V"\nvin_range = ["38 V", "42 V"]', "vin_range", "outside"),
        ('vin = "36 V"', 'vin = "36 V"\nvin_range = ["30 V"]', "vin_range", "two values"),
        ('iout = "3 A"', 'iout = "3 A"\niout_range = ["-1 A", "3 A"]', "iout_range", ">= 0"),
        ('value = "22 uH"', 'value = "22 uH"\ntolerance = "100 %"', "inductor.tolerance", "100"),
        ('value = "100 uF"', 'value = "100 uF"\nesr = "-1 mohm"', "capacitor.esr", ">= 0"),
    ],
)
def test_bad_values_name_the_key(old, new, key, fragment):
    err = bad(edit(BASE, old, new), key, fragment)
    assert isinstance(err, ValueError)


def test_buck_boost_may_step_either_way():
    text = edit(BASE, '"buck"', '"buck-boost"')
    for vout in ('"5 V"', '"36 V"', '"100 V"'):
        assert parse_design(edit(text, '"12 V"', vout)).power_stage.v_out > 0


def test_line_range_decides_step_direction():
    # a buck must stay below the lowest line voltage, not only the nominal one
    text = edit(BASE, 'vin = "36 V"', 'vin = "36 V"\nvin_range = ["10 V", "40 V"]')
    bad(text, "power_stage.vout", "10 V")


def test_rectifier_keys_follow_the_kind():
    sync_vf = edit(
        BASE,
        "[modulator]",
        '[power_stage.rectifier]\nkind = "synchronous"\nvf = "0.4 V"\n\n[modulator]',
    )
    bad(sync_vf, "power_stage.rectifier.vf", "diode")
    diode_rds = edit(
        BASE,
        "[modulator]",
        '[power_stage.rectifier]\nkind = "diode"\nrds_on = "5 mohm"\n\n[modulator]',
    )
    bad(diode_rds, "power_stage.rectifier.rds_on", "synchronous")
    bad(
        edit(BASE, "[modulator]", '[power_stage.rectifier]\nkind = "schottky"\n\n[modulator]'),
        "power_stage.rectifier.kind",
    )


def test_digital_table_checks():
    bad(edit(FULL, 'delay = "1.5"', 'delay = "20"'), "digital.delay", "samples")
    bad(edit(FULL, 'method = "tustin"', 'method = "euler"'), "digital.method")
    bad(edit(FULL, 'format = "q15"', 'format = "q7"'), "digital.format")
    bad(edit(FULL, 'format = "q15"', 'format = "q15"\nbits = 12'), "digital.bits", "unknown key")


def test_not_toml():
    bad("this is = = not toml", "design file", "TOML")


@pytest.mark.parametrize(
    ("content", "fragment"),
    [(b"", "empty"), (b"  \n\t\n", "empty"), (b"\xff\xfe\x00bad", "UTF-8"), (b"[[[", "TOML")],
)
def test_load_design_file_problems(tmp_path, content, fragment):
    f = tmp_path / "d.toml"
    f.write_bytes(content)
    with pytest.raises(DesignError, match=fragment) as info:
        load_design(f)
    assert str(f) in str(info.value)


def test_load_design_missing_and_directory(tmp_path):
    with pytest.raises(DesignError, match="no such file") as info:
        load_design(tmp_path / "absent.toml")
    assert "absent.toml" in str(info.value)
    with pytest.raises(DesignError, match="directory"):
        load_design(tmp_path)


# ----------------------------------------------------------------------------- corners
def test_corners_nominal_first_then_cartesian_product():
    spec = parse_design(FULL)
    cs = corners(spec)
    assert cs[0].name == "nominal"
    assert (cs[0].v_in, cs[0].i_out, cs[0].l_scale, cs[0].c_scale) == (36.0, 3.0, 1.0, 1.0)
    rest = cs[1:]
    # line x load x L x C extremes: 2 x 2 x 2 x 2
    assert len(rest) == 16
    expected = set(itertools.product((30.0, 42.0), (0.3, 3.0), (0.8, 1.2), (0.9, 1.1)))
    got = {(c.v_in, round(c.i_out, 12), round(c.l_scale, 12), round(c.c_scale, 12)) for c in rest}
    assert got == {(a, round(b, 12), round(c, 12), round(d, 12)) for a, b, c, d in expected}
    names = [c.name for c in cs]
    assert len(set(names)) == len(names)
    assert "vin 30 V, iout 300 mA, L -20 %, C +10 %" in names
    assert "vin 42 V, iout 3 A, L +20 %, C -10 %" in names


def test_corners_without_ranges_is_nominal_only():
    assert [c.name for c in corners(parse_design(BASE))] == ["nominal"]


def test_corners_tolerance_only():
    text = edit(BASE, 'value = "22 uH"', 'value = "22 uH"\ntolerance = "30 %"')
    cs = corners(parse_design(text))
    assert cs[0].name == "nominal"
    assert [c.l_scale for c in cs[1:]] == pytest.approx([0.7, 1.3])
    assert all(c.c_scale == 1.0 for c in cs)
    assert all("L " in c.name and "C " not in c.name for c in cs[1:])


def test_corner_parameters_scale_components_and_load():
    spec = parse_design(FULL)
    ps = spec.power_stage
    c = corners(spec)[1]
    p = ps.parameters(i_out=c.i_out, l_scale=c.l_scale, c_scale=c.c_scale)
    assert p.inductance == pytest.approx(ps.inductance * c.l_scale)
    assert p.c_out == pytest.approx(ps.c_out * c.c_scale)
    # Ohm's law: R = V/I
    assert p.r_load == pytest.approx(ps.v_out / c.i_out)
    assert math.isinf(ps.parameters(i_out=0.0).r_load)
