"""Report: files, images, links, summary.json, failure banner, CLI verb.

Checks against outside references: summary.json equals ``design --json`` (the public contract,
CONTRACT.md); PNG files decode with Pillow/matplotlib; the load-step interconnection is checked
against ``scipy.signal.step`` of ``Zout/(1 + T)`` built as a transfer-function product
(Erickson & Maksimovic 2nd ed. sec. 9.2: closed-loop output impedance ``Zout/(1 + T)``).
"""

from __future__ import annotations

import contextlib
import io
import json
import re
from html.parser import HTMLParser
from pathlib import Path

import control
import matplotlib.image as mpimg
import numpy as np
import pytest
from scipy import signal

from loopwright.closed_loop import design_steps
from loopwright.design import design
from loopwright.report import write_report
from loopwright.spec import load_design
from loopwright.starters import starter_text
from loopwright.textout import to_json

ROOT = Path(__file__).resolve().parents[1]


def _example_files(tmp_path_factory) -> list[Path]:
    found = sorted((ROOT / "examples").glob("*.toml"))
    if found:
        return found
    d = tmp_path_factory.mktemp("starters")
    out = []
    for topo in ("buck", "boost", "buck-boost"):
        p = d / f"{topo}.toml"
        p.write_text(starter_text(topo))
        out.append(p)
    return out


@pytest.fixture(scope="module")
def reports(tmp_path_factory):
    out = []
    for f in _example_files(tmp_path_factory):
        d = tmp_path_factory.mktemp("rep") / f.stem
        write_report(f, d, dpi=60)
        out.append((f, d))
    return out


class _Refs(HTMLParser):
    def __init__(self):
        super().__init__()
        self.refs: list[str] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        for k, v in attrs:
            if k in ("src", "href") and v:
                self.refs.append(v)

    def handle_data(self, data):
        self.text.append(data)


def _parse(html: str) -> _Refs:
    p = _Refs()
    p.feed(html)
    return p


def test_files_exist_and_images_decode(reports):
    for _, d in reports:
        names = {p.name for p in d.iterdir()}
        assert {"index.html", "summary.json"} <= names
        for stem in (
            "plant_gvd",
            "compensator",
            "loop_gain",
            "polar",
            "step_reference",
            "step_load",
            "step_line",
        ):
            assert f"{stem}.png" in names and f"{stem}.svg" in names, stem
            img = mpimg.imread(d / f"{stem}.png")
            assert img.ndim == 3 and img.shape[0] > 100 and img.shape[1] > 100
            assert np.ptp(img[..., :3]) > 0.5  # something drawn, not a blank canvas
            assert (d / f"{stem}.svg").read_text().lstrip().startswith("<?xml")


def test_html_references_only_local_existing_files(reports):
    for _, d in reports:
        p = _parse((d / "index.html").read_text())
        assert p.refs, "no images referenced"
        for ref in p.refs:
            assert not re.match(r"^[a-z]+:", ref) and not ref.startswith("//"), ref
            assert (d / ref).is_file(), ref


def test_summary_json_equals_design_json(reports):
    from loopwright import cli

    has_design_verb = "design" in cli.build_parser()._subparsers._group_actions[0].choices
    for f, d in reports:
        text = (d / "summary.json").read_text()
        if has_design_verb:
            buf = io.StringIO()
            with contextlib.redirect_stdout(buf):
                assert cli.main(["design", str(f), "--json"]) in (0, 1)
            expected = buf.getvalue()
        else:  # the contract: design --json prints to_json(result.to_dict())
            expected = to_json(design(load_design(f)).to_dict()) + "\n"
        assert json.loads(text) == json.loads(expected)
        assert text.strip() == expected.strip()


def test_html_carries_tables_and_caution(reports):
    for _, d in reports:
        text = " ".join(_parse((d / "index.html").read_text()).text)
        for head in (
            "Design inputs",
            "Margins per corner",
            "Operating point per corner",
            "Compensator",
            "Assumptions and model limits",
            "Closed-loop step",
        ):
            assert head in text
        assert "hazardous voltages" in text and "licensed" in text
        assert "not proven" in text.lower()


def _failing_spec(tmp_path) -> Path:
    text = starter_text("buck")
    text = text.replace('crossover = "auto"', 'crossover = "135 kHz"')  # 0.45 fsw (300 kHz)
    text = re.sub(r'compensator = "auto"', 'compensator = "type2"', text)
    p = tmp_path / "failing.toml"
    p.write_text(text)
    return p


def test_failing_design_flagged_at_top(tmp_path):
    spec = _failing_spec(tmp_path)
    result = design(load_design(spec))
    assert not result.meets_targets  # type II cannot bring 55 deg at 0.45 fsw
    index = write_report(result, tmp_path / "rep", dpi=50, svg=False)
    html = index.read_text()
    body = html[html.index("<body>") :]
    flag = body.find("TARGETS NOT MET")
    assert flag >= 0
    first_table = body.find("<table")
    assert flag < first_table and flag < body.find("Design inputs")
    for c in result.failing_corners():
        assert c.name in body[flag:first_table]


def test_refuses_to_overwrite(tmp_path, reports):
    f, _ = reports[0]
    result = design(load_design(f))
    write_report(result, tmp_path / "r", dpi=40, svg=False)
    before = (tmp_path / "r" / "index.html").read_bytes()
    with pytest.raises(FileExistsError, match="force"):
        write_report(result, tmp_path / "r", dpi=40, svg=False)
    assert (tmp_path / "r" / "index.html").read_bytes() == before
    write_report(result, tmp_path / "r", dpi=40, svg=False, force=True)


def test_cli_verb(tmp_path, reports, capsys, monkeypatch):
    from loopwright import cli

    f, _ = reports[0]
    # the report verb is registered in the CLI itself
    assert "report" in cli.build_parser()._subparsers._group_actions[0].choices
    out = tmp_path / "cli"
    assert cli.main(["report", str(f), "-o", str(out)]) == 0
    assert (out / "index.html").is_file()
    assert cli.main(["report", str(f), "-o", str(out)]) == 2
    assert "--force" in capsys.readouterr().err
    assert cli.main(["report", str(f), "-o", str(out), "--force"]) == 0
    assert cli.main(["report", str(tmp_path / "missing.toml")]) == 2


def test_load_step_against_transfer_function_product(reports):
    # independent route: Zcl = Zout * 1/(1 + T) as a product, stepped by scipy.signal.step
    f, _ = reports[0]
    result = design(load_design(f))
    steps = design_steps(result)
    lm = result.loop_model("nominal")
    zout = result.plant.nominal.model.zout()
    zcl = control.minreal(
        control.tf(zout) * control.feedback(1, control.tf(lm.loop_gain())), verbose=False
    )
    num, den = np.asarray(zcl.num[0][0]), np.asarray(zcl.den[0][0])
    _, y = signal.step((num, den), T=steps.load.t_s)
    expected = -steps.load.step * y  # load current drawn = -injected current
    scale = np.max(np.abs(expected))
    assert np.max(np.abs(steps.load.y - expected)) < 1e-3 * scale
    assert steps.load.peak_deviation == pytest.approx(
        expected[np.argmax(np.abs(expected))], rel=2e-3
    )


def test_digital_design_steps_are_finite(tmp_path):
    # regression: a delayed loop built through transfer functions overflowed (Pade states
    # scaled to 1e59); the final value of T/(1 + T) with an integrator is 1 (common practice)
    text = starter_text("buck") + (
        '\n[digital]\nsample_rate = "300 kHz"\ndelay = "1.5"\nmethod = "tustin"\nformat = "q15"\n'
    )
    p = tmp_path / "dig.toml"
    p.write_text(text)
    result = design(load_design(p))
    steps = design_steps(result)
    for s in (steps.reference, steps.load, steps.line):
        assert np.all(np.isfinite(s.y))
    assert steps.reference.final_value == pytest.approx(1.0, rel=1e-9)
    index = write_report(result, tmp_path / "rep", dpi=40, svg=False)
    assert "Digital controller" in index.read_text()


def test_report_simulation_section_agrees_with_model(tmp_path):
    """Middlebrook & Cuk (1976): the averaged operating point equals the switching
    waveform's period average; Middlebrook (1975): injection measures the loop gain. The
    report's simulation section shows both beside the model and its figure exists."""
    import re

    from loopwright.report import write_report

    example = Path(__file__).resolve().parents[1] / "examples" / "harbor-logger-buck.toml"
    index = write_report(example, tmp_path / "r", svg=False, simulate=True)
    html = index.read_text()
    assert "Switching-level simulation against the averaged model" in html
    assert (tmp_path / "r" / "loop_injection.png").read_bytes()[:4] == b"\x89PNG"
    m = re.search(
        r"largest difference from the averaged model ([0-9.]+) dB and ([0-9.]+) deg", html
    )
    assert m and float(m.group(1)) < 1.5 and float(m.group(2)) < 8.0


def test_inverting_load_step_moves_output_toward_zero():
    """Physical law (charge balance at the output node): a heavier load on a negative rail
    lets the output rise toward 0 V before the loop recovers, as the switching simulation
    shows; the averaged model's load step must have the same sign."""
    from loopwright.closed_loop import design_steps

    example = Path(__file__).resolve().parents[1] / "examples" / "glacier-probe-inverter.toml"
    steps = design_steps(design(load_design(example)))
    assert steps.load.peak_deviation > 0
