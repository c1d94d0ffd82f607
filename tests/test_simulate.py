"""Switching simulator: API, steady-state detection, shooting, controllers, steps, wiring.

Each check names its outside reference: a physical law (integral action, the ideal
conversion ratio of Erickson & Maksimovic 2nd ed. ch. 2), the published check values of
METHODS (CL-3, common practice), or an independent route inside the product that is itself
checked elsewhere (shooting against the run; the vectorised period against the scalar one;
the digital step against ``loopwright.discrete.run_fixed_point``).
"""

from __future__ import annotations

import ast
import math
from pathlib import Path

import numpy as np
import pytest

from loopwright.errors import DesignError
from loopwright.simulate import (
    AnalogController,
    DigitalController,
    LineStep,
    LoadStep,
    measure_loop_gain,
    periodic_steady_state,
    simulate,
    simulate_design,
)
from loopwright.simulate._circuit import Circuit
from loopwright.topologies import TOPOLOGIES, PowerStageParameters

CONTRACT_FIELDS = {"mode", "cycles", "steady", "vout_avg", "vout_ripple_pp", "il_avg",
                   "il_ripple_pp", "duty_avg", "load_step"}  # fmt: skip
FS = 250e3
BUCK_A = PowerStageParameters(22e-6, 100e-6, 0.25, r_esr=0.03)
WZ, WP1, WP2 = 2 * math.pi * 3393.195, 2 * math.pi * 53051.65, math.pi * FS


def type3(wi=10807.1466 / 0.1):
    num = wi * WP1 * WP2 / WZ**2 * np.polymul([1, WZ], [1, WZ])
    den = np.polymul([1, 0], np.polymul([1, WP1], [1, WP2]))
    return num, den


@pytest.fixture(scope="module")
def analog():
    return AnalogController.from_transfer_function(
        *type3(), modulator_gain=1 / 2.5, sense_gain=0.1, v_ref=1.2
    )


# ------------------------------------------------------------------------------- API
def test_to_dict_has_contract_fields():
    r = simulate("buck", BUCK_A, v_in=36.0, f_sw=FS, duty=1 / 3)
    d = r.to_dict()
    assert list(d)[:9] == ["mode", "cycles", "steady", "vout_avg", "vout_ripple_pp", "il_avg",
                           "il_ripple_pp", "duty_avg", "load_step"]  # fmt: skip
    assert CONTRACT_FIELDS <= set(d) and d["load_step"] is None
    assert d["mode"] == "ccm" and d["loop"] == "open" and d["steady"] is True
    assert r.waveforms.t.size == 20 * 64 and r.waveforms.duty[0] == pytest.approx(1 / 3)


@pytest.mark.parametrize(
    ("kwargs", "key"),
    [
        (dict(duty=1.2), "duty"),
        (dict(duty=0.3, controller="x"), "controller"),
        (dict(), "controller"),
        (dict(duty=0.3, f_sw=-1.0), "power_stage.fsw"),
        (dict(duty=0.3, max_cycles=0), "cycles"),
        (dict(duty=0.3, v_in=0.0), "power_stage.vin"),
    ],
)
def test_bad_input_names_the_field(kwargs, key):
    args = dict(v_in=36.0, f_sw=FS) | kwargs
    with pytest.raises(DesignError, match=key):
        simulate("buck", BUCK_A, **args)


def test_unknown_topology():
    with pytest.raises(DesignError, match="topology"):
        simulate("flyback", BUCK_A, v_in=36.0, f_sw=FS, duty=0.3)


def test_controller_validation():
    with pytest.raises(DesignError, match="digital.delay"):
        DigitalController([1.0], [1.0], 0.1, 1.2, delay_samples=0.2)
    with pytest.raises(DesignError, match="compensator.num"):
        AnalogController.from_transfer_function([1, 0, 0], [1, 0], modulator_gain=1,
                                                sense_gain=0.1, v_ref=1)  # fmt: skip


def test_computation_modules_do_not_import_matplotlib():
    """STYLE: computation modules never import matplotlib (parsed imports)."""
    for path in Path(__file__).parents[1].joinpath("src/loopwright/simulate").glob("*.py"):
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module:
                names = [node.module]
            assert not any(n.startswith("matplotlib") for n in names), path


# ------------------------------------------------------------------- steady state
def test_lightly_damped_boost_steady_detection_and_shooting_agree():
    """Ideal boost B (Q = 13, Erickson & Maksimovic ch. 2: V = Vg/D', IL = V/(D' R)) from zero:
    the run needs thousands of periods; steady detection must not stop early, and the
    shooting solution (Newton on the exact one-period map) agrees."""
    p = PowerStageParameters(47e-6, 220e-6, 1 / 12)
    run = simulate("boost", p, v_in=12.0, f_sw=200e3, duty=0.5, tol=1e-5)
    shot = periodic_steady_state("boost", p, v_in=12.0, f_sw=200e3, duty=0.5)
    assert run.steady and shot.steady
    assert run.cycles > 5000
    assert shot.cycles < 100
    assert run.vout_avg == pytest.approx(shot.vout_avg, rel=3e-5)
    assert run.il_avg == pytest.approx(shot.il_avg, rel=3e-5)
    assert run.final_state == pytest.approx(shot.final_state, rel=3e-5)
    assert shot.vout_avg == pytest.approx(24.0, rel=5e-3)
    assert shot.il_avg == pytest.approx(4.0, rel=5e-3)


def test_cycle_cap_reports_not_steady():
    p = PowerStageParameters(47e-6, 220e-6, 1 / 12)
    r = simulate("boost", p, v_in=12.0, f_sw=200e3, duty=0.5, max_cycles=300)
    assert not r.steady and r.cycles == 300 and r.steady_cycle is None


def test_vectorised_period_equals_scalar_period(analog):
    """The batch path (used by the injection sweep) and the scalar path give the same period,
    with DCM events and with the natural-PWM crossing."""
    rng = np.random.default_rng(1)
    for topo, p, ctl, t_on in (
        ("buck", PowerStageParameters(22e-6, 100e-6, 1 / 40, rectifier="diode"), None, 0.9e-6),
        ("buck", BUCK_A, analog, None),
    ):
        c = Circuit(TOPOLOGIES[topo].build(p), FS, ctl)
        w = np.zeros((3, c.lay.size))
        w[:, 0] = [0.0, 0.1, 0.3]
        w[:, 1] = 12.0 + rng.normal(0, 0.05, 3)
        w[:, c.lay.u] = [36.0, 0.0, 0.0]
        w[:, c.lay.ref] = 1.2
        if ctl is not None:
            w[:, c.lay.z] = rng.normal(0, 1e-4, (3, ctl.order))
        ton = None if t_on is None else np.full(3, t_on)
        batch = c.cycle(w, np.zeros(3, np.int64), ton)
        for i in range(3):
            one = c.cycle(
                w[i : i + 1], np.zeros(1, np.int64), None if ton is None else ton[i : i + 1]
            )
            assert one.w_end[0] == pytest.approx(batch.w_end[i], rel=1e-12, abs=1e-12)
            assert one.t_on[0] == pytest.approx(batch.t_on[i], rel=1e-12)
            assert one.dcm[0] == batch.dcm[i]


# --------------------------------------------------------------------- closed loop
def test_analog_closed_loop_integral_action_and_shooting(analog):
    """Integral action (physical law): the period-averaged sensed error is zero in periodic
    steady state, so the average output is v_ref/H; shooting reaches the same orbit."""
    r = simulate("buck", BUCK_A, v_in=36.0, f_sw=FS, controller=analog)
    assert r.steady and r.loop == "analog"
    assert r.vout_avg == pytest.approx(12.0, rel=1e-5)
    assert r.duty_avg == pytest.approx(1 / 3, rel=5e-3)
    s = periodic_steady_state("buck", BUCK_A, v_in=36.0, f_sw=FS, controller=analog)
    assert s.steady and s.vout_avg == pytest.approx(12.0, rel=1e-9)
    assert s.duty_avg == pytest.approx(r.duty_avg, rel=1e-5)


def test_boost_closed_loop_soft_start_reaches_regulation():
    """Boost B with a type III at fc = 2 kHz (below its RHP zero / 5, common practice):
    from zero state with soft start, regulation at v_ref/H (integral action)."""
    from loopwright.averaging import analyze_stage

    p = PowerStageParameters(47e-6, 220e-6, 1 / 12, 0.05, 0.02, 0.025, "synchronous", 0.015)
    avg = analyze_stage(TOPOLOGIES["boost"], p, v_in=12.0, v_out=24.0, f_sw=200e3)
    wz, wp1, wp2 = 2 * math.pi * 782.6, 2 * math.pi * 10158.0, math.pi * 200e3

    def gc(s):
        return (1 + s / wz) ** 2 / (s * (1 + s / wp1) * (1 + s / wp2))

    wi = 1 / abs(gc(2j * math.pi * 2e3) * 0.1 * avg.freqresp("v_out", "d", [2e3])[0])
    num = wi * wp1 * wp2 / wz**2 * np.polymul([1, wz], [1, wz])
    den = np.polymul([1, 0], np.polymul([1, wp1], [1, wp2]))
    ctl = AnalogController.from_transfer_function(num, den, modulator_gain=1.0, sense_gain=0.1,
                                                  v_ref=2.4)  # fmt: skip
    r = simulate("boost", p, v_in=12.0, f_sw=200e3, controller=ctl)
    assert r.steady
    assert r.vout_avg == pytest.approx(24.0, rel=1e-5)
    assert r.duty_avg == pytest.approx(avg.op.duty, rel=5e-3)


def test_digital_loop_sampled_output_equals_reference():
    """Integral action of a sampled controller: the output at the sampling instants (period
    starts) equals v_ref/H; the average sits off it by the ripple's shape."""
    import scipy.signal

    num, den = type3()
    b, a, _ = scipy.signal.cont2discrete((0.4 * num / 2.5, den), 1 / FS, method="bilinear")
    ctl = DigitalController(np.ravel(b), np.ravel(a), sense_gain=0.1, v_ref=1.2)
    r = simulate("buck", BUCK_A, v_in=36.0, f_sw=FS, controller=ctl)
    assert r.steady and r.loop == "digital"
    sampled = r.waveforms.v_out[::64]
    assert sampled == pytest.approx(12.0, abs=1e-4)
    assert abs(r.vout_avg - 12.0) < r.vout_ripple_pp


def test_fixed_point_step_matches_run_fixed_point():
    """The per-cycle integer step equals the batch model loopwright.discrete.run_fixed_point."""
    from loopwright.discrete import DiscreteController, fixed_point_coefficients, run_fixed_point

    b = [0.9429243174, -0.8750470372, -0.9417027652, 0.8762685894]  # METHODS DG-2
    a = [1, -1.1380866645, 0.1428536463, -0.0047669817]
    fx = fixed_point_coefficients(DiscreteController(b, a, 4e-6, "tustin", has_integrator=True),
                                  "q15", duty_min=0.0, duty_max=0.95)  # fmt: skip
    ctl = DigitalController(fx.b_q, fx.a_q, 0.1, 1.2, arithmetic="fixed", fixed_point=fx)
    step = ctl.new_step()
    e = 0.01 * np.sin(np.arange(200) / 7.0) + 0.002
    e_int = [math.floor(x * 2.0**fx.signal_frac_bits + 0.5) for x in e]
    ref = run_fixed_point(fx.b_int, fx.a_int, fx.shift, e_int,
                          history_frac_bits=fx.history_frac_bits, u_min_int=fx.u_min_int,
                          u_max_int=fx.u_max_int, input_limit=fx.input_limit)  # fmt: skip
    got = [step(float(x)) for x in e]
    assert got == pytest.approx(list(ref / 2.0**fx.signal_frac_bits), abs=0)


# --------------------------------------------------------------------------- steps
def test_load_step_matches_averaged_closed_loop(analog):
    """METHODS CL-3 (common practice): 1 A step on the scenario-A loop, averaged model minimum
    deviation -52.5673 mV at 6.73 us. The switching model (step at a period boundary, natural
    PWM) agrees within 5 % and two periods."""
    r = simulate("buck", BUCK_A, v_in=36.0, f_sw=FS, controller=analog,
                 load_step=LoadStep(0.0, 1.0, kind="current"))  # fmt: skip
    ls = r.load_step
    assert ls is not None and ls.steady
    assert ls.deviation_v == pytest.approx(-52.5673e-3, rel=0.05)
    assert abs(ls.deviation_time_s - 6.73e-6) < 2 / FS
    assert ls.vout_avg_after == pytest.approx(12.0, rel=1e-5)
    assert 0 < ls.settling_time_s < ls.cycles / FS
    d = r.to_dict()["load_step"]
    assert set(d) >= {"from_a", "to_a", "deviation_v", "settling_time_s"}
    assert d["from_a"] == 0.0 and d["to_a"] == 1.0


def test_resistive_load_step_and_line_step(analog):
    """Resistive step 3 A -> 1.5 A: overshoot; line step 36 V -> 30 V: undershoot (the duty must
    rise, Erickson & Maksimovic ch. 2, V = D Vg); both return to v_ref/H."""
    r = simulate("buck", BUCK_A, v_in=36.0, f_sw=FS, controller=analog,
                 load_step=LoadStep(3.0, 1.5))  # fmt: skip
    assert r.load_step.deviation_v > 0
    assert r.load_step.vout_avg_after == pytest.approx(12.0, rel=1e-5)
    r2 = simulate("buck", BUCK_A, v_in=36.0, f_sw=FS, controller=analog,
                  line_step=LineStep(36.0, 30.0))  # fmt: skip
    ls = r2.line_step
    assert ls.deviation_v < 0 and ls.vout_avg_after == pytest.approx(12.0, rel=1e-5)
    assert r2.to_dict()["line_step"]["to_v"] == 30.0


# -------------------------------------------------------------------------- designs
DESIGN = """
name = "bench-lamp-buck"
[power_stage]
topology = "buck"
fsw = "250 kHz"
vin = "36 V"
vout = "12 V"
iout = "3 A"
[power_stage.inductor]
value = "22 uH"
[power_stage.capacitor]
value = "100 uF"
esr = "30 mohm"
[modulator]
ramp = "2.5 V"
[feedback]
vref = "1.2 V"
[target]
crossover = "25 kHz"
phase_margin = "60 deg"
"""


class _Comp:
    """A stand-in with the compensator interface (num/den, highest power first)."""

    def __init__(self):
        self.num, self.den = type3()


def test_simulate_design_wiring(tmp_path):
    from loopwright.spec import load_design

    path = tmp_path / "lamp.toml"
    path.write_text(DESIGN)
    spec = load_design(path)
    fractions = []
    r = simulate_design(spec, _Comp(), progress=fractions.append)
    assert r.steady and r.vout_avg == pytest.approx(12.0, rel=1e-5)
    assert fractions[-1] == 1.0 and fractions == sorted(fractions)
    o = simulate_design(spec, open_loop=True, max_cycles=500)
    assert o.loop == "open" and o.cycles <= 500
    with pytest.raises(DesignError, match="controller"):
        simulate_design(spec)
    s = simulate_design(spec, _Comp(), load_step=(3.0, 2.0))
    assert s.load_step.from_value == 3.0 and s.load_step.deviation_v > 0
    m = measure_loop_gain(spec, _Comp(), points=3)
    d = m.to_dict()
    assert len(d["f_hz"]) == 3 and len(d["measured_mag_db"]) == 3


def test_sampled_pwm_regulates_and_shooting_agrees():
    """Uniformly sampled modulator (duty from the control voltage at the period start): integral
    action still puts the average at v_ref/H; shooting finds the same orbit."""
    ctl = AnalogController.from_transfer_function(
        *type3(0.5 * 10807.1466 / 0.1), modulator_gain=0.4, sense_gain=0.1, v_ref=1.2,
        pwm="sampled",
    )  # fmt: skip
    r = simulate("buck", BUCK_A, v_in=36.0, f_sw=FS, controller=ctl)
    s = periodic_steady_state("buck", BUCK_A, v_in=36.0, f_sw=FS, controller=ctl)
    assert r.steady and s.steady
    assert r.vout_avg == pytest.approx(12.0, rel=1e-5)
    assert s.duty_avg == pytest.approx(r.duty_avg, rel=1e-5)


def _q15_controller(pwm_counts):
    import scipy.signal

    from loopwright.discrete import DiscreteController, fixed_point_coefficients

    num, den = type3()
    b, a, _ = scipy.signal.cont2discrete((0.4 * num / 2.5, den), 1 / FS, method="bilinear")
    dc = DiscreteController(np.ravel(b), np.ravel(a), 1 / FS, "tustin", has_integrator=True)
    fx = fixed_point_coefficients(dc, "q15", duty_min=0.0, duty_max=0.95)
    return DigitalController(fx.b_q, fx.a_q, 0.1, 1.2, arithmetic="fixed", fixed_point=fx,
                             adc_bits=12, adc_full_scale_v=3.3, pwm_counts=pwm_counts)  # fmt: skip


def test_fixed_point_digital_loop_with_fine_dpwm_regulates():
    """Q15 controller, 12-bit ADC over 3.3 V (8.06 mV at the output, METHODS DG-7) and an
    8192-count DPWM (4.4 mV at the output: finer than the ADC, Peterchev & Sanders 2003
    condition 1): the loop settles, the sampled output within one ADC step of v_ref/H."""
    r = simulate("buck", BUCK_A, v_in=36.0, f_sw=FS, controller=_q15_controller(8192))
    assert r.steady
    sampled = r.waveforms.v_out[::64]
    assert np.all(np.abs(sampled - 12.0) < 3.3 / 4096 / 0.1)
    assert np.allclose(r.waveforms.duty * 8192, np.round(r.waveforms.duty * 8192))


def test_coarse_dpwm_limit_cycles():
    """Peterchev & Sanders 2003 (METHODS DG-7): a 400-count DPWM moves the output by 90 mV per
    step, more than one ADC step (8.06 mV): no static equilibrium exists, so the duty keeps
    toggling between DPWM levels (a limit cycle, recognised as the steady state at the
    quantisation level) while the average stays within one DPWM step of v_ref/H."""
    r = simulate("buck", BUCK_A, v_in=36.0, f_sw=FS, controller=_q15_controller(400),
                 max_cycles=5000)  # fmt: skip
    levels = np.unique(np.round(r.waveforms.duty * 400))
    assert levels.size >= 2
    assert np.allclose(r.waveforms.duty * 400, np.round(r.waveforms.duty * 400))
    assert abs(r.vout_avg - 12.0) < 36.0 / 400
