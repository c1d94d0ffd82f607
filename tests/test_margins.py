"""Tests of loopwright.margins against python-control and closed-form crossings.

External references: python-control's ``stability_margins`` (polynomial method: exact roots of
``|N(jw)|^2 - |D(jw)|^2`` and of ``Im T(jw)``), closed-form crossings of constructed responses,
and the Nyquist criterion (a pure delay equal to the delay margin brings the phase margin to
zero; a gain reduction beyond the margin to gain reduction destabilises a conditionally stable
loop, decided from the closed-loop poles).
"""

from __future__ import annotations

import math

import control
import numpy as np
import pytest

from loopwright.compensators import Compensator, synthesize_k_factor
from loopwright.errors import DesignError
from loopwright.loop import analyze_loops, plant_freqresp
from loopwright.margins import LoopMargins, find_margins, find_margins_batch

VG, VM, L, C, RC, R = 36.0, 2.5, 22e-6, 100e-6, 30e-3, 4.0


def plant_1(omega):
    s = 1j * np.asarray(omega, dtype=float)
    return (VG / VM) * (1 + s * RC * C) / (1 + s * (RC * C + L / R) + s**2 * L * C * (R + RC) / R)


PLANT_1_TF = control.tf(
    np.array([RC * C, 1.0]) * VG / VM, [L * C * (R + RC) / R, RC * C + L / R, 1.0]
)


def _tf_response(sys):
    return lambda w: sys(1j * np.asarray(w))


def _control_all(sys):
    gm, pm, _sm, wpc, wgc, _ws = control.stability_margins(sys, returnall=True)
    return np.asarray(gm), np.asarray(pm), np.asarray(wpc), np.asarray(wgc)


# -- agreement with python-control ------------------------------------------------------------
LOOPS = {
    "type3 K factor on plant 1": lambda: (
        synthesize_k_factor(plant_1(2 * math.pi * 25e3), 25e3, 60.0, "type3").to_control()
        * PLANT_1_TF
    ),
    "type2 on a first-order plant": lambda: (
        control.tf([2e4, 2e9], [1, 3e3, 0]) * control.tf([1], [1 / 4e5, 1])
    ),
    "third-order type-0 loop": lambda: (
        control.tf([10.0], [1.0])
        * control.tf([1], [1, 1])
        * control.tf([1], [0.1, 1])
        * control.tf([1], [0.01, 1])
    ),
    "lightly damped plant, integrator": lambda: (
        control.tf([3e3], [1, 0]) * control.tf([1e8], [1, 2e2, 1e8])
    ),
}


@pytest.mark.parametrize("name", sorted(LOOPS))
def test_agrees_with_python_control(name):
    sys = LOOPS[name]()
    m = find_margins(_tf_response(sys), 1e-2, 1e7)
    gm, pm, wpc, wgc = _control_all(sys)
    keep = (wgc > 2 * math.pi * 1e-2) & (wgc < 2 * math.pi * 1e7)
    order = np.argsort(wgc[keep])
    assert m.gain_crossovers_hz == pytest.approx(wgc[keep][order] / (2 * math.pi), rel=1e-9)
    assert m.phase_margins_deg == pytest.approx(pm[keep][order], abs=0.01)
    assert np.allclose(m.phase_margins_deg, pm[keep][order], atol=1e-7)
    keep = (wpc > 2 * math.pi * 1e-2) & (wpc < 2 * math.pi * 1e7)
    order = np.argsort(wpc[keep])
    assert m.phase_crossovers_hz == pytest.approx(wpc[keep][order] / (2 * math.pi), rel=1e-9)
    mags = np.array([abs(sys(2j * math.pi * f)) for f in m.phase_crossovers_hz])
    assert 1 / mags == pytest.approx(gm[keep][order], rel=1e-7)
    below = mags[mags < 1]
    if below.size:
        assert m.gain_margin_db == pytest.approx(-20 * math.log10(below.max()), abs=1e-9)
    else:
        assert m.gain_margin_db == math.inf


def test_crossover_is_the_one_nearest_the_critical_point():
    # gain dips below 1 and back beside a resonance: three crossings
    sys = control.tf([3e3], [1, 0]) * control.tf([1e8], [1, 2e2, 1e8])
    m = find_margins(_tf_response(sys), 1.0, 1e6)
    assert len(m.gain_crossovers_hz) == 3
    _gm, pm, _wpc, wgc = _control_all(sys)
    pm = pm[np.argsort(wgc)]
    i = int(np.argmin(np.abs(pm)))  # python-control's choice: smallest |PM|
    assert m.crossover_hz == m.gain_crossovers_hz[i]
    assert m.phase_margin_deg == pytest.approx(pm[i], abs=1e-7)
    # delay margin: the delay that turns the first crossover onto -1 (PM mod 360 over w)
    w = 2 * math.pi * np.array(m.gain_crossovers_hz)
    dm = np.min(np.radians(np.mod(m.phase_margins_deg, 360.0)) / w)
    assert m.delay_margin_s == pytest.approx(dm, rel=1e-12)
    tau = m.delay_margin_s
    delayed = find_margins(lambda w: sys(1j * w) * np.exp(-1j * w * tau), 1.0, 1e6)
    assert min(abs(p) for p in delayed.phase_margins_deg) == pytest.approx(0.0, abs=1e-7)


# -- crossings closer than the grid spacing ---------------------------------------------------
def _grid(f_min, f_max, ppd=200):
    n = int(math.ceil(math.log10(f_max / f_min) * ppd)) + 1
    return np.linspace(math.log(2 * math.pi * f_min), math.log(2 * math.pi * f_max), n)


def test_two_gain_crossings_one_percent_apart_beside_a_high_q_resonance():
    f_min, f_max = 10.0, 1e6
    x = _grid(f_min, f_max)
    # put the resonance midway between two grid points: both crossings then fall between them
    w_r = math.exp(0.5 * (x[700] + x[701]))
    q = 200.0
    delta = 0.005  # crossings at w_r (1 -+ delta) approximately: 1 % apart
    k = w_r * math.sqrt(4 * delta**2 + 1 / q**2)
    sys = control.tf([k], [1, 0]) * control.tf([w_r**2], [1, w_r / q, w_r**2])
    response = _tf_response(sys)
    # a coarse reading of the grid sees only the main crossover
    on_grid = np.abs(response(np.exp(x))) >= 1
    assert np.count_nonzero(on_grid[1:] != on_grid[:-1]) == 1
    m = find_margins(response, f_min, f_max)
    _gm, _pm, _wpc, wgc = _control_all(sys)
    assert len(wgc) == 3
    assert m.gain_crossovers_hz == pytest.approx(np.sort(wgc) / (2 * math.pi), rel=1e-9)
    upper = m.gain_crossovers_hz[1:]
    assert upper[1] / upper[0] - 1 == pytest.approx(0.01, rel=0.05)


def test_phase_dipping_through_minus_180_between_two_grid_points():
    f_min, f_max = 1.0, 1e4
    x = _grid(f_min, f_max)
    centre = 0.5 * (x[300] + x[301])
    half = 0.004  # crossings at centre -+ half, 0.8 % apart in frequency

    def response(w):
        # phase -180 deg + 0.057 deg (u^2 - 1)/(u^2 + 1): below -180 deg only for |u| < 1
        u = (np.log(w) - centre) / half
        return 0.5 * np.exp(1j * (-math.pi + 1e-3 * (u**2 - 1) / (u**2 + 1)))

    # both neighbouring grid points lie above -180 deg: the grid alone sees no crossing
    t_grid = response(np.exp(x[300:302]))
    assert np.all(t_grid.imag < 0)

    m = find_margins(response, f_min, f_max)
    expected = np.exp([centre - half, centre + half]) / (2 * math.pi)
    assert m.phase_crossovers_hz == pytest.approx(expected, rel=1e-12)
    assert m.gain_margin_db == pytest.approx(20 * math.log10(2), rel=1e-12)
    assert math.isnan(m.crossover_hz) and math.isnan(m.phase_margin_deg)


def test_very_high_q_resonance_is_resolved():
    q = 1e4
    w_r = 2 * math.pi * 3e3
    sys = control.tf([2e3], [1, 0]) * control.tf([w_r**2], [1, w_r / q, w_r**2])
    m = find_margins(_tf_response(sys), 1.0, 1e6)
    _gm, pm, wpc, wgc = _control_all(sys)
    assert m.gain_crossovers_hz == pytest.approx(np.sort(wgc) / (2 * math.pi), rel=1e-9)
    assert m.phase_crossovers_hz == pytest.approx(np.sort(wpc) / (2 * math.pi), rel=1e-9)


# -- no crossings -----------------------------------------------------------------------------
def test_loop_gain_below_one_everywhere():
    m = find_margins(lambda w: 0.5 / (1 + 1j * w / 100), 1.0, 1e6)
    assert m.gain_crossovers_hz == () and m.phase_crossovers_hz == ()
    assert math.isnan(m.crossover_hz) and math.isnan(m.phase_margin_deg)
    assert m.gain_margin_db == math.inf
    assert m.delay_margin_s == math.inf
    assert m.gain_reduction_margin_db is None
    assert not m.conditionally_stable


def test_loop_gain_above_one_in_the_whole_range():
    m = find_margins(lambda w: 1e9 / (1j * w), 1.0, 1e3)
    assert m.gain_crossovers_hz == ()
    assert math.isnan(m.crossover_hz)


# -- physical laws ----------------------------------------------------------------------------
def test_delay_margin_brings_phase_margin_to_zero():
    comp = synthesize_k_factor(plant_1(2 * math.pi * 25e3), 25e3, 60.0, "type3")
    base = find_margins(lambda w: plant_1(w) * comp.freqresp(w), 100.0, 1e6)
    assert base.delay_margin_s == pytest.approx(math.radians(60.0) / (2 * math.pi * 25e3))
    tau = base.delay_margin_s
    delayed = find_margins(
        lambda w: plant_1(w) * comp.freqresp(w) * np.exp(-1j * w * tau), 100.0, 1e6
    )
    assert delayed.crossover_hz == pytest.approx(25e3, rel=1e-9)
    assert delayed.phase_margin_deg == pytest.approx(0.0, abs=1e-7)


def test_gain_reduction_margin_is_where_the_closed_loop_turns_unstable():
    """Conditionally stable K-factor loop (Nyquist): stable as designed, unstable once the gain
    drops by more than the margin to gain reduction, decided from the closed-loop poles."""
    comp = synthesize_k_factor(plant_1(2 * math.pi * 25e3), 25e3, 60.0, "type3")
    m = find_margins(lambda w: plant_1(w) * comp.freqresp(w), 100.0, 1e6)
    assert m.conditionally_stable
    par = R / (R + RC)
    a = np.array([[-par * RC / L, -par / L], [par / C, -1 / ((R + RC) * C)]])
    plant = (a, np.array([VG / (VM * L), 0.0]), np.array([par * RC, par]), 0.0)

    def stable_at(reduction_db):
        scaled = comp.with_gain(comp.w_i * 10 ** (-reduction_db / 20))
        return analyze_loops(*plant, scaled, f_min_hz=10.0, f_max_hz=1e6)[0].closed_loop_stable

    grm = m.gain_reduction_margin_db
    assert stable_at(0.0)
    assert stable_at(grm - 0.05)
    assert not stable_at(grm + 0.05)


def test_gain_margin_is_the_gain_increase_that_destabilises():
    sys = LOOPS["third-order type-0 loop"]()
    m = find_margins(_tf_response(sys), 1e-3, 1e5)
    k_lim = 10 ** (m.gain_margin_db / 20)
    for factor, stable in ((0.999, True), (1.001, False)):
        poles = control.feedback(sys * k_lim * factor, 1).poles()
        assert bool(np.all(poles.real < 0)) is stable


def test_open_loop_unstable_plant_is_not_called_stable():
    """P = 1/(1 - s/a) (a right-half-plane pole) with w_i/s: phase -90 + atan(w/a) never
    reaches -180 deg and the PM exceeds 90 deg, yet s^2 - a s - a w_i has roots in the RHP."""
    pole = 2 * math.pi * 100.0
    plant = (np.array([[pole]]), np.array([pole]), np.array([-1.0]), 0.0)
    w = np.array([2 * math.pi * 10.0, 2 * math.pi * 1e4])
    assert plant_freqresp(*plant, w)[0] == pytest.approx(1 / (1 - 1j * w / pole), rel=1e-12)
    comp = Compensator("type1", 2 * math.pi * 1e3, strategy="manual")
    result = analyze_loops(*plant, comp, f_min_hz=1.0, f_max_hz=1e6)[0]
    assert result.phase_margin_deg > 90.0
    assert result.gain_margin_db == math.inf
    assert not result.closed_loop_stable
    assert max(p.real for p in result.closed_loop_poles) > 0
    sys = comp.to_control() * control.ss(*plant)
    ref = np.sort_complex(control.feedback(sys, 1).poles())
    assert np.sort_complex(np.array(result.closed_loop_poles)) == pytest.approx(ref, rel=1e-9)


# -- batch ------------------------------------------------------------------------------------
def test_batch_equals_single():
    gains = np.array([0.5, 2.0, 8.0, 40.0])
    w_p = 2 * math.pi * 5e3

    def batch(omega):
        omega = np.asarray(omega)
        s = 1j * omega
        if omega.ndim == 1:
            return gains[:, None] * 1e4 / (s * (1 + s / w_p) ** 2)
        return gains[:, None] * 1e4 / (s * (1 + s / w_p) ** 2)

    many = find_margins_batch(batch, 1.0, 1e6)
    assert len(many) == 4
    for g, m in zip(gains, many, strict=True):
        one = find_margins(lambda w, g=g: g * 1e4 / (1j * w * (1 + 1j * w / w_p) ** 2), 1.0, 1e6)
        assert isinstance(m, LoopMargins)
        assert m.crossover_hz == pytest.approx(one.crossover_hz, rel=1e-12)
        assert m.phase_margin_deg == pytest.approx(one.phase_margin_deg, abs=1e-10)
        assert m.phase_crossovers_hz == pytest.approx(one.phase_crossovers_hz, rel=1e-12)
        assert m.gain_margin_db == pytest.approx(one.gain_margin_db, abs=1e-10)
    # python-control: the highest gain is unstable, GM = -16.1 dB; loopwright reports it as the
    # phase crossing with |T| > 1 (a margin to gain reduction) and a negative phase margin
    sys = control.tf([40.0 * 1e4], [1, 0]) * control.tf([1], [1 / w_p, 1]) ** 2
    gm, pm, *_ = control.stability_margins(sys)
    assert gm < 1 and pm < 0
    assert many[-1].gain_reduction_margin_db == pytest.approx(-20 * math.log10(gm), abs=1e-7)
    assert many[-1].gain_margin_db == math.inf
    assert many[-1].phase_margin_deg == pytest.approx(pm, abs=1e-7)
    assert not many[-1].conditionally_stable
    wc = 2 * math.pi * many[-1].crossover_hz
    assert many[-1].delay_margin_s == pytest.approx(math.radians(360.0 + pm) / wc, rel=1e-9)


# -- bad input --------------------------------------------------------------------------------
def _integrator(w):
    return 1e3 / (1j * np.asarray(w))


@pytest.mark.parametrize(
    "kwargs, key",
    [
        (dict(f_min_hz=0.0, f_max_hz=1e3), "f_min_hz"),
        (dict(f_min_hz=-1.0, f_max_hz=1e3), "f_min_hz"),
        (dict(f_min_hz=10.0, f_max_hz=10.0), "f_max_hz"),
        (dict(f_min_hz=10.0, f_max_hz=math.inf), "f_max_hz"),
        (dict(f_min_hz=1.0, f_max_hz=1e3, points_per_decade=5), "points_per_decade"),
    ],
)
def test_bad_range(kwargs, key):
    with pytest.raises(DesignError, match=key):
        find_margins(_integrator, **kwargs)


def test_bad_response_shape():
    with pytest.raises(DesignError, match="response"):
        find_margins(lambda w: np.ones((2, np.size(w))), 1.0, 1e3)
    with pytest.raises(DesignError, match="response"):
        find_margins_batch(lambda w: np.ones(np.size(w)), 1.0, 1e3)


def test_nan_response_yields_no_crossings():
    m = find_margins(lambda w: np.full(np.shape(w), np.nan + 0j), 1.0, 1e3)
    assert m.gain_crossovers_hz == () and m.phase_crossovers_hz == ()


def test_compensator_response_shape_is_accepted():
    comp = Compensator("type1", 1e3, strategy="manual")
    m = find_margins(comp.freqresp, 1.0, 1e5)
    assert m.crossover_hz == pytest.approx(1e3 / (2 * math.pi), rel=1e-12)
    assert m.phase_margin_deg == pytest.approx(90.0, abs=1e-9)


# -- batches that list their poles and zeros: intervals decided by bounds on ln T -------------
def _resonant_plant(w_r, q):
    """P = w_r^2 / (s^2 + (w_r/q) s + w_r^2) as a state-space model (one loop)."""
    a = np.array([[0.0, 1.0], [-(w_r**2), -w_r / q]])
    return a, np.array([0.0, w_r**2]), np.array([1.0, 0.0]), 0.0


class _Counting:
    """Forwards a batch response and its optional protocol, counting evaluated points."""

    def __init__(self, response):
        self.response, self.points = response, 0
        self.singularities = response.singularities

    def __call__(self, omega):
        self.points += np.size(omega)
        return self.response(omega)

    def pointwise(self, loops, omega):
        self.points += np.size(omega)
        return self.response.pointwise(loops, omega)

    def on_grid(self, loops, index, omega_grid):
        self.points += np.size(index)
        return self.response.on_grid(loops, index, omega_grid)


def test_gain_pairs_one_percent_apart_beside_q50_resonances_with_the_coarse_pass():
    """Two gain crossings about 1 % apart on the flank of a Q = 50 resonance (peak |T| = 1.1,
    1 dB): python-control finds three crossings per loop; the batch search, which decides
    most of the grid from the plants' poles and zeros, finds the same three in each of 32
    loops whose resonances sit on grid points, between them, on points of the first
    5-per-decade pass and inside its intervals."""
    from loopwright.loop import _loop_response, _ModalPlant

    f_min, f_max = 10.0, 1e6
    x = _grid(f_min, f_max)
    q = 50.0
    delta = 0.005  # crossings at w_r (1 -+ delta) approximately: 1 % apart
    place = np.concatenate([[0.0, 0.5, 20.0, 20.5, 7.0, 39.5], np.linspace(0.1, 39.9, 26)])
    w_r = np.exp(x[640] + place * (x[1] - x[0]))  # 640: a point of the first pass
    k = place.size
    a = np.zeros((k, 2, 2))
    a[:, 0, 1] = 1.0
    a[:, 1, 0] = -(w_r**2)
    a[:, 1, 1] = -w_r / q
    b = np.zeros((k, 2))
    b[:, 1] = w_r**2
    # T = (w_ref / s) P with the loop gain in c: |T| peaks at 1.1 beside each resonance
    w_ref = 1e3
    c = np.zeros((k, 2))
    c[:, 0] = w_r * math.sqrt(4 * delta**2 + 1 / q**2) / w_ref
    comp = Compensator("type1", w_ref, strategy="manual")
    results = analyze_loops(a, b, c, np.zeros(k), comp, f_min_hz=f_min, f_max_hz=f_max)
    for i, res in enumerate(results):
        sys = comp.to_control() * control.ss(a[i], b[i][:, None], c[i][None, :], 0.0)
        _gm, pm, _wpc, wgc = _control_all(sys)
        assert len(wgc) == 3
        found = res.margins
        assert found.gain_crossovers_hz == pytest.approx(np.sort(wgc) / (2 * math.pi), rel=1e-9)
        assert found.phase_margins_deg == pytest.approx(pm[np.argsort(wgc)], abs=1e-7)
        upper = found.gain_crossovers_hz[1:]
        assert upper[1] / upper[0] - 1 == pytest.approx(0.01, rel=0.1)
    # the same search through the batch interface evaluates a small part of the grid
    counting = _Counting(_loop_response(_ModalPlant(a, b, c, np.zeros(k)), comp, 0.0))
    again = find_margins_batch(counting, f_min, f_max)
    for res, m in zip(results, again, strict=True):
        assert m.gain_crossovers_hz == pytest.approx(res.margins.gain_crossovers_hz, rel=1e-12)
    assert counting.points < 0.2 * k * x.size


def _near_touching_batch(rng, k):
    """Lightly damped plants (Q 5 ... 300) with an extra real pole; integrator gains put the
    resonance peak of |T| within +-3 % of 1, so the gain touches 0 dB or dips through it twice
    within the resonance."""
    w0 = 2 * np.pi * 10 ** rng.uniform(3, 4.5, k)
    q = 10 ** rng.uniform(0.7, 2.5, k)
    p_real = w0 * 10 ** rng.uniform(0.3, 2, k)
    a = np.zeros((k, 3, 3))
    a[:, 0, 1] = 1.0
    a[:, 1, 0] = -(w0**2)
    a[:, 1, 1] = -w0 / q
    a[:, 1, 2] = w0**2
    a[:, 2, 2] = -p_real
    b = np.zeros((k, 3))
    b[:, 2] = p_real
    c = np.zeros((k, 3))
    c[:, 0] = 1.0
    w_i = w0 / q * 10 ** rng.uniform(-0.013, 0.013, k)
    return (a, b, c, np.zeros(k)), w_i


def test_batch_search_finds_every_crossing_python_control_finds_near_touching_resonances():
    rng = np.random.default_rng(3)
    (a, b, c, d), w_i = _near_touching_batch(rng, 60)
    w_ref = 1e3  # the loop gain goes into c: one compensator for the batch
    comp = Compensator("type1", w_ref, strategy="manual")
    c = c * (w_i / w_ref)[:, None]
    results = analyze_loops(a, b, c, d, comp, f_min_hz=10.0, f_max_hz=1e7)
    counts = []
    for i, res in enumerate(results):
        sys = comp.to_control() * control.ss(a[i], b[i][:, None], c[i][None, :], d[i])
        _gm, _pm, wpc, wgc = _control_all(sys)
        found = res.margins
        for crossings, ref in ((found.gain_crossovers_hz, wgc), (found.phase_crossovers_hz, wpc)):
            ref = np.sort(ref[(ref > 2 * math.pi * 10.0) & (ref < 2 * math.pi * 1e7)])
            assert crossings == pytest.approx(ref / (2 * math.pi), rel=1e-9)
        counts.append(len(found.gain_crossovers_hz))
    assert counts.count(3) >= 10  # pairs beside the resonance are well represented
