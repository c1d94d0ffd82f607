"""`loopwright plant` and `loopwright new` from the command line.

Bad input must end with exit code 2 and one message naming the key or the file, never a
traceback (the CLI contract). The JSON output carries the contract fields; pole, zero and gain
values are checked against Erickson & Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
2001, Table 8.2 (ideal boost and inverting buck-boost; entries from memory, buck-boost
``Gd0 = V/(D D')``, the derived value).
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import pytest

from _designs import minimal_buck
from loopwright.cli import main

EXAMPLES = sorted((Path(__file__).resolve().parents[1] / "examples").glob("*.toml"))

BASE = minimal_buck("cli-buck")


def run(capsys, *argv):
    rc = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return rc, out, err


def write(tmp_path, text, name="design.toml"):
    f = tmp_path / name
    f.write_text(text, encoding="utf-8")
    return f


def edit(old, new, text=BASE):
    assert old in text, old
    return text.replace(old, new, 1)


# ----------------------------------------------------------------------------- bad input battery
BATTERY = [
    ("wrong unit", edit('value = "22 uH"', 'value = "22 uF"'), "power_stage.inductor.value"),
    ("unknown key", edit('value = "22 uH"', 'value = "22 uH"\ndcrr = "5 mohm"'), "dcrr"),
    ("unknown table key", edit("[modulator]", "[modulator]\nramp_v = 1"), "modulator.ramp_v"),
    ("missing key", edit('vin = "36 V"\n', ""), "power_stage.vin"),
    ("L zero", edit('value = "22 uH"', 'value = "0 uH"'), "power_stage.inductor.value"),
    ("L negative", edit('value = "22 uH"', 'value = "-22 uH"'), "power_stage.inductor.value"),
    ("C zero", edit('value = "100 uF"', 'value = "0 uF"'), "power_stage.capacitor.value"),
    ("C negative", edit('value = "100 uF"', "value = -1e-4"), "power_stage.capacitor.value"),
    ("fsw zero", edit('fsw = "250 kHz"', 'fsw = "0 kHz"'), "power_stage.fsw"),
    ("fsw negative", edit('fsw = "250 kHz"', "fsw = -250000"), "power_stage.fsw"),
    ("nan string", edit('value = "22 uH"', 'value = "nan uH"'), "power_stage.inductor.value"),
    ("inf string", edit('value = "100 uF"', 'value = "inf uF"'), "power_stage.capacitor.value"),
    ("toml nan", edit('value = "22 uH"', "value = nan"), "power_stage.inductor.value"),
    ("toml inf", edit('fsw = "250 kHz"', "fsw = inf"), "power_stage.fsw"),
    ("toml -inf", edit('vin = "36 V"', "vin = -inf"), "power_stage.vin"),
    ("overflow", edit('iout = "3 A"', 'iout = "1e999 A"'), "power_stage.iout"),
    ("buck steps up", edit('vout = "12 V"', 'vout = "48 V"'), "power_stage.vout"),
    ("boost steps down", edit('topology = "buck"', 'topology = "boost"'), "power_stage.vout"),
    ("unknown topology", edit('topology = "buck"', 'topology = "flyback"'), "power_stage.topology"),
    ("vref above vout", edit('vref = "1.2 V"', 'vref = "15 V"'), "feedback.vref"),
    ("not toml", "this is not = = toml\n", "design.toml"),
    ("toml but not a design", 'title = "x"\n', "power_stage"),
]


@pytest.mark.parametrize(("case", "text", "key"), BATTERY, ids=[b[0] for b in BATTERY])
def test_bad_design_exits_2_naming_the_key(tmp_path, capsys, case, text, key):
    f = write(tmp_path, text)
    for extra in ([], ["--json"]):
        rc, out, err = run(capsys, "plant", f, *extra)
        assert rc == 2, case
        assert key in err
        assert err.startswith("loopwright: error:")
        assert len(err.strip().splitlines()) == 1
        assert "Traceback" not in err + out
        assert out == ""


def test_subnormal_esr_is_no_traceback(tmp_path, capsys):
    f = write(tmp_path, edit('value = "100 uF"', 'value = "100 uF"\nesr = 1e-323'))
    rc, out, err = run(capsys, "plant", f)
    assert rc in (0, 2)
    assert "Traceback" not in out + err


def test_missing_file(tmp_path, capsys):
    rc, out, err = run(capsys, "plant", tmp_path / "nowhere.toml")
    assert rc == 2 and "nowhere.toml" in err and "no such file" in err
    assert "Traceback" not in out + err


def test_directory(tmp_path, capsys):
    rc, out, err = run(capsys, "plant", tmp_path)
    assert rc == 2 and str(tmp_path) in err and "directory" in err
    assert "Traceback" not in out + err


@pytest.mark.parametrize(
    ("content", "fragment"),
    [(b"", "empty"), (b"\n\n  \n", "empty"), (b"\x80\x81\xfe\xff name", "UTF-8")],
    ids=["empty", "blank", "non-utf8"],
)
def test_unreadable_files(tmp_path, capsys, content, fragment):
    f = tmp_path / "odd.toml"
    f.write_bytes(content)
    rc, out, err = run(capsys, "plant", f)
    assert rc == 2 and "odd.toml" in err and fragment in err
    assert "Traceback" not in out + err


def test_usage_errors_exit_2(capsys):
    for argv in (["plant"], ["frobnicate"], ["new", "cuk"], []):
        with pytest.raises(SystemExit) as info:
            main(argv)
        assert info.value.code == 2
        err = capsys.readouterr().err
        assert "usage" in err and "Traceback" not in err


def test_bad_input_through_a_real_process(tmp_path):
    """Once through a fresh interpreter: exit code 2, the key named, no traceback."""
    f = write(tmp_path, edit('value = "22 uH"', 'value = "22 uF"'))
    proc = subprocess.run(
        [sys.executable, "-m", "loopwright.cli", "plant", str(f)],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert proc.returncode == 2
    assert "power_stage.inductor.value" in proc.stderr
    assert "Traceback" not in proc.stderr + proc.stdout


# ----------------------------------------------------------------------------- new
@pytest.mark.parametrize("topology", ["buck", "boost", "buck-boost"])
def test_new_starter_parses_and_runs(tmp_path, capsys, topology):
    f = tmp_path / f"{topology}.toml"
    rc, out, err = run(capsys, "new", topology, "-o", f)
    assert rc == 0 and f.exists() and str(f) in out
    rc, out, err = run(capsys, "plant", f)
    assert rc == 0, err
    assert "nominal" in out and "Caution" in out
    rc, out, err = run(capsys, "plant", f, "--json")
    assert rc == 0
    assert json.loads(out)["topology"] == topology


def test_new_refuses_to_overwrite(tmp_path, capsys):
    f = tmp_path / "mine.toml"
    f.write_text("# my own notes\n", encoding="utf-8")
    rc, out, err = run(capsys, "new", "boost", "-o", f)
    assert rc == 2
    assert "mine.toml" in err and "--force" in err
    assert f.read_text(encoding="utf-8") == "# my own notes\n"
    assert "Traceback" not in out + err
    rc, out, err = run(capsys, "new", "boost", "-o", f, "--force")
    assert rc == 0
    assert 'topology = "boost"' in f.read_text(encoding="utf-8")
    assert [p.name for p in tmp_path.iterdir()] == ["mine.toml"]  # no temporary left behind


# ----------------------------------------------------------------------------- JSON contract
OP_KEYS = {"duty", "vout", "iout", "il_avg", "efficiency", "mode"}
TF_NAMES = {"control_to_output", "line_to_output", "output_impedance"}
TF_KEYS = {"dc_gain", "poles_hz", "zeros_hz", "f0_hz", "q", "rhp_zero_hz", "esr_zero_hz"}
CORNER_KEYS = {"name", "vin", "iout", "operating_point", "transfer_functions"}


def check_roots(roots):
    assert isinstance(roots, list)
    for r in roots:
        assert isinstance(r, list) and len(r) == 2
        assert all(isinstance(x, float) and math.isfinite(x) for x in r)


def check_tfs(tfs):
    assert set(tfs) == TF_NAMES
    for tf in tfs.values():
        assert TF_KEYS <= set(tf)
        check_roots(tf["poles_hz"])
        check_roots(tf["zeros_hz"])
        assert isinstance(tf["dc_gain"], float)
        if tf["rhp_zero_hz"] is not None:
            assert tf["rhp_zero_hz"] > 0
            assert any(abs(z[0] - tf["rhp_zero_hz"]) < 1e-9 * tf["rhp_zero_hz"] and z[0] > 0
                       for z in tf["zeros_hz"])  # fmt: skip
        # a stable averaged power stage: every pole in the left half plane
        assert all(p[0] < 0 for p in tf["poles_hz"])


def check_contract(d):
    assert {"topology", "operating_point", "transfer_functions", "corners"} <= set(d)
    assert OP_KEYS <= set(d["operating_point"])
    assert d["operating_point"]["mode"] in ("ccm", "dcm")
    if d["transfer_functions"] is not None:
        check_tfs(d["transfer_functions"])
    assert isinstance(d["corners"], list)
    for c in d["corners"]:
        assert CORNER_KEYS <= set(c)
        assert OP_KEYS <= set(c["operating_point"])
        if c["operating_point"]["mode"] == "ccm":
            check_tfs(c["transfer_functions"])
        else:
            assert c["transfer_functions"] is None


IDEAL_STEP_UP = """\
[power_stage]
topology = "{topo}"
fsw = "200 kHz"
vin = "12 V"
vout = "{vout}"
rload = "12 ohm"
[power_stage.inductor]
value = "47 uH"
[power_stage.capacitor]
value = "220 uF"
[modulator]
ramp = "1 V"
[feedback]
vref = "1 V"
[target]
crossover = "auto"
phase_margin = "50 deg"
"""


@pytest.mark.parametrize(("topo", "vout"), [("boost", "24 V"), ("buck-boost", "-24 V")])
def test_json_values_follow_table_8_2(tmp_path, capsys, topo, vout):
    f = write(tmp_path, IDEAL_STEP_UP.format(topo=topo, vout=vout))
    rc, out, _ = run(capsys, "plant", f, "--json")
    assert rc == 0
    d = json.loads(out)
    check_contract(d)
    vg, v, r, L, C = 12.0, 24.0, 12.0, 47e-6, 220e-6
    if topo == "boost":
        dd = 1 - vg / v
        gd0, wz, vo = v / (1 - dd), (1 - dd) ** 2 * r / L, v
    else:
        dd = v / (v + vg)
        gd0, wz, vo = -v / (dd * (1 - dd)), (1 - dd) ** 2 * r / (dd * L), -v
    dp = 1 - dd
    w0, q = dp / math.sqrt(L * C), dp * r * math.sqrt(C / L)
    op = d["operating_point"]
    assert op["duty"] == pytest.approx(dd, rel=1e-9)
    assert op["vout"] == pytest.approx(vo, rel=1e-9)
    assert op["iout"] == pytest.approx(v / r, rel=1e-9)
    assert op["efficiency"] == pytest.approx(1.0, rel=1e-9)
    gvd = d["transfer_functions"]["control_to_output"]
    assert gvd["dc_gain"] == pytest.approx(gd0, rel=1e-9)
    assert (gvd["dc_gain"] < 0) == (topo == "buck-boost")
    assert gvd["f0_hz"] == pytest.approx(w0 / (2 * math.pi), rel=1e-9)
    assert gvd["q"] == pytest.approx(q, rel=1e-9)
    assert gvd["rhp_zero_hz"] == pytest.approx(wz / (2 * math.pi), rel=1e-9)
    assert gvd["esr_zero_hz"] is None
    # poles of 1 + s/(Q w0) + (s/w0)^2, in Hz as [re, im]
    re = -w0 / (2 * q) / (2 * math.pi)
    im = w0 * math.sqrt(1 - 1 / (4 * q * q)) / (2 * math.pi)
    poles = sorted(gvd["poles_hz"], key=lambda p: p[1])
    assert poles[0] == pytest.approx([re, -im], rel=1e-9)
    assert poles[1] == pytest.approx([re, im], rel=1e-9)
    assert gvd["zeros_hz"] == [pytest.approx([wz / (2 * math.pi), 0.0], rel=1e-9, abs=1e-6)]
    assert d["corners"] == []  # no ranges, no tolerances: the nominal point only


def test_json_corners_and_dcm_corner(tmp_path, capsys):
    text = edit(
        'iout = "3 A"', 'iout = "3 A"\niout_range = ["0.3 A", "3 A"]\nvin_range = ["30 V", "40 V"]'
    )
    text = edit("[modulator]", '[power_stage.rectifier]\nkind = "diode"\n\n[modulator]', text)
    f = write(tmp_path, text)
    rc, out, err = run(capsys, "plant", f, "--json")
    assert rc == 0
    d = json.loads(out)
    check_contract(d)
    names = [c["name"] for c in d["corners"]]
    assert names == [
        "vin 30 V, iout 300 mA",
        "vin 30 V, iout 3 A",
        "vin 40 V, iout 300 mA",
        "vin 40 V, iout 3 A",
    ]
    modes = {c["name"]: c["operating_point"]["mode"] for c in d["corners"]}
    # K = 2 L fs/R = 0.275 at 40 ohm; Kcrit = 1 - D = 0.6 (30 V) and 0.7 (40 V): DCM
    # (Erickson & Maksimovic ch. 5); at 4 ohm K = 2.75: CCM
    assert modes == {names[0]: "dcm", names[1]: "ccm", names[2]: "dcm", names[3]: "ccm"}
    assert len(d["warnings"]) == 2 and all("discontinuous" in w for w in d["warnings"])
    assert err.count("warning:") == 2 and "Traceback" not in err
    # the text view says so as well
    rc, out, err = run(capsys, "plant", f)
    assert rc == 0 and "DCM" in out and "discontinuous" in err


@pytest.mark.parametrize("example", EXAMPLES, ids=[e.stem for e in EXAMPLES])
def test_examples_run(capsys, example):
    rc, out, err = run(capsys, "plant", example)
    assert rc == 0, err
    assert "nominal" in out and "Traceback" not in out + err
    rc, out, err = run(capsys, "plant", example, "--json")
    assert rc == 0, err
    d = json.loads(out)
    check_contract(d)
    assert d["name"] == example.stem
    assert d["warnings"] == []  # sensible designs: every corner continuous, duty below 0.9
    assert len(d["corners"]) == 16


def test_examples_are_sensible_for_loop_design():
    """Three invented designs, one per topology, each with a name, targets and a realization;
    a step-up stage's crossover sits well below its lowest RHP zero (common practice: below a
    third to a fifth of it)."""
    from loopwright.plant import analyze_plant
    from loopwright.spec import load_design

    assert len(EXAMPLES) == 3
    topologies = set()
    for ex in EXAMPLES:
        spec = load_design(ex)
        topologies.add(spec.power_stage.topology)
        assert spec.name == ex.stem
        assert spec.realization is not None
        fc = spec.target.crossover_hz
        assert fc is None or fc <= spec.power_stage.f_sw / 10
        fz = analyze_plant(spec).lowest_rhp_zero_hz()
        if fz is not None and fc is not None:
            assert fc <= fz / 5
    assert topologies == {"buck", "boost", "buck-boost"}
    assert any(load_design(ex).digital is not None for ex in EXAMPLES)


def test_console_script_runs_an_example():
    exe = Path(sys.executable).with_name("loopwright")
    if not exe.exists():
        pytest.skip("console script not installed next to this interpreter")
    proc = subprocess.run(
        [str(exe), "plant", str(EXAMPLES[0]), "--json"], capture_output=True, text=True, timeout=120
    )
    assert proc.returncode == 0, proc.stderr
    check_contract(json.loads(proc.stdout))
