"""Tests of loopwright.loop: batched responses, closed-loop poles, analysis, responses.

External references: python-control (``ss`` frequency response, ``feedback(...).poles()``,
``pade``, ``zeros``), the Nyquist criterion (an open-loop unstable plant can show positive
margins around an unstable closed loop), and common practice for the delay cost
(METHODS sec. 5.1 R10: a delay Td costs 360 fc Td degrees at the crossover).
"""

from __future__ import annotations

import ast
import math
import pathlib

import control
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import loopwright
from loopwright.compensators import Compensator, synthesize_k_factor
from loopwright.errors import DesignError
from loopwright.loop import (
    analyze_loops,
    closed_loop_poles,
    closed_loop_responses,
    closed_loop_statespace,
    loop_freqresp,
    plant_freqresp,
    transmission_zeros,
)


def buck(inductance, c_out, r_esr, r_load, v_in, v_ramp=2.5):
    """Buck control-to-output (times 1/VM) state space, textbook closed form, batched."""
    inductance, c_out, r_esr, r_load, v_in = np.broadcast_arrays(
        *(np.atleast_1d(np.asarray(v, float)) for v in (inductance, c_out, r_esr, r_load, v_in))
    )
    k = inductance.size
    par = r_load / (r_load + r_esr)
    a = np.empty((k, 2, 2))
    a[:, 0, 0] = -par * r_esr / inductance
    a[:, 0, 1] = -par / inductance
    a[:, 1, 0] = par / c_out
    a[:, 1, 1] = -1.0 / ((r_load + r_esr) * c_out)
    b = np.zeros((k, 2))
    b[:, 0] = v_in / (v_ramp * inductance)
    c = np.stack([par * r_esr, par], axis=1)
    return a, b, c, np.zeros(k)


def random_batch(rng, k=6, n=3):
    a = rng.normal(size=(k, n, n)) * 1e3 - 2e3 * np.eye(n)
    b = rng.normal(size=(k, n))
    c = rng.normal(size=(k, n))
    d = rng.normal(size=k) * 0.1
    return a, b, c, d


COMP = Compensator("type3", 3e4, (2e4, 4e4), (3e5, 6e5), strategy="manual")


def test_plant_freqresp_matches_python_control():
    rng = np.random.default_rng(3)
    a, b, c, d = random_batch(rng)
    w = np.geomspace(1.0, 1e7, 57)
    h = plant_freqresp(a, b, c, d, w)
    assert h.shape == (6, 57)
    for i in range(6):
        sys = control.ss(a[i], b[i][:, None], c[i][None, :], d[i])
        assert h[i] == pytest.approx(sys(1j * w), rel=1e-9)
    # one frequency row per plant
    w2 = np.geomspace(1.0, 1e6, 6 * 4).reshape(6, 4)
    h2 = plant_freqresp(a, b, c, d, w2)
    for i in range(6):
        sys = control.ss(a[i], b[i][:, None], c[i][None, :], d[i])
        assert h2[i] == pytest.approx(sys(1j * w2[i]), rel=1e-9)


def test_plant_freqresp_defective_matrix_uses_direct_solve():
    # Jordan block: eigenvectors are parallel, the modal form does not exist
    a = np.array([[-1e3, 1e3], [0.0, -1e3]])
    b = np.array([0.0, 1.0])
    c = np.array([1.0, 0.0])
    w = np.geomspace(1.0, 1e6, 13)
    h = plant_freqresp(a, b, c, 0.0, w)[0]
    assert h == pytest.approx(1e3 / (1j * w + 1e3) ** 2, rel=1e-12)


def test_single_model_is_a_batch_of_one():
    a, b, c, d = buck(22e-6, 100e-6, 30e-3, 4.0, 36.0)
    w = np.array([2 * math.pi * 1e4])
    assert plant_freqresp(a[0], b[0], c[0], d[0], w).shape == (1, 1)


def test_loop_freqresp_with_delay():
    a, b, c, d = buck([22e-6, 18e-6], 100e-6, 30e-3, 4.0, 36.0)
    w = np.geomspace(1e2, 1e6, 11)
    t0 = loop_freqresp(a, b, c, d, COMP, w)
    t1 = loop_freqresp(a, b, c, d, COMP, w, delay_s=6e-6)
    assert t1 == pytest.approx(t0 * np.exp(-1j * w * 6e-6), rel=1e-12)
    assert t0 == pytest.approx(plant_freqresp(a, b, c, d, w) * COMP.freqresp(w), rel=1e-12)


def _control_loop(a, b, c, d, comp, delay=0.0, order=6):
    sys = comp.to_control() * control.ss(a, b[:, None], c[None, :], d)
    if delay:
        sys = sys * control.tf(*control.pade(delay, order))
    return sys


def _same_roots(x, y, rel=1e-6):
    x = np.sort_complex(np.asarray(x))
    y = np.sort_complex(np.asarray(y))
    assert x.size == y.size
    scale = max(1.0, float(np.max(np.abs(y))))
    assert np.max(np.abs(x - y)) <= rel * scale


def test_closed_loop_poles_match_python_control():
    a, b, c, d = buck([22e-6, 15e-6, 30e-6], [100e-6, 80e-6, 150e-6], 30e-3, [4.0, 40.0, 2.0], 36)
    comp = synthesize_k_factor(
        plant_freqresp(a, b, c, d, [2 * math.pi * 25e3])[0, 0], 25e3, 60.0, "type3"
    )
    poles = closed_loop_poles(a, b, c, d, comp)
    assert poles.shape == (3, 5)
    assert np.all(np.diff(poles.real, axis=1) <= 0)
    for i in range(3):
        ref = control.feedback(_control_loop(a[i], b[i], c[i], d[i], comp), 1).poles()
        _same_roots(poles[i], ref)


def test_closed_loop_poles_with_delay_use_pade():
    a, b, c, d = buck(22e-6, 100e-6, 30e-3, 4.0, 36.0)
    delay = 6e-6
    poles = closed_loop_poles(a, b, c, d, COMP, delay_s=delay, pade_order=6)
    assert poles.shape == (1, 4 + 6 + 2 - 1)
    ref = control.feedback(_control_loop(a[0], b[0], c[0], d[0], COMP, delay), 1).poles()
    _same_roots(poles[0], ref, rel=1e-6)
    with pytest.raises(DesignError, match="pade_order"):
        closed_loop_poles(a, b, c, d, COMP, delay_s=delay, pade_order=3)


def test_closed_loop_statespace_is_t_over_one_plus_t():
    a, b, c, d = buck(22e-6, 100e-6, 30e-3, 4.0, 36.0)
    acl, bcl, ccl, dcl = closed_loop_statespace(a, b, c, d, COMP)
    w = np.geomspace(1e2, 1e6, 9)
    t = loop_freqresp(a, b, c, d, COMP, w)[0]
    h = plant_freqresp(acl, bcl, ccl, dcl, w)[0]
    assert h == pytest.approx(t / (1 + t), rel=1e-9)


def test_delay_costs_360_fc_td_degrees():
    """Common practice (METHODS 5.1 R10): Td = 1.5 Ts costs 54 deg at fc = fs/10."""
    fs = 250e3
    a, b, c, d = buck(22e-6, 100e-6, 30e-3, 4.0, 36.0)
    comp = synthesize_k_factor(
        plant_freqresp(a, b, c, d, [2 * math.pi * 25e3])[0, 0], 25e3, 60.0, "type3"
    )
    base = analyze_loops(a, b, c, d, comp)[0]
    slow = analyze_loops(a, b, c, d, comp, delay_s=1.5 / fs)[0]
    assert slow.crossover_hz == pytest.approx(base.crossover_hz, rel=1e-9)
    assert base.phase_margin_deg - slow.phase_margin_deg == pytest.approx(54.0, abs=1e-6)
    assert slow.closed_loop_stable  # 6 deg left


def test_analyze_batch_default_range_and_verdicts():
    rng = np.random.default_rng(7)
    k = 40
    a, b, c, d = buck(
        22e-6 * rng.uniform(0.8, 1.2, k),
        100e-6 * rng.uniform(0.8, 1.2, k),
        30e-3,
        rng.uniform(2.0, 40.0, k),
        rng.uniform(30, 42, k),
    )
    comp = synthesize_k_factor(
        plant_freqresp(a, b, c, d, [2 * math.pi * 25e3])[0, 0], 25e3, 60.0, "type3"
    )
    results = analyze_loops(a, b, c, d, comp)
    assert len(results) == k
    for i, res in enumerate(results):
        sys = _control_loop(a[i], b[i], c[i], d[i], comp)
        _gm, pm, _sm, _wpc, wgc, _ws = control.stability_margins(sys, returnall=True)
        assert res.margins.gain_crossovers_hz == pytest.approx(
            np.sort(wgc) / (2 * math.pi), rel=1e-9
        )
        assert res.phase_margin_deg == pytest.approx(np.min(pm), abs=0.01)
        poles = control.feedback(sys, 1).poles()
        assert res.closed_loop_stable == bool(np.all(poles.real < 0))


def test_closed_loop_responses_identities():
    a, b, c, d = buck(22e-6, 100e-6, 30e-3, 4.0, 36.0)
    w = np.geomspace(1e2, 1e6, 21)
    res = closed_loop_responses(
        a, b, c, d, COMP, w, sensing_gain=0.1, line_to_output=(a, b / 2.0, c, d)
    )
    assert res.complementary + res.sensitivity == pytest.approx(np.ones((1, 21)), rel=1e-12)
    assert res.line_to_output_closed == pytest.approx(
        res.line_to_output_open * res.sensitivity, rel=1e-12
    )
    assert res.output_impedance_open is None
    with pytest.raises(DesignError, match="sensing_gain"):
        closed_loop_responses(a, b, c, d, COMP, w, sensing_gain=0.0)


def test_transmission_zeros_match_python_control():
    rng = np.random.default_rng(11)
    a, b, c, d = random_batch(rng, k=3, n=4)
    for i, zeros in enumerate(transmission_zeros(a, b, c, d)):
        ref = control.ss(a[i], b[i][:, None], c[i][None, :], d[i]).zeros()
        _same_roots(zeros, ref, rel=1e-8)


@pytest.mark.parametrize(
    "args, key",
    [
        ((np.zeros((2, 2, 3)), np.zeros((2, 2)), np.zeros((2, 2)), np.zeros(2)), "a"),
        ((np.zeros((2, 2, 2)), np.zeros((2, 3)), np.zeros((2, 2)), np.zeros(2)), "b"),
        ((np.zeros((2, 2, 2)), np.zeros((2, 2)), np.zeros((2, 2)), np.zeros(3)), "d"),
        ((np.full((1, 1, 1), np.nan), np.ones((1, 1)), np.ones((1, 1)), np.zeros(1)), "a"),
    ],
)
def test_bad_plant_batches(args, key):
    with pytest.raises(DesignError, match=key):
        plant_freqresp(*args, [1.0])


def test_bad_delay_and_compensator():
    a, b, c, d = buck(22e-6, 100e-6, 30e-3, 4.0, 36.0)
    with pytest.raises(DesignError, match="delay_s"):
        loop_freqresp(a, b, c, d, COMP, [1.0], delay_s=-1e-6)
    with pytest.raises(DesignError, match="comp"):
        closed_loop_poles(a, b, c, d, "type3")


def test_computation_modules_do_not_import_matplotlib():
    root = pathlib.Path(loopwright.__file__).parent
    for name in (
        "margins.py",
        "loop.py",
        "eseries.py",
        "realization.py",
        "compensators/base.py",
        "compensators/kfactor.py",
        "compensators/placement.py",
    ):
        tree = ast.parse((root / name).read_text())
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                assert not any(n.name.startswith("matplotlib") for n in node.names), name
            if isinstance(node, ast.ImportFrom):
                assert not (node.module or "").startswith("matplotlib"), name


# -- property: the closed-loop pole verdict agrees with the margin (Nyquist) verdict --------
@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    l_scale=st.floats(0.6, 1.6),
    c_scale=st.floats(0.6, 1.6),
    r_load=st.floats(1.0, 50.0),
    gain_db=st.floats(-30.0, 30.0),
    f_c=st.floats(8e3, 30e3),
    kind=st.sampled_from(["type2", "type3"]),
)
def test_pole_verdict_agrees_with_margin_verdict(l_scale, c_scale, r_load, gain_db, f_c, kind):
    a, b, c, d = buck(22e-6 * l_scale, 100e-6 * c_scale, 30e-3, r_load, 36.0)
    p = plant_freqresp(a, b, c, d, [2 * math.pi * f_c])[0, 0]
    if kind == "type2":
        comp = Compensator("type2", 1.0, (2 * math.pi * f_c / 3,), (2 * math.pi * f_c * 3,), "m")
    else:
        comp = Compensator(
            "type3", 1.0, (2 * math.pi * f_c / 4,) * 2, (2 * math.pi * f_c * 4,) * 2, "m"
        )
    w_i = 10 ** (gain_db / 20) / abs(p * comp.freqresp(2 * math.pi * f_c))
    comp = comp.with_gain(w_i)
    res = analyze_loops(a, b, c, d, comp, f_min_hz=1.0, f_max_hz=1e8)[0]
    m = res.margins
    near = [abs(pm) < 0.5 for pm in m.phase_margins_deg]
    if (
        any(near)
        or abs(m.gain_margin_db) < 0.1
        or (m.gain_reduction_margin_db is not None and abs(m.gain_reduction_margin_db) < 0.1)
    ):
        return  # too close to the boundary for a verdict
    # Nyquist, open-loop stable T: unstable iff the curve encircles -1, i.e. it crosses the
    # negative real axis left of -1 without the crossings cancelling
    margin_verdict = m.gain_reduction_margin_db is None or m.conditionally_stable
    assert res.closed_loop_stable == margin_verdict


# -- poles and zeros handed to the margin search ----------------------------------------------
def _match_roots(x, y, rel):
    """Each root of ``y`` has its own root of ``x`` within ``rel * max(1, max|y|)``."""
    x = list(np.asarray(x, dtype=complex))
    y = np.asarray(y, dtype=complex)
    assert len(x) == y.size
    tol = rel * max(1.0, float(np.max(np.abs(y)))) if y.size else 0.0
    for root in y:
        j = int(np.argmin([abs(root - v) for v in x]))
        assert abs(root - x.pop(j)) <= tol


@pytest.mark.parametrize("n, with_d", [(1, False), (2, False), (2, True), (3, False), (4, True)])
def test_plant_singular_points_match_python_control(n, with_d):
    """Poles and finite zeros of each plant (python-control ``poles``/``zeros``); the zero
    list may carry extra zeros at the origin (relative degree), nothing else."""
    from loopwright.loop import _ModalPlant

    rng = np.random.default_rng(20 + n)
    a, b, c, d = random_batch(rng, k=5, n=n)
    if not with_d:
        d = np.zeros(5)
    points = _ModalPlant(a, b, c, d).singular_points()
    assert points.shape == (5, 2 * n)
    for i in range(5):
        sys = control.ss(a[i], b[i][:, None], c[i][None, :], d[i])
        _match_roots(points[i, :n], sys.poles(), rel=1e-9)
        zeros, ref = points[i, n:], np.asarray(sys.zeros())
        scale = float(np.max(np.abs(np.linalg.eigvals(a[i]))))
        extra = np.sort(np.abs(zeros))[: n - ref.size]
        assert np.all(extra <= 1e-9 * scale)
        _match_roots(zeros[np.argsort(np.abs(zeros))[n - ref.size :]], ref, rel=1e-8)


def test_buck_singular_points_and_esr_zero():
    """Buck control-to-output: the LC pair and the ESR zero at -1/(R_esr C) (Erickson &
    Maksimovic 2nd ed., sec. 8.2 and Table 8.2 (buck Gvd); ESR zero from memory)."""
    from loopwright.loop import _ModalPlant

    a, b, c, d = buck(22e-6, 100e-6, 30e-3, 4.0, 36.0)
    points = _ModalPlant(a, b, c, d).singular_points()[0]
    _match_roots(points[:2], np.linalg.eigvals(a[0]), rel=1e-12)
    zeros = points[2:][np.argsort(np.abs(points[2:]))]
    assert abs(zeros[0]) < 1e-6
    assert zeros[1] == pytest.approx(-1.0 / (30e-3 * 100e-6), rel=1e-9)


def test_curvature_and_phase_slope_bounds_hold_on_sampled_loops():
    """The bounds on |d^2 ln T/d(ln w)^2| and on the phase slope that let the margin search
    decide intervals without sampling them hold against finite differences of
    python-control's frequency response (lightly damped plants, type III, a delay)."""
    import scipy.linalg

    from loopwright.loop import _loop_response, _ModalPlant
    from loopwright.margins import _BOUND_SAFETY, _Bounds

    rng = np.random.default_rng(11)
    k, n = 12, 5
    a = np.zeros((k, n, n))
    for i in range(k):
        w0 = 10 ** rng.uniform(3, 5.5, 2)
        q = 10 ** rng.uniform(0.5, 2.5, 2)
        blocks = [np.array([[0, w], [-w, -w / qq]]) for w, qq in zip(w0, q, strict=True)]
        m = scipy.linalg.block_diag(*blocks, [[-(10 ** rng.uniform(2, 6))]])
        t = rng.normal(size=(n, n)) + 3 * np.eye(n)
        a[i] = t @ m @ np.linalg.inv(t)
    b, c = rng.normal(size=(k, n)), rng.normal(size=(k, n))
    comp = Compensator("type3", 3e4, (2e3, 2e4), (2e5, 2e6), strategy="manual")
    delay = 3e-7
    response = _loop_response(_ModalPlant(a, b, c, np.zeros(k)), comp, delay)
    bounds = _Bounds(response.singularities, k)
    assert not np.any(bounds.unknown)
    x_nodes = np.linspace(math.log(2 * math.pi * 10), math.log(2 * math.pi * 1e6), 41)
    w_nodes = np.exp(x_nodes)
    m_shared, r_shared = bounds.shared_terms(w_nodes)
    m_bound, r_bound = bounds.grid(m_shared, r_shared, w_nodes)
    gc = comp.to_control()
    worst_m = worst_r = 0.0
    for i in range(k):
        sys = gc * control.ss(a[i], b[i][:, None], c[i][None, :], 0.0)
        for j in range(x_nodes.size - 1):
            xs = np.linspace(x_nodes[j], x_nodes[j + 1], 129)
            ws = np.exp(xs)
            lt = np.log(sys(1j * ws) * np.exp(-1j * ws * delay))
            lt = lt.real + 1j * np.unwrap(lt.imag)
            hx = xs[1] - xs[0]
            curv = np.abs(lt[2:] - 2 * lt[1:-1] + lt[:-2]) / hx**2
            slope = np.abs(np.diff(lt.imag)) / hx
            worst_m = max(worst_m, curv.max() / (m_bound[j, i] / _BOUND_SAFETY))
            worst_r = max(worst_r, slope.max() / (r_bound[j, i] / _BOUND_SAFETY))
    assert worst_m <= 1.0
    assert worst_r <= 1.0
    assert worst_m > 0.3 and worst_r > 0.3  # the bounds are not vacuous


def test_margins_of_a_defective_plant_beside_ordinary_ones():
    """A Jordan-block plant (no modal form, poles and zeros not handed to the margin search)
    in a batch with ordinary plants: every loop matches python-control."""
    rng = np.random.default_rng(5)
    a, b, c, d = random_batch(rng, k=24, n=3)  # large enough for the coarse pass
    a[1] = a[7] = np.array([[-1e3, 1e3, 0.0], [0.0, -1e3, 1e3], [0.0, 0.0, -1e3]])
    d[:] = 0.0
    comp = Compensator("type3", 3e3, (2e3, 2e4), (2e5, 2e6), strategy="manual")
    results = analyze_loops(a, b, c, d, comp, f_min_hz=1.0, f_max_hz=1e7)
    for i, res in enumerate(results):
        sys = _control_loop(a[i], b[i], c[i], d[i], comp)
        _gm, pm, _sm, wpc, wgc, _ws = control.stability_margins(sys, returnall=True)
        for found, ref in (
            (res.margins.gain_crossovers_hz, wgc),
            (res.margins.phase_crossovers_hz, wpc),
        ):
            ref = np.sort(np.asarray(ref))
            ref = ref[(ref > 2 * math.pi) & (ref < 2 * math.pi * 1e7)]
            assert found == pytest.approx(ref / (2 * math.pi), rel=1e-9)
