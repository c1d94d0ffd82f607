"""Step-response figures against the second-order loop of Erickson & Maksimovic.

Source: R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed., Kluwer,
2001, sec. 9.4.2 "Phase margin vs. closed-loop Q": the loop ``T = (w0/s)/(1 + s/w2)`` closes to
a second-order system with ``Q = sqrt(w0/w2) = sqrt(cos PM)/sin PM``; overshoot
``Mp = exp(-pi zeta/sqrt(1 - zeta^2))`` with ``zeta = 1/(2Q)`` (standard second-order result,
Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, from memory). Expected
values: METHODS section 11.2 table / check row CL-4 (PM 45 deg: Q = 1.189207, 23.3212 %;
PM 60 deg: Q = 0.816497, 8.7732 %).

Second, independent route: ``scipy.signal.step`` of the same closed loop
``w0 w2/(s^2 + w2 s + w0 w2)`` on the same time grid.

Tolerances: the overshoot printed in the table has 6 significant digits (rel 1e-5 of the
value); the simulation samples a grid of 4001 points over 40 time constants and refines the peak
by a parabola, whose error is far below that (asserted rel 2e-5). Settling times agree with
scipy's to one grid step (the product interpolates between samples, scipy's reading does not).
"""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from scipy import signal

from loopwright.closed_loop import reference_step, step_figures

# PM [deg] -> (Q, overshoot [%]) from METHODS sec. 11.2 (E&M sec. 9.4.2)
TABLE = {45.0: (1.189207, 23.3212), 60.0: (0.816497, 8.7732)}


def _loop(pm_deg: float):
    q = math.sqrt(math.cos(math.radians(pm_deg))) / math.sin(math.radians(pm_deg))
    w2 = 1.0
    w0 = q * q * w2
    return control.tf([w0], [1.0 / w2, 1.0, 0.0]), w0, w2, q


@pytest.mark.parametrize("pm", sorted(TABLE))
def test_loop_has_the_stated_phase_margin(pm):
    t, *_ = _loop(pm)
    _, pm_found, _, _ = control.margin(t)
    assert pm_found == pytest.approx(pm, abs=1e-6)


@pytest.mark.parametrize("pm", sorted(TABLE))
def test_overshoot_matches_second_order_formula(pm):
    t, w0, w2, q = _loop(pm)
    q_tab, ov_tab = TABLE[pm]
    assert q == pytest.approx(q_tab, rel=1e-6)
    resp = reference_step(t, t_end_s=40.0, n_points=4001)
    assert resp.final_value == pytest.approx(1.0, rel=1e-12)
    assert 100 * resp.overshoot == pytest.approx(ov_tab, rel=2e-5)


@pytest.mark.parametrize("pm", sorted(TABLE))
def test_peak_time_matches_damped_period(pm):
    # peak at pi/wd, wd = wn sqrt(1 - zeta^2), wn = sqrt(w0 w2) (standard result, from memory)
    t, w0, w2, q = _loop(pm)
    zeta = 1 / (2 * q)
    wn = math.sqrt(w0 * w2)
    resp = reference_step(t, t_end_s=40.0, n_points=4001)
    assert resp.peak_time_s == pytest.approx(math.pi / (wn * math.sqrt(1 - zeta**2)), rel=1e-4)


@pytest.mark.parametrize("pm", sorted(TABLE))
def test_against_scipy_step(pm):
    t, w0, w2, _ = _loop(pm)
    resp = reference_step(t, t_end_s=40.0, n_points=4001)
    ts, ys = signal.step(([w0 * w2], [1.0, w2, w0 * w2]), T=resp.t_s)
    assert np.max(np.abs(ys - resp.y)) < 1e-9
    # scipy's own reading: overshoot from its samples, settling = first sample after the last
    # one outside the 2 % band
    assert resp.overshoot == pytest.approx(ys.max() - 1.0, rel=1e-4)
    outside = np.nonzero(np.abs(ys - 1.0) > 0.02)[0]
    t_settle_scipy = ts[outside[-1] + 1]
    dt = ts[1] - ts[0]
    assert t_settle_scipy - dt <= resp.settling_time_s <= t_settle_scipy


def test_critically_damped_loop_does_not_overshoot():
    # PM 76.345 deg gives Q = 0.5 (METHODS sec. 11.2; E&M sec. 9.4.2)
    t, *_ = _loop(76.345)
    resp = reference_step(t, t_end_s=60.0, n_points=4001)
    assert 100 * resp.overshoot < 1e-3


def test_step_figures_rejects_bad_kind():
    with pytest.raises(ValueError, match="kind"):
        step_figures([0, 1, 2], [0, 1, 1], 1.0, kind="ramp")
