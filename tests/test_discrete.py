"""loopwright.discrete: independent cross-checks, options, errors and warnings.

Outside references used here:
* scipy.signal (cont2discrete 'zoh' at a finer step, dlsim, lfilter) and python-control
  (sample_system 'zoh' / 'matched', feedback, frequency response) as reference libraries;
* exact integer arithmetic (Python ints, fractions) for the rounding rule;
* the sampled-data model with delay of K. J. Astrom, B. Wittenmark, *Computer-Controlled
  Systems*, 3rd ed., 1997, ch. 2 (from memory), checked here against a fine-step simulation.
"""

from __future__ import annotations

import math
import warnings
from fractions import Fraction

import control
import numpy as np
import pytest
import scipy.signal
from hypothesis import given, settings
from hypothesis import strategies as st

from loopwright.discrete import (
    DIGITAL_OPTION_KEYS,
    DigitalOptions,
    DiscreteController,
    SampledLoop,
    design_digital,
    discretize,
    fixed_point_coefficients,
    quantise,
    round_shift,
    run_fixed_point,
    run_float,
    sample_plant,
)
from loopwright.errors import DesignError, DesignWarning, ModelValidityWarning

VG, VM, L, C, RC, R = 36.0, 2.5, 22e-6, 100e-6, 30e-3, 4.0
FS, FC = 250e3, 10e3
TS = 1 / FS
P_NUM = np.array([RC * C, 1.0]) * VG / VM
P_DEN = np.array([L * C * (R + RC) / R, RC * C + L / R, 1.0])
PLANT = control.tf2ss(control.tf(P_NUM, P_DEN))


def _type3(f_c=FC, fs=FS, pm=50.0, delay=1.5):
    wc, ts = 2 * math.pi * f_c, 1 / fs
    p = np.polyval(P_NUM, 1j * wc) / np.polyval(P_DEN, 1j * wc) * np.exp(-1j * wc * delay * ts)
    phase = math.degrees(np.angle(p))
    phase = phase - 360.0 if phase > 0 else phase
    k = math.tan(math.radians((pm - phase - 90.0) / 4 + 45.0)) ** 2
    wz, wp = wc / math.sqrt(k), wc * math.sqrt(k)
    w_i = (1 / abs(p)) / abs((1 + 1j * wc / wz) ** 2 / (1j * wc * (1 + 1j * wc / wp) ** 2))
    num = w_i * np.polymul([1 / wz, 1.0], [1 / wz, 1.0])
    den = np.polymul([1.0, 0.0], np.polymul([1 / wp, 1.0], [1 / wp, 1.0]))
    return num, den


def _design(num=None, den=None, **kw):
    if num is None:
        num, den = _type3()
    f_c = kw.pop("f_c_hz", FC)
    opts = DigitalOptions(**{"sample_rate_hz": FS, **kw})
    return design_digital(
        num, den, PLANT, modulator_gain=1.0, sense_gain=1.0, options=opts, f_c_hz=f_c
    )


# ---- sampled plant ------------------------------------------------------------------------------
# a plant with direct feedthrough (D != 0): lead network 2 (1 + s/w1)/(1 + s/w2)
LEAD = control.tf2ss(control.tf([2.0 / 2e4, 2.0], [1.0 / 9e4, 1.0]))


@pytest.mark.parametrize("plant", [PLANT, LEAD], ids=["plant1", "feedthrough"])
@pytest.mark.parametrize("delay", [0.0, 0.5, 1.0, 1.25, 2.75])
def test_fractional_delay_matches_fine_step_simulation(delay, plant):
    """The delayed-input model against a ZOH simulation at Ts/4 (scipy cont2discrete + dlsim),
    where the command is held for 4 fine steps and shifted by 4*delay fine steps."""
    n_fine = 4
    sp = sample_plant(plant, TS, delay)
    rng = np.random.default_rng(7)
    u = rng.normal(size=60)
    a, b, c, d = sp.state_space()
    _, y_model, _ = scipy.signal.dlsim((a, b, c, d, TS), u)
    fine = scipy.signal.cont2discrete((plant.A, plant.B, plant.C, plant.D), TS / n_fine, "zoh")
    shift = int(round(delay * n_fine))
    u_fine = np.concatenate([np.zeros(shift), np.repeat(u, n_fine)])[: u.size * n_fine]
    _, y_fine, _ = scipy.signal.dlsim((*fine[:4], TS / n_fine), u_fine)
    np.testing.assert_allclose(y_model[:, 0], y_fine[::n_fine, 0], rtol=1e-9, atol=1e-9)


def test_integer_delay_equals_python_control_zoh():
    sp = sample_plant(PLANT, TS, 2.0)
    ref = control.sample_system(PLANT, TS, method="zoh")
    w = 2 * np.pi * np.logspace(1, np.log10(0.49 * FS), 50)
    z = np.exp(1j * w * TS)
    expected = np.array([complex(ref(zi)) for zi in z]) * z**-2
    np.testing.assert_allclose(sp.freqresp(w), expected, rtol=1e-9)


def test_sampled_plant_to_control_consistent():
    sp = sample_plant(PLANT, TS, 1.25)
    sysd = sp.to_control()
    w = 2 * np.pi * np.array([100.0, 5e3, 60e3])
    ref = np.array([complex(sysd(np.exp(1j * wi * TS))) for wi in w])
    np.testing.assert_allclose(sp.freqresp(w), ref, rtol=1e-9)
    assert sysd.dt == TS


def test_closed_loop_poles_match_python_control():
    num, den = _type3()
    ctl = discretize(num, den, TS, "tustin", prewarp_hz=FC)
    loop = SampledLoop(ctl, sample_plant(PLANT, TS, 1.0), 1.0)
    # polynomial route: roots of a_c(z) den_p(z) + b_c(z) num_p(z), plant via control.ss2tf
    plant_tf = control.ss2tf(sample_plant(PLANT, TS, 1.0).to_control())
    num_p, den_p = np.ravel(plant_tf.num[0][0]), np.ravel(plant_tf.den[0][0])
    char = np.polyadd(np.polymul(ctl.a, den_p), np.polymul(ctl.b, num_p))
    np.testing.assert_allclose(
        np.sort_complex(loop.closed_loop_poles()), np.sort_complex(np.roots(char)), atol=1e-7
    )
    assert loop.closed_loop_stable()


# ---- discretisation -----------------------------------------------------------------------------
def test_matched_dc_gain_without_integrator_equals_python_control():
    """Lead-lag (no integrator, as many zeros as poles): python-control's matched method (DC
    gain matched) is valid there and must agree."""
    num = 3.0 * np.polymul([1 / (2 * np.pi * 2e3), 1.0], [1 / (2 * np.pi * 5e3), 1.0])
    den = np.polymul([1 / (2 * np.pi * 40e3), 1.0], [1 / (2 * np.pi * 90e3), 1.0])
    ours = discretize(num, den, TS, "matched")
    ref = control.sample_system(control.tf(num, den), TS, method="matched")
    rn, rd = np.ravel(ref.num[0][0]), np.ravel(ref.den[0][0])
    np.testing.assert_allclose(ours.b, rn / rd[0], rtol=1e-9)
    np.testing.assert_allclose(ours.a, rd / rd[0], rtol=1e-9)
    assert not ours.has_integrator and math.isnan(ours.integral_gain)


def test_controller_to_control_and_freqresp_agree():
    num, den = _type3()
    ctl = discretize(num, den, TS, "matched", prewarp_hz=FC, matched_infinite_zeros="drop-one")
    sysd = ctl.to_control()
    w = 2 * np.pi * np.array([300.0, 10e3, 100e3])
    ref = np.array([complex(sysd(np.exp(1j * wi * TS))) for wi in w])
    np.testing.assert_allclose(ctl.freqresp(w), ref, rtol=1e-10)


def test_run_float_equals_lfilter():
    num, den = _type3()
    ctl = discretize(num, den, TS)
    e = np.random.default_rng(3).normal(size=200)
    np.testing.assert_allclose(
        run_float(ctl.b, ctl.a, e, dtype=np.float64),
        scipy.signal.lfilter(ctl.b, ctl.a, e),
        rtol=1e-9,
        atol=1e-12,
    )


@pytest.mark.parametrize(
    ("kwargs", "key"),
    [
        (dict(num=[1.0, 2.0, 3.0], den=[1.0, 0.0]), "num"),
        (dict(num=[1.0], den=[0.0, 0.0]), "den"),
        (dict(num=[np.nan], den=[1.0, 0.0]), "num"),
        (dict(num=[1.0], den=[1.0, 0.0], t_s=0.0), "t_s"),
        (dict(num=[1.0], den=[1.0, 0.0], method="bilinear"), "method"),
        (dict(num=[1.0], den=[1.0, 0.0], prewarp_hz=FS / 2), "prewarp_hz"),
        (dict(num=[1.0], den=[1.0, 0.0], method="matched"), "prewarp_hz"),
        (dict(num=[1.0], den=[1.0, 1.0], matched_infinite_zeros="none"), "matched_inf"),
    ],
)
def test_discretize_rejects_bad_input(kwargs, key):
    args = {"t_s": TS, **kwargs}
    with pytest.raises(DesignError, match=key) as info:
        discretize(**args)
    assert info.value.key.startswith(key)


# ---- fixed point --------------------------------------------------------------------------------
@given(st.integers(-(2**70), 2**70), st.integers(0, 40))
def test_round_shift_is_floor_of_half_up(x, shift):
    expected = math.floor(Fraction(x, 2**shift) + Fraction(1, 2)) if shift else x
    assert round_shift(x, shift) == expected


@settings(deadline=None, max_examples=30)
@given(st.lists(st.sampled_from([-(2**31), 2**31 - 1, 0, 1, -1]), min_size=5, max_size=60))
def test_q31_accumulator_never_overflows(e):
    num, den = _type3()
    fx = fixed_point_coefficients(discretize(num, den, TS, prewarp_hz=FC), "q31")
    u = run_fixed_point(
        fx.b_int,
        fx.a_int,
        fx.shift,
        e,
        history_frac_bits=fx.history_frac_bits,
        u_min_int=fx.u_min_int,
        u_max_int=fx.u_max_int,
        input_limit=fx.input_limit,
    )
    assert np.all((u >= fx.u_min_int) & (u <= fx.u_max_int))


def test_q31_overflow_detected_without_limits():
    num, den = _type3()
    fx = fixed_point_coefficients(discretize(num, den, TS, prewarp_hz=FC), "q31")
    with pytest.raises(OverflowError):
        run_fixed_point(fx.b_int, fx.a_int, fx.shift, [2**31 - 1] * 200)


@pytest.mark.parametrize("fmt", ["float32", "q15", "q31"])
def test_integrator_stays_exact(fmt):
    num, den = _type3()
    q = quantise(discretize(num, den, TS, prewarp_hz=FC), fmt)
    assert q.integrator_exact is True
    assert q.unstable_poles == ()
    assert math.fsum(q.controller.a.tolist()) == 0.0


def test_fixed_point_coefficients_fit_their_word():
    ctl = DiscreteController([0.99999, 0.5], [1.0, -0.999995], TS, "tustin")
    for fmt, bits in (("q15", 16), ("q31", 32)):
        fx = fixed_point_coefficients(ctl, fmt)
        assert all(-(2 ** (bits - 1)) <= v < 2 ** (bits - 1) for v in fx.b_int + fx.a_int)
        assert fx.a_int[0] == 2**fx.shift
        # max |c| = 1 gives g = 0, but a0 = 1 cannot be stored as 2^(bits-1): one guard bit
        assert fx.guard_bits == 1


def test_quantisation_moves_pole_onto_unit_circle():
    """Poles at radius 0.99999: Q14 rounds a2 = r^2 to exactly 1, i.e. onto the unit circle."""
    a = np.real(np.poly([0.99999 * np.exp(0.01j), 0.99999 * np.exp(-0.01j)]))
    q = quantise(DiscreteController([1.0, 0.0, 0.0], a, TS, "tustin"), "q15")
    assert q.fixed_point.a_int[-1] == 2**q.fixed_point.shift
    assert len(q.unstable_poles) == 2
    assert all(abs(p) >= 1.0 - 1e-12 for p in q.unstable_poles)


# ---- design_digital -----------------------------------------------------------------------------
def test_design_without_warnings_and_fields():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        d = _design(number_format="q31")
    assert d.warnings == ()
    assert d.loop_z.closed_loop_stable and d.loop_z_quantised.closed_loop_stable
    assert abs(d.loop_z_quantised.phase_margin_deg - d.loop_z.phase_margin_deg) < 1e-3
    assert d.fixed_point.number_format == "q31"
    # the loop seen by design_digital is the one a user assembles by hand
    f = np.array([1e3, 9981.0, 50e3])
    hand = SampledLoop(d.controller, sample_plant(PLANT, TS, 1.0)).freqresp(2 * np.pi * f)
    np.testing.assert_allclose(d.loop_response(f), hand, rtol=1e-12)


def test_design_applies_modulator_and_sense_gain():
    num, den = _type3()
    opts = DigitalOptions(sample_rate_hz=FS)
    gvd = control.tf2ss(control.tf(P_NUM * VM / 0.1, P_DEN))  # H = 0.1 sensed
    d = design_digital(
        num, den, gvd, modulator_gain=1 / VM, sense_gain=0.1, options=opts, f_c_hz=FC
    )
    ref = discretize(num, den, TS, prewarp_hz=FC)
    np.testing.assert_allclose(d.controller.b, ref.b / VM, rtol=1e-12)
    assert d.loop_z.crossover_hz == pytest.approx(9981.3, abs=2.0)


def test_unstable_sampled_loop_is_reported():
    num, den = _type3()
    with pytest.warns(DesignWarning, match="UNSTABLE"), pytest.warns(ModelValidityWarning):
        d = _design(10.0 * num, den)
    assert d.loop_z.closed_loop_stable is False


def test_crossover_above_fraction_of_fs_warns():
    num, den = _type3(f_c=30e3)
    with pytest.warns(ModelValidityWarning, match="sample rate"):
        d = _design(num, den, f_c_hz=30e3)
    assert any("sample rate" in w for w in d.warnings)


def test_quantisation_margin_change_warns():
    """The 250 kHz design run at 2.5 MHz: poles crowd z = 1 and Q15 moves the PM by ~60 deg."""
    num, den = _type3()
    opts = DigitalOptions(sample_rate_hz=2.5e6, number_format="q15")
    with pytest.warns(DesignWarning, match="change the phase margin"):
        d = design_digital(num, den, PLANT, modulator_gain=1, sense_gain=1, options=opts, f_c_hz=FC)
    assert abs(d.loop_z_quantised.phase_margin_deg - d.loop_z.phase_margin_deg) > 1.0
    # float32 is fine for the same design
    opts32 = DigitalOptions(sample_rate_hz=2.5e6, number_format="float32")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        d32 = design_digital(
            num, den, PLANT, modulator_gain=1, sense_gain=1, options=opts32, f_c_hz=FC
        )
    assert abs(d32.loop_z_quantised.phase_margin_deg - d32.loop_z.phase_margin_deg) < 0.01


def test_quantisation_cancelling_the_integrator_warns():
    """Designed for fs = 2.5 MHz (fc/fs = 1/250): the Q15 numerator sums to zero, a zero lands
    exactly on z = 1 and cancels the integrator; the closed loop keeps a pole on |z| = 1."""
    num, den = _type3(fs=2.5e6)
    opts = DigitalOptions(sample_rate_hz=2.5e6, number_format="q15")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        d = design_digital(num, den, PLANT, modulator_gain=1, sense_gain=1, options=opts, f_c_hz=FC)
    messages = [str(w.message) for w in caught if issubclass(w.category, DesignWarning)]
    assert any("integral action is lost" in m for m in messages)
    assert any("not asymptotically stable" in m for m in messages)
    assert sum(d.fixed_point.b_int) == 0 and d.quantisation.integral_action_lost
    assert d.loop_z.closed_loop_stable and not d.loop_z_quantised.closed_loop_stable


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        (dict(sample_rate_hz=-1.0), "sample_rate_hz"),
        (dict(delay_samples=0.25), "delay_samples"),
        (dict(delay_samples=True), "delay_samples"),
        (dict(method="bilinear"), "method"),
        (dict(number_format="q7"), "number_format"),
        (dict(prewarp_hz=200e3), "prewarp_hz"),
        (dict(adc_bits=12), "adc_bits"),
        (dict(adc_bits=0, adc_full_scale_v=3.3), "adc_bits"),
        (dict(adc_bits=12, adc_full_scale_v=-1.0), "adc_full_scale_v"),
        (dict(pwm_counts=1), "pwm_counts"),
        (dict(pwm_counts=400, pwm_clock_hz=100e6), "pwm_counts"),
        (dict(pwm_clock_hz=1e3), "pwm_clock_hz"),
        (dict(duty_min=0.5, duty_max=0.5), "duty_max"),
        (dict(duty_max=1.5), "duty_max"),
        (dict(crossover_fraction_limit=0.7), "crossover_fraction_limit"),
    ],
)
def test_options_name_the_design_file_key(kwargs, field):
    args = {"sample_rate_hz": FS, **kwargs}
    with pytest.raises(DesignError) as info:
        DigitalOptions(**args)
    assert info.value.key == DIGITAL_OPTION_KEYS[field]
    assert info.value.key.startswith("digital.")


def test_design_rejects_bad_inputs():
    num, den = _type3()
    opts = DigitalOptions(sample_rate_hz=FS)
    with pytest.raises(DesignError, match="crossover"):
        design_digital(num, den, PLANT, modulator_gain=1, sense_gain=1, options=opts, f_c_hz=2e5)
    with pytest.raises(DesignError, match="plant"):
        design_digital(
            num, den, (np.eye(2), np.ones((2, 2)), np.ones((1, 2)), np.zeros((1, 1))),
            modulator_gain=1, sense_gain=1, options=opts, f_c_hz=FC,
        )  # fmt: skip
    with pytest.raises(DesignError, match="compensator.num"):
        design_digital([1, 2, 3, 4, 5], den, PLANT, modulator_gain=1, sense_gain=1,
                       options=opts, f_c_hz=FC)  # fmt: skip


def test_computation_modules_do_not_import_matplotlib():
    import ast
    import pathlib

    import loopwright.discrete as mod

    src = pathlib.Path(mod.__file__)
    for path in [src, *sorted((src.parent / "export").glob("*.py")), src.parent / "_io.py"]:
        tree = ast.parse(path.read_text())
        names = [
            alias.name
            for node in ast.walk(tree)
            if isinstance(node, ast.Import | ast.ImportFrom)
            for alias in node.names
        ] + [
            node.module
            for node in ast.walk(tree)
            if isinstance(node, ast.ImportFrom) and node.module
        ]
        assert not any(n.startswith("matplotlib") for n in names), path
