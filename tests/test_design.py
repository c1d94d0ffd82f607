"""Loop design from a design file: synthesis, proof over corners, check exit codes, JSON.

Checks rely on python-control (an outside reference library) for the loop margins and
closed-loop poles of the designed loop, and on facts of the trade marked "common practice".
"""

from __future__ import annotations

import json
import math

import control
import numpy as np
import pytest

from loopwright.cli import main
from loopwright.design import PM_HEADROOM_DEG, design
from loopwright.spec import parse_design
from loopwright.starters import starter_text


def _spec(topology: str, **replace: str):
    text = starter_text(topology)
    for old, new in replace.items():
        assert old in text
        text = text.replace(old, new)
    return parse_design(text)


@pytest.fixture(scope="module")
def buck_result():
    return design(_spec("buck"))


@pytest.mark.parametrize("topology", ["buck", "boost", "buck-boost"])
def test_starters_meet_targets_and_agree_with_python_control(topology):
    """Reference: python-control's stability_margins and closed-loop poles of the same loop.

    The designed loop's nominal phase margin and crossover must agree with
    control.stability_margins to 0.01 deg and 0.01 %, and the closed-loop verdict with the
    poles of control.feedback(T, 1)."""
    result = design(_spec(topology))
    assert result.meets_targets
    lm = result.loop_model("nominal")
    t = lm.loop_gain()
    gm, pm, _sm, wg, wp, _ws = control.stability_margins(t)
    a = result.nominal.analysis
    assert a.phase_margin_deg == pytest.approx(pm, abs=0.01)
    assert a.crossover_hz == pytest.approx(wp / (2 * math.pi), rel=1e-4)
    cl = control.feedback(t, 1)
    assert a.closed_loop_stable == bool(np.all(np.real(control.poles(cl)) < 0))
    # every corner: stable and within the targets (the pass verdict is earned)
    for c in (result.nominal, *result.corners):
        assert c.analysis.closed_loop_stable
        assert c.analysis.phase_margin_deg >= result.spec.target.phase_margin_deg - 1e-6
        assert c.analysis.gain_margin_db >= result.spec.target.gain_margin_db - 1e-6


def test_given_crossover_lands_on_target_with_headroom():
    """A crossover given in the file is met at nominal to 2 % and the phase margin is the
    target plus the stated synthesis headroom (K factor, Venable 1983, exact at fc)."""
    spec = _spec(
        "buck",
        **{
            'crossover = "auto"': 'crossover = "20 kHz"',
            'compensator = "auto"': 'compensator = "type3"',
        },
        **{'tolerance = "20 %"': 'tolerance = "0 %"'},
    )
    result = design(spec)
    a = result.nominal.analysis
    assert a.crossover_hz == pytest.approx(20e3, rel=0.02)
    # synthesised for the target plus headroom (more if a corner needed it), never less
    assert a.phase_margin_deg >= 55.0 + PM_HEADROOM_DEG - 1e-6


def test_boost_auto_crossover_respects_rhp_zero(buck_result):
    """Common practice: crossover at most a third of the lowest RHP zero over the corners."""
    result = design(_spec("boost"))
    f_rhp = result.plant.lowest_rhp_zero_hz()
    assert f_rhp is not None
    assert result.f_c_hz <= f_rhp / 3 * (1 + 1e-9)
    assert "RHP zero" in result.crossover_reason


def test_buck_auto_crossover_is_tenth_of_fsw(buck_result):
    """Common practice: analog voltage-mode crossover at most fsw/10."""
    assert buck_result.f_c_hz <= 0.1 * 300e3 * (1 + 1e-9)


def test_boost_above_rhp_zero_never_passes():
    """A boost asked to cross over above its RHP zero (Erickson & Maksimovic 2nd ed.
    sec. 8.1.5: the RHP zero adds phase lag like a pole) must not report success."""
    spec = _spec(
        "boost",
        **{
            'crossover = "auto"': 'crossover = "40 kHz"',
            'compensator = "auto"': 'compensator = "type3"',
        },
    )
    result = design(spec)
    assert not result.meets_targets
    assert any("RHP zero" in w for w in result.warnings)


def test_type2_cannot_give_type3_boost():
    """Venable's type II gives less than 90 deg of boost; a voltage-mode LC plant above its
    resonance needs more, so type II at fsw/10 must fail with a reason and a remedy."""
    spec = _spec(
        "buck",
        **{
            'crossover = "auto"': 'crossover = "30 kHz"',
            'compensator = "auto"': 'compensator = "type2"',
        },
    )
    result = design(spec)
    assert not result.meets_targets
    text = " ".join(result.tried)
    assert "type II" in text and "type III" in text


def test_auto_picks_simplest_type_that_meets(buck_result):
    """Type selection: the LC double pole of a voltage-mode buck needs type III (Venable)."""
    assert buck_result.compensator.kind == "type3"
    assert any(t.startswith("type2") for t in buck_result.tried)


def test_design_json_contract(capsys, tmp_path):
    path = tmp_path / "b.toml"
    path.write_text(starter_text("buck"))
    assert main(["design", str(path), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    for key in (
        "compensator",
        "realization",
        "loop",
        "loop_rounded",
        "corners",
        "meets_targets",
        "warnings",
    ):
        assert key in data
    assert set(data["compensator"]) >= {"type", "zeros_hz", "poles_hz", "k", "num", "den"}
    assert set(data["realization"]) >= {"kind", "series", "components", "ideal_components"}
    assert set(data["loop"]) >= {
        "crossover_hz",
        "phase_margin_deg",
        "gain_margin_db",
        "delay_margin_s",
        "closed_loop_stable",
    }
    for c in data["corners"]:
        assert set(c) >= {
            "name",
            "vin",
            "iout",
            "crossover_hz",
            "phase_margin_deg",
            "gain_margin_db",
            "closed_loop_stable",
            "meets_targets",
        }
    # Gc(s) = num/den reproduces the compensator's own response (highest power first)
    num, den = np.array(data["compensator"]["num"]), np.array(data["compensator"]["den"])
    s = 2j * np.pi * 1e4
    from loopwright.design import design as _d

    comp = _d(parse_design(starter_text("buck"))).compensator
    assert np.polyval(num, s) / np.polyval(den, s) == pytest.approx(
        comp.freqresp(np.array([2 * np.pi * 1e4]))[0]
    )


def test_check_exit_codes(tmp_path, capsys):
    good = tmp_path / "good.toml"
    good.write_text(starter_text("boost"))
    assert main(["check", str(good)]) == 0
    bad = tmp_path / "bad.toml"
    bad.write_text(
        starter_text("buck")
        .replace('phase_margin = "55 deg"', 'phase_margin = "89 deg"')
        .replace('compensator = "auto"', 'compensator = "type2"')
    )
    assert main(["check", str(bad)]) == 1
    out = capsys.readouterr().out
    assert "FAIL" in out and "nominal" in out
    broken = tmp_path / "broken.toml"
    broken.write_text(starter_text("buck").replace('fsw = "300 kHz"', 'fsw = "-3 kHz"'))
    assert main(["check", str(broken)]) == 2
    assert "power_stage.fsw" in capsys.readouterr().err


def test_unstable_loop_is_never_good():
    """A loop whose closed-loop poles lie in the right half plane fails, whatever margins a
    grid reading might suggest (stability from the closed-loop poles)."""
    spec = _spec(
        "buck",
        **{
            'crossover = "auto"': 'crossover = "1.5 kHz"',
            'compensator = "auto"': 'compensator = "type1"',
        },
    )
    result = design(spec)
    for c in (result.nominal, *result.corners):
        if c.analysis is not None and not c.analysis.closed_loop_stable:
            assert not c.meets_targets
            assert any("UNSTABLE" in f for f in c.failures)
    assert not result.meets_targets


def test_rounded_parts_reproved(buck_result):
    """The loop is proved again with the E-series parts (IEC 60063) and stays close."""
    a, r = buck_result.nominal.analysis, buck_result.nominal.analysis_rounded
    assert r is not None
    assert r.phase_margin_deg == pytest.approx(a.phase_margin_deg, abs=3.0)
    assert r.crossover_hz == pytest.approx(a.crossover_hz, rel=0.1)


def test_sampled_loop_proved_at_every_corner():
    """With [digital], every corner is also proved as a sampled loop (ZOH plant, computation
    delay, quantised coefficients). Far below the sample rate the exact sampled loop and the
    continuous loop with e^{-s Td}, Td = 1.5 Ts, agree closely (METHODS DG-3: 0.08 deg at
    fs/25; Buso & Mattavelli 2006, from memory)."""
    from pathlib import Path

    from loopwright.spec import load_design

    example = Path(__file__).resolve().parents[1] / "examples" / "glacier-probe-inverter.toml"
    result = design(load_design(example))
    for c in (result.nominal, *result.corners):
        assert c.sampled is not None
        assert c.sampled["closed_loop_stable"]
        assert c.sampled["phase_margin_deg"] == pytest.approx(c.analysis.phase_margin_deg, abs=1.0)
        assert c.meets_targets == (c.sampled["meets_targets"] and not c.failures)
