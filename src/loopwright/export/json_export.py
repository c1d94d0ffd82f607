"""JSON description of a digital controller (``loopwright export --format json``), text only.

Field names follow the public contract; extra fields are additions. Non-finite numbers (an
infinite gain margin, a missing crossover) are written as ``null``.
"""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np

from loopwright.discrete import DigitalDesign, LoopFigures

__all__ = ["digital_dict", "render_json"]


def _num(value: Any) -> float | None:
    if value is None:
        return None
    v = float(value)
    return v if math.isfinite(v) else None


def _roots(values: np.ndarray) -> list[list[float]]:
    return [[float(np.real(r)), float(np.imag(r))] for r in np.asarray(values)]


def _loop(f: LoopFigures) -> dict[str, Any]:
    return {
        "crossover_hz": _num(f.crossover_hz),
        "phase_margin_deg": _num(f.phase_margin_deg),
        "gain_margin_db": _num(f.gain_margin_db),
        "closed_loop_stable": f.closed_loop_stable,
        "f_max_hz": _num(f.f_max_hz),
    }


def digital_dict(
    design: DigitalDesign,
    *,
    design_name: str | None = None,
    design_sha256: str | None = None,
) -> dict[str, Any]:
    """The controller of a digital design as a JSON-ready dictionary.

    Parameters
    ----------
    design : loopwright.discrete.DigitalDesign
        Result of :func:`loopwright.discrete.design_digital`.
    design_name : str, optional
        Recorded under ``"design"``.
    design_sha256 : str, optional
        SHA-256 of the design file text, recorded under ``"design"``.

    Returns
    -------
    dict
        Contract fields ``sample_rate_hz, method, prewarp_hz, delay_samples, b, a,
        fixed_point {format, b_int, a_int, shift}, loop_z {crossover_hz, phase_margin_deg,
        gain_margin_db}`` plus details (quantisation, continuous-with-delay loop, limit-cycle
        figures, warnings). For float32 designs the integer fields are ``null``.

    References
    ----------
    .. [1] ECMA-404, *The JSON Data Interchange Syntax*, 2nd ed., 2017.
    """
    opt = design.options
    ctl = design.controller
    q = design.quantisation
    fx = design.fixed_point
    fixed: dict[str, Any] = {
        "format": q.number_format,
        "b_int": list(fx.b_int) if fx else None,
        "a_int": list(fx.a_int) if fx else None,
        "shift": fx.shift if fx else None,
        "b_q": [float(v) for v in q.controller.b],
        "a_q": [float(v) for v in q.controller.a],
    }
    if fx is not None:
        fixed.update(
            {
                "word_bits": fx.word_bits,
                "guard_bits": fx.guard_bits,
                "signal_frac_bits": fx.signal_frac_bits,
                "history_frac_bits": fx.history_frac_bits,
                "input_limit": fx.input_limit,
                "u_min_int": fx.u_min_int,
                "u_max_int": fx.u_max_int,
                "integrator_adjusted": fx.integrator_adjusted,
                "rounding": "round-half-up: floor((acc + 2^(shift-1)) / 2^shift)",
                "accumulator_bits": 64,
            }
        )
    out: dict[str, Any] = {
        "sample_rate_hz": opt.sample_rate_hz,
        "method": opt.method,
        "prewarp_hz": _num(ctl.prewarp_hz),
        "delay_samples": opt.delay_samples,
        "b": [float(v) for v in ctl.b],
        "a": [float(v) for v in ctl.a],
        "fixed_point": fixed,
        "loop_z": _loop(design.loop_z),
        "loop_z_quantised": _loop(design.loop_z_quantised),
        "loop_continuous_delay": _loop(design.loop_continuous_delay),
        "crossover_design_hz": design.f_c_hz,
        "phase_lost_at_fc_deg": design.phase_lost_at_fc_deg,
        "delay_phase_estimate_deg": design.delay_phase_estimate_deg,
        "matched_infinite_zeros": opt.matched_infinite_zeros if opt.method == "matched" else None,
        "duty_limits": [opt.duty_min, opt.duty_max],
        "has_integrator": ctl.has_integrator,
        "difference_equation": "u[k] = sum_(i>=0) b[i] e[k-i] - sum_(i>=1) a[i] u[k-i]; "
        "e = sensed error [V], u = duty (0..1)",
        "quantisation": {
            "max_gain_error_db": _num(q.max_gain_error_db),
            "max_phase_error_deg": _num(q.max_phase_error_deg),
            "f_band_hz": [float(q.f_band_hz[0]), float(q.f_band_hz[1])],
            "max_pole_shift": _num(q.max_pole_shift),
            "max_zero_shift": _num(q.max_zero_shift),
            "poles": _roots(q.poles),
            "poles_quantised": _roots(q.poles_quantised),
            "zeros": _roots(q.zeros),
            "zeros_quantised": _roots(q.zeros_quantised),
            "integrator_exact": q.integrator_exact,
            "unstable_poles": _roots(np.array(q.unstable_poles)),
        },
        "limit_cycle": None,
        "warnings": list(design.warnings),
    }
    lc = design.limit_cycle
    if lc is not None:
        out["limit_cycle"] = {
            "adc_lsb_v": lc.adc_lsb_v,
            "adc_lsb_output_v": lc.adc_lsb_output_v,
            "dpwm_counts": lc.dpwm_counts,
            "dpwm_bits": lc.dpwm_bits,
            "dpwm_lsb_output_v": lc.dpwm_lsb_output_v,
            "counts_needed": lc.counts_needed,
            "bits_needed": lc.bits_needed,
            "clock_needed_hz": lc.clock_needed_hz,
            "dpwm_finer_than_adc": lc.dpwm_finer_than_adc,
            "integral_action": lc.integral_action,
            "integral_gain_lsb": _num(lc.integral_gain_lsb),
            "small_integral_gain": lc.small_integral_gain,
        }
    if design_name is not None or design_sha256 is not None:
        out["design"] = {"name": design_name, "sha256": design_sha256}
    return out


def render_json(
    design: DigitalDesign,
    *,
    design_name: str | None = None,
    design_sha256: str | None = None,
) -> str:
    """JSON text of :func:`digital_dict` (2-space indent, trailing newline, strict JSON).

    Parameters
    ----------
    design : loopwright.discrete.DigitalDesign
    design_name, design_sha256 : str, optional
        See :func:`digital_dict`.

    Returns
    -------
    str

    References
    ----------
    .. [1] ECMA-404, *The JSON Data Interchange Syntax*, 2nd ed., 2017.
    """
    data = digital_dict(design, design_name=design_name, design_sha256=design_sha256)
    return json.dumps(data, indent=2, allow_nan=False) + "\n"
