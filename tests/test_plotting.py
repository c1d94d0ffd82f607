"""Plot functions: they draw what they are given and return (fig, axes); no saving.

Outside references: the unit circle is |z| = 1 (common practice of the Nyquist view, Nyquist
1932); 20 log10 |H| for dB and the phase in degrees (Bode 1945, common practice).
"""

from __future__ import annotations

import ast
from pathlib import Path

import numpy as np
import pytest

from loopwright import plotting

SRC = Path(__file__).resolve().parents[1] / "src" / "loopwright"


def _loop(f):
    s = 2j * np.pi * f
    w0 = 2 * np.pi * 1e3
    return (w0 / s) / (1 + s / (2 * np.pi * 5e3))


def test_bode_draws_db_and_degrees():
    f = np.geomspace(10, 1e5, 200)
    h = 10.0 / (1 + 2j * np.pi * f / (2 * np.pi * 1e3))
    fig, (am, ap) = plotting.plot_bode(f, {"a": h, "b": 2 * h})
    y = am.get_lines()[0].get_ydata()
    assert y[0] == pytest.approx(20.0, abs=1e-3)  # 20 log10 10
    assert ap.get_lines()[0].get_ydata()[-1] == pytest.approx(-89.4, abs=0.1)
    assert am.get_xscale() == "log"


def test_loop_gain_marks_crossover():
    f = np.geomspace(10, 1e5, 400)
    fc = 1e3 / np.sqrt(1.0)  # approximately; the marker is placed where it is told
    fig, (am, ap) = plotting.plot_loop_gain(
        f, {"nominal": _loop(f)}, crossover_hz=fc, phase_margin_deg=78.7
    )
    xs = [ln.get_xdata()[0] for ln in am.get_lines() if len(ln.get_xdata()) == 1]
    assert fc in xs
    assert any("PM 78.7" in t.get_text() for t in ap.texts)


def test_nyquist_has_unit_circle_and_critical_point():
    f = np.geomspace(10, 1e5, 400)
    fig, ax = plotting.plot_nyquist({"nominal": _loop(f)})
    circle = [ln for ln in ax.get_lines() if ln.get_label() == "unit circle"][0]
    r = np.hypot(circle.get_xdata(), circle.get_ydata())
    assert np.allclose(r, 1.0)
    assert any(ln.get_label() == "-1" for ln in ax.get_lines())


def test_step_plot_scales():
    t = np.linspace(0, 1e-3, 50)
    y = -0.05 * np.exp(-t / 1e-4)
    fig, ax = plotting.plot_step(t, y, final_value=0.0, y_scale=1e3, settling_time_s=4e-4)
    line = [ln for ln in ax.get_lines() if ln.get_label() == "closed loop (nominal)"][0]
    assert line.get_ydata()[0] == pytest.approx(-50.0)
    assert line.get_xdata()[-1] == pytest.approx(1000.0)


@pytest.mark.parametrize("module", ["closed_loop.py", "report/data.py", "loop.py", "design.py"])
def test_computation_modules_do_not_import_matplotlib(module):
    tree = ast.parse((SRC / module).read_text())
    names = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names += [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            names.append(node.module or "")
    assert not any(n.startswith("matplotlib") for n in names)
    assert "plotting" not in names
