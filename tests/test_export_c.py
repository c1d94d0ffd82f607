"""Generated C99 controller against the Python reference models (compiled and run here).

Outside references: the C99 standard's integer and floating-point semantics as implemented by
the system C compiler (ISO/IEC 9899:1999, with FLT_EVAL_METHOD == 0 and no FMA contraction),
and the direct-form-I difference equation (A. V. Oppenheim, R. W. Schafer, *Discrete-Time
Signal Processing*, from memory). Fixed point must match bit for bit (Q15 and Q31, including
input saturation, output saturation and anti-windup); float32 to 1e-6 relative.

The controller is the DG-2 design of METHODS 7.7 (plant 1, type III, Tustin at 10 kHz).
"""

from __future__ import annotations

import math
import shutil
import subprocess
import warnings

import control
import numpy as np
import pytest

from loopwright.discrete import DigitalOptions, design_digital, run_fixed_point, run_float
from loopwright.export import render_c, sha256_text

VG, VM, L, C, RC, R = 36.0, 2.5, 22e-6, 100e-6, 30e-3, 4.0
FS, FC = 250e3, 10e3

COMPILER = next((c for c in ("gcc", "cc", "clang") if shutil.which(c)), None)
pytestmark = pytest.mark.skipif(COMPILER is None, reason="no C compiler (gcc/cc/clang) found")


def _type3():
    ts, wc = 1 / FS, 2 * math.pi * FC
    p_num = np.array([RC * C, 1.0]) * VG / VM
    p_den = np.array([L * C * (R + RC) / R, RC * C + L / R, 1.0])
    p = np.polyval(p_num, 1j * wc) / np.polyval(p_den, 1j * wc) * np.exp(-1j * wc * 1.5 * ts)
    phase = math.degrees(np.angle(p)) - 360.0
    k = math.tan(math.radians((50.0 - phase - 90.0) / 4 + 45.0)) ** 2
    wz, wp = wc / math.sqrt(k), wc * math.sqrt(k)
    w_i = (1 / abs(p)) / abs((1 + 1j * wc / wz) ** 2 / (1j * wc * (1 + 1j * wc / wp) ** 2))
    num = w_i * np.polymul([1 / wz, 1.0], [1 / wz, 1.0])
    den = np.polymul([1.0, 0.0], np.polymul([1 / wp, 1.0], [1 / wp, 1.0]))
    # the digital controller realises Fm Gc: Gvd = plant 1 * VM, Fm = 1/VM
    plant = control.tf2ss(control.tf(p_num * VM, p_den))
    return num, den, plant


def _design(number_format, method="tustin", infinite_zeros="minus-one"):
    num, den, plant = _type3()
    opts = DigitalOptions(
        sample_rate_hz=FS,
        number_format=number_format,
        method=method,
        matched_infinite_zeros=infinite_zeros,
        duty_min=0.05,
        duty_max=0.9,
    )
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # this design must not raise any warning
        return design_digital(
            num, den, plant, modulator_gain=1 / VM, sense_gain=0.1, options=opts, f_c_hz=FC
        )


def _float_inputs(rng):
    e = list(rng.normal(0.0, 0.02, 300))
    e += [6.0] * 200 + [-6.0] * 150 + list(rng.normal(0.0, 0.05, 200)) + [0.0] * 20
    return np.array(e, dtype=np.float32)


def _fixed_inputs(rng, fx):
    lim = fx.input_limit
    scale = 2.0**fx.signal_frac_bits
    e = list(np.round(rng.normal(0.0, 0.02 * scale, 300)).astype(np.int64))
    top = 2 ** (fx.word_bits - 1) if fx.word_bits == 32 else 2**20
    e += [min(lim + 12345, top - 1)] * 30  # beyond the input limit: drives u to its maximum
    e += [max(-(lim + 7), -top)] * 30  # and to its minimum
    e += list(rng.integers(-lim, lim, 100, endpoint=True))
    e += list(np.round(rng.normal(0.0, 0.002 * scale, 200)).astype(np.int64)) + [0] * 20
    if fx.word_bits == 32:
        e += [2**31 - 1, -(2**31)] * 5  # extremes of int32
    else:
        e += [32767, -32768] * 5
    return [int(v) for v in e]


def _build_and_run(tmp_path, design, e_float, e_fixed, u0_float=None, u0_fixed=None):
    files = render_c(design, design_name="bench buck 1", design_text="name = 'bench buck 1'\n")
    for name, text in files.items():
        (tmp_path / name).write_text(text)
    p = "bench_buck_1"
    fx = design.fixed_point
    lines = [
        "#include <stdio.h>",
        f'#include "{p}.h"',
        f"static const float EF[{len(e_float)}] = {{"
        + ", ".join(f"{float(v):.9e}f" for v in e_float)
        + "};",
    ]
    if fx is not None:
        lines.append(
            f"static const int32_t EX[{len(e_fixed)}] = {{"
            + ", ".join(
                f"INT32_C({v})" if v > -(2**31) else "(-INT32_C(2147483647) - 1)" for v in e_fixed
            )
            + "};"
        )
    lines += [
        "int main(void)",
        "{",
        "    unsigned i;",
        f"    {p}_f32_state_t fs;",
    ]
    lines += (
        [f"    {p}_f32_reset(&fs, {float(u0_float):.9e}f);"]
        if u0_float is not None
        else [f"    {p}_f32_init(&fs);"]
    )
    lines += [
        f"    for (i = 0; i < {len(e_float)}u; ++i) {{",
        f'        printf("F %.9e\\n", (double){p}_f32_step(&fs, EF[i]));',
        "    }",
    ]
    if fx is not None:
        lines += [f"    {{ {p}_fx_state_t xs;"]
        lines += (
            [f"    {p}_fx_reset(&xs, {int(u0_fixed)});"]
            if u0_fixed is not None
            else [f"    {p}_fx_init(&xs);"]
        )
        lines += [
            f"    for (i = 0; i < {len(e_fixed)}u; ++i) {{",
            f'        printf("X %ld\\n", (long){p}_fx_step(&xs, EX[i]));',
            "    }",
            "    }",
        ]
    lines += ["    return 0;", "}", ""]
    (tmp_path / "driver.c").write_text("\n".join(lines))
    exe = tmp_path / "driver"
    cmd = [
        COMPILER,
        "-std=c99",
        "-O2",
        "-Wall",
        "-Wextra",
        "-pedantic",
        "-Werror",
        "-ffp-contract=off",
        str(tmp_path / "driver.c"),
        str(tmp_path / f"{p}.c"),
        "-o",
        str(exe),
    ]
    res = subprocess.run(cmd, capture_output=True, text=True, check=False)
    assert res.returncode == 0, res.stderr[:2000]
    run = subprocess.run([str(exe)], capture_output=True, text=True, check=True, timeout=60)
    out_f = np.array([float(x[2:]) for x in run.stdout.splitlines() if x.startswith("F ")])
    out_x = np.array([int(x[2:]) for x in run.stdout.splitlines() if x.startswith("X ")])
    return out_f, out_x


@pytest.mark.parametrize(
    ("number_format", "method", "infinite_zeros"),
    [
        ("q15", "tustin", "minus-one"),
        ("q31", "tustin", "minus-one"),
        ("q15", "matched", "drop-one"),
        ("q31", "zoh", "minus-one"),
        ("float32", "tustin", "minus-one"),
    ],
)
def test_c_matches_python_models(tmp_path, number_format, method, infinite_zeros):
    design = _design(number_format, method, infinite_zeros)
    rng = np.random.default_rng(20240601)
    e_float = _float_inputs(rng)
    fx = design.fixed_point
    e_fixed = _fixed_inputs(rng, fx) if fx is not None else []
    out_f, out_x = _build_and_run(tmp_path, design, e_float, e_fixed)

    opt = design.options
    ref_f = run_float(
        design.controller.b, design.controller.a, e_float, u_min=opt.duty_min, u_max=opt.duty_max
    )
    assert out_f.size == e_float.size
    np.testing.assert_allclose(out_f, ref_f.astype(float), rtol=1e-6, atol=1e-12)
    # the sequence exercises both clamps
    assert np.sum(ref_f == np.float32(opt.duty_max)) > 5
    assert np.sum(ref_f == np.float32(opt.duty_min)) > 5

    if fx is None:
        assert out_x.size == 0
        return
    ref_x = run_fixed_point(
        fx.b_int,
        fx.a_int,
        fx.shift,
        e_fixed,
        history_frac_bits=fx.history_frac_bits,
        u_min_int=fx.u_min_int,
        u_max_int=fx.u_max_int,
        input_limit=fx.input_limit,
    )
    assert np.array_equal(out_x, ref_x)
    # saturation and anti-windup events did happen, and the output also moved freely
    assert np.sum(ref_x == fx.u_max_int) > 5
    assert np.sum(ref_x == fx.u_min_int) > 5
    assert np.sum((ref_x > fx.u_min_int) & (ref_x < fx.u_max_int)) > 50
    if fx.input_limit < 2**31 - 1:
        assert max(abs(v) for v in e_fixed) > fx.input_limit  # input saturation exercised


def test_c_reset_bumpless(tmp_path):
    """reset(u0) preloads the output history: with zero error an integrating controller holds
    u0 (its denominator sums to zero), in C and in the models alike."""
    design = _design("q15")
    fx = design.fixed_point
    u0_f, u0_x = 0.4, int(0.4 * 2**15)
    zeros_f = np.zeros(10, dtype=np.float32)
    out_f, out_x = _build_and_run(tmp_path, design, zeros_f, [0] * 10, u0_f, u0_x)
    ref_f = run_float(design.controller.b, design.controller.a, zeros_f, u_initial=u0_f)
    np.testing.assert_allclose(out_f, ref_f, rtol=1e-6)
    np.testing.assert_allclose(out_f, 0.4, rtol=1e-6)
    ref_x = run_fixed_point(
        fx.b_int,
        fx.a_int,
        fx.shift,
        [0] * 10,
        history_frac_bits=fx.history_frac_bits,
        u_initial=u0_x,
    )
    assert np.array_equal(out_x, ref_x)
    assert np.all(out_x == u0_x)


def test_c_header_records_design(tmp_path):
    design = _design("q15")
    text = "name = 'bench buck 1'\n"
    files = render_c(design, design_name="bench buck 1", design_text=text)
    header = files["bench_buck_1.h"]
    assert sha256_text(text) in header
    assert "Q14" in header and "round half up" in header
    assert "250000 Hz" in header and "Tustin" in header
    assert "#include <stdint.h>" in header
    includes = [ln for ln in "".join(files.values()).splitlines() if ln.startswith("#include")]
    assert sorted(set(includes)) == ['#include "bench_buck_1.h"', "#include <stdint.h>"]
    # the loop figures in the comment are those of the design
    assert f"{design.loop_z.crossover_hz:.6g} Hz" in header
    with pytest.raises(ValueError, match="exactly one"):
        render_c(design, design_name="x")
    with pytest.raises(ValueError, match="64 hex"):
        render_c(design, design_name="x", design_sha256="abc")


@pytest.mark.skipif(COMPILER is None, reason="no C compiler (gcc, cc or clang) on this machine")
def test_example_with_digital_table_exports_bit_exact_c(tmp_path):
    """Done-means of the digital issue: the bundled example with [digital] goes through the
    whole flow (design file -> design -> export) and its C matches the Python model bit for
    bit (fixed point) and to 1e-6 (float)."""
    from pathlib import Path

    from loopwright.design import design as run_design
    from loopwright.spec import load_design

    example = Path(__file__).resolve().parents[1] / "examples" / "glacier-probe-inverter.toml"
    result = run_design(load_design(example))
    assert result.meets_targets
    dig = result.digital
    assert dig is not None and dig.fixed_point is not None
    assert dig.loop_z.closed_loop_stable
    rng = np.random.default_rng(7)
    e_float = _float_inputs(rng)
    e_fixed = _fixed_inputs(rng, dig.fixed_point)
    out_f, out_x = _build_and_run(tmp_path, dig, e_float, e_fixed)
    opt, fx = dig.options, dig.fixed_point
    ref_f = run_float(dig.controller.b, dig.controller.a, e_float, u_min=opt.duty_min,
                      u_max=opt.duty_max)  # fmt: skip
    np.testing.assert_allclose(out_f, ref_f.astype(float), rtol=1e-6, atol=1e-12)
    ref_x = run_fixed_point(
        fx.b_int, fx.a_int, fx.shift, e_fixed, history_frac_bits=fx.history_frac_bits,
        u_min_int=fx.u_min_int, u_max_int=fx.u_max_int, input_limit=fx.input_limit,
    )  # fmt: skip
    assert np.array_equal(out_x, ref_x)
