"""The export and simulate verbs through the CLI entry point (in-process).

Outside references: the averaged operating point of Middlebrook & Cuk (1976) for the
simulated output, the CONTRACT's JSON fields, and the PNG file signature (ISO/IEC 15948).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from loopwright.cli import main
from loopwright.plant import analyze_plant
from loopwright.spec import load_design

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
BUCK = EXAMPLES / "harbor-logger-buck.toml"
DIGITAL = EXAMPLES / "glacier-probe-inverter.toml"


def test_export_formats_and_no_clobber(tmp_path, capsys):
    out = tmp_path / "fw"
    assert main(["export", str(DIGITAL), "--format", "c", "-o", str(out)]) == 0
    names = sorted(p.name for p in out.iterdir())
    assert any(n.endswith(".h") for n in names) and any(n.endswith(".c") for n in names)
    header = next(out.glob("*.h")).read_text()
    assert "#include <stdint.h>" in header
    # refuses to overwrite without --force, exit 2, nothing half-written
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    assert main(["export", str(DIGITAL), "--format", "c", "-o", str(out)]) == 2
    assert "--force" in capsys.readouterr().err
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert main(["export", str(DIGITAL), "--format", "c", "-o", str(out), "--force"]) == 0
    # JSON per the contract
    assert main(["export", str(DIGITAL), "--format", "json", "-o", str(tmp_path / "j")]) == 0
    data = json.loads(next((tmp_path / "j").glob("*.json")).read_text())
    assert set(data) >= {"sample_rate_hz", "method", "prewarp_hz", "delay_samples", "b", "a"}
    assert data["a"][0] == 1
    assert set(data["fixed_point"]) >= {"format", "b_int", "a_int", "shift"}
    assert set(data["loop_z"]) >= {"crossover_hz", "phase_margin_deg", "gain_margin_db"}
    # b_int = round(b * 2^shift) (CONTRACT)
    shift = data["fixed_point"]["shift"]
    assert data["fixed_point"]["b_int"] == [round(b * 2**shift) for b in data["b"]]
    assert main(["export", str(DIGITAL), "--format", "csv", "-o", str(tmp_path / "c")]) == 0
    assert list((tmp_path / "c").glob("*.csv"))


def test_export_without_digital_table_is_bad_input(capsys):
    assert main(["export", str(BUCK), "--format", "c", "-o", "/nonexistent/x"]) == 2
    assert "digital" in capsys.readouterr().err


def test_simulate_json_matches_averaged_operating_point(capsys):
    """Middlebrook & Cuk (1976): the averaged model's DC output equals the period average of
    the switching waveform to within the ripple's second-order effect (0.5 %)."""
    assert main(["simulate", str(BUCK), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    for key in (
        "mode", "cycles", "steady", "vout_avg", "vout_ripple_pp", "il_avg", "il_ripple_pp",
        "duty_avg", "load_step",
    ):  # fmt: skip
        assert key in data
    assert data["steady"] is True
    spec = load_design(BUCK)
    op = analyze_plant(spec).nominal.op
    assert data["vout_avg"] == pytest.approx(spec.power_stage.v_out, rel=5e-3)
    assert data["il_avg"] == pytest.approx(op.i_l_avg, rel=5e-3)
    assert data["duty_avg"] == pytest.approx(op.duty, rel=5e-3)


def test_simulate_open_loop_and_load_step(capsys, tmp_path):
    spec = load_design(BUCK)
    op = analyze_plant(spec).nominal.op
    assert main(["simulate", str(BUCK), "--open-loop", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["duty_avg"] == pytest.approx(op.duty, rel=1e-9)
    assert data["vout_avg"] == pytest.approx(op.v_out, rel=5e-3)
    png = tmp_path / "wf.png"
    lo, hi = spec.power_stage.i_out_range
    assert main(["simulate", str(BUCK), "--load-step", str(lo), str(hi), "--json",
                 "--plot", str(png)]) == 0  # fmt: skip
    data = json.loads(capsys.readouterr().out)
    ls = data["load_step"]
    assert ls["from_a"] == pytest.approx(lo) and ls["to_a"] == pytest.approx(hi)
    # load increase: the output dips (deviation negative) and recovers
    assert ls["deviation_v"] < 0
    assert ls["settling_time_s"] > 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_simulate_bad_load_step_is_bad_input(capsys):
    assert main(["simulate", str(BUCK), "--load-step", "-1", "2"]) == 2
    assert "--load-step" in capsys.readouterr().err
