"""Build the design report: figures, tables, HTML from a Jinja2 template, summary.json.

The report folder holds ``index.html`` (opens offline: no scripts, no network, images beside
it), every figure as PNG (and SVG unless switched off) and ``summary.json``, which equals
``loopwright design --json``. Files are written atomically and never clobbered without
``force``.
"""

from __future__ import annotations

import io
import math
import os
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from .._io import write_files_atomically
from ..closed_loop import SETTLING_BAND, ClosedLoopSteps, design_steps
from ..errors import DesignError
from ..quantities import format_eng
from ..textout import to_json
from .data import ReportCurves, report_curves

__all__ = ["CAUTION", "Figure", "build_report", "render_report", "write_report"]

CAUTION = (
    "Switching converters carry hazardous voltages and stored energy, also after the input is "
    "removed. This report is the output of models: verify every design on hardware with "
    "suitable protection, and follow local codes and licensed engineering practice."
)

#: Fraction of fsw up to which the averaged model is trusted in this report. [-]
MODEL_LIMIT_FRACTION = 0.5


@dataclass(frozen=True)
class Figure:
    """One report figure: file stem, caption and the encoded images.

    Attributes
    ----------
    stem : str
        File name without extension.
    caption : str
        Caption shown under the image.
    png : bytes
        PNG image.
    svg : bytes or None
        SVG image (None when SVG output is off).
    """

    stem: str
    caption: str
    png: bytes
    svg: bytes | None


def _load_result(spec_or_result):
    from ..design import DesignResult, design
    from ..spec import DesignSpec, load_design

    if isinstance(spec_or_result, DesignResult):
        return spec_or_result
    if isinstance(spec_or_result, DesignSpec):
        spec = spec_or_result
    elif isinstance(spec_or_result, str | os.PathLike):
        spec = load_design(spec_or_result)
    else:
        raise DesignError(
            "must be a DesignResult, a DesignSpec or a design-file path, got "
            f"{type(spec_or_result).__name__}",
            key="spec_or_result",
        )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the result carries its warnings
        return design(spec)


def _encode(fig, stem: str, caption: str, dpi: float, svg: bool) -> Figure:
    import matplotlib

    png = io.BytesIO()
    fig.savefig(png, format="png", dpi=dpi, metadata={"Software": None})
    out_svg = None
    if svg:
        buf = io.BytesIO()
        with matplotlib.rc_context({"svg.fonttype": "none", "svg.hashsalt": "loopwright"}):
            fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
        out_svg = buf.getvalue()
    return Figure(stem, caption, png.getvalue(), out_svg)


def _figures(
    result, curves: ReportCurves, steps: ClosedLoopSteps | None, *, dpi: float, svg: bool
) -> list[Figure]:
    from .. import plotting as pl

    ps = result.spec.power_stage
    shade = MODEL_LIMIT_FRACTION * ps.f_sw
    out = []
    if curves.gvd:
        fig, _ = pl.plot_bode(
            curves.f_hz,
            curves.gvd,
            title="power stage Gvd (duty to output), CCM corners",
            failing=curves.failing,
            shade_above_hz=shade,
        )
        out.append(
            _encode(
                fig,
                "plant_gvd",
                "Control-to-output Gvd at every CCM corner "
                "(bold: nominal; dashed red: a corner that misses a target).",
                dpi,
                svg,
            )
        )
    if curves.gc is not None:
        fig, _ = pl.plot_bode(
            curves.f_hz, {"Gc": curves.gc}, title="compensator Gc", shade_above_hz=shade
        )
        out.append(
            _encode(
                fig, "compensator", "Compensator Gc (sensed error to modulator input).", dpi, svg
            )
        )
    if curves.loop:
        m = result.nominal.analysis.margins if result.nominal.analysis else None
        extra = (
            {"sampled loop (digital)": curves.sampled_loop}
            if curves.sampled_loop is not None
            else None
        )
        fig, _ = pl.plot_loop_gain(
            curves.f_hz,
            curves.loop,
            crossover_hz=m.crossover_hz if m else None,
            phase_margin_deg=m.phase_margin_deg if m else None,
            gain_margin_db=m.gain_margin_db if m else None,
            phase_crossover_hz=m.phase_crossovers_hz[0] if m and m.phase_crossovers_hz else None,
            failing=curves.failing,
            shade_above_hz=shade,
            extra=extra,
            extra_f_hz=curves.sampled_f_hz,
        )
        out.append(
            _encode(
                fig,
                "loop_gain",
                "Loop gain T = Gc Fm Gvd H, nominal (bold, "
                "crossover and margins marked) and every CCM corner.",
                dpi,
                svg,
            )
        )
        fig, _ = pl.plot_nyquist(curves.loop, failing=curves.failing)
        out.append(
            _encode(
                fig,
                "polar",
                "Polar view of T near the critical point -1 with the "
                "unit circle (faint: negative frequencies).",
                dpi,
                svg,
            )
        )
    if steps is not None:
        r = steps.reference
        est = _second_order_curve(result, r.t_s)
        fig, _ = pl.plot_step(
            r.t_s,
            r.y,
            final_value=r.final_value,
            title="reference step, normalised T/(1+T)",
            ylabel="output / final value",
            peak=(r.peak_time_s, r.final_value + r.peak_deviation),
            settling_time_s=r.settling_time_s,
            band=SETTLING_BAND * abs(r.final_value),
            estimate=est,
        )
        out.append(
            _encode(
                fig,
                "step_reference",
                "Closed-loop reference step of the nominal "
                "loop (dashed: second-order estimate from the phase margin).",
                dpi,
                svg,
            )
        )
        for s, stem, what in ((steps.load, "step_load", "load"), (steps.line, "step_line", "line")):
            if s is None:
                continue
            unit = "A" if what == "load" else "V"
            fig, _ = pl.plot_step(
                s.t_s,
                s.y,
                final_value=s.final_value,
                y_scale=1e3,
                title=f"{what} step of {format_eng(s.step, unit)}: output deviation",
                ylabel="output deviation [mV]",
                peak=(s.peak_time_s, s.peak_deviation),
                settling_time_s=s.settling_time_s,
                band=SETTLING_BAND * abs(s.peak_deviation),
            )
            cap = (
                "Output deviation for a step of the load current (closed-loop output "
                "impedance Zout/(1+T))"
                if what == "load"
                else "Output deviation for a step of the input voltage (Gvg/(1+T))"
            )
            out.append(_encode(fig, stem, cap + ", nominal loop.", dpi, svg))
    return out


def _second_order_curve(result, t):
    """Step of the second-order estimate ``wn^2/(s^2 + 2 zeta wn s + wn^2)`` (E&M sec. 9.4.2)."""
    from scipy.signal import step

    from ..loop import second_order_estimate

    a = result.nominal.analysis
    pm = a.phase_margin_deg if a else math.nan
    if not (math.isfinite(pm) and 0 < pm <= 90):
        return None
    est = second_order_estimate(pm)
    # natural frequency taken at the crossover (the estimate's usual reading)
    wn = 2 * math.pi * a.crossover_hz
    _, y = step(([wn * wn], [1.0, 2 * est.zeta * wn, wn * wn]), T=t)
    return t, y, f"second-order estimate (PM {pm:.1f} deg)"


# ----------------------------------------------------------------------------- tables
def _e(x, unit=""):
    return format_eng(x, unit)


def _deg(x):
    return "-" if x is None or (isinstance(x, float) and math.isnan(x)) else f"{x:.1f} deg"


def _db(x):
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    return "inf" if math.isinf(x) else f"{x:.1f} dB"


def _roots(roots_hz) -> str:
    from ..textout import roots_text

    return roots_text(roots_hz)


def _context(result, figures: Sequence[Figure], steps: ClosedLoopSteps | None) -> dict:
    spec = result.spec
    ps = spec.power_stage
    t = spec.target
    inputs = [
        ("topology", ps.topology),
        ("switching frequency", _e(ps.f_sw, "Hz")),
        (
            "input voltage",
            f"{_e(ps.v_in, 'V')} (range {_e(ps.v_in_range[0], 'V')} to "
            f"{_e(ps.v_in_range[1], 'V')})",
        ),
        ("output voltage", _e(ps.v_out, "V")),
        (
            "load current",
            f"{_e(ps.i_out, 'A')} (range {_e(ps.i_out_range[0], 'A')} to "
            f"{_e(ps.i_out_range[1], 'A')})",
        ),
        (
            "inductor",
            f"{_e(ps.inductance, 'H')}, DCR {_e(ps.r_dcr, 'ohm')}, tolerance "
            f"{100 * ps.l_tolerance:g} %",
        ),
        (
            "output capacitor",
            f"{_e(ps.c_out, 'F')}, ESR {_e(ps.r_esr, 'ohm')}, tolerance {100 * ps.c_tolerance:g} %",
        ),
        ("switch on-resistance", _e(ps.r_on, "ohm")),
        (
            "rectifier",
            f"{ps.rectifier}, {_e(ps.r_rect, 'ohm')}"
            + (f", vf {_e(ps.v_f, 'V')}" if ps.rectifier == "diode" else ""),
        ),
        ("PWM ramp (Fm = 1/ramp)", _e(spec.ramp_v, "V")),
        ("reference, divider H", f"{_e(spec.v_ref, 'V')}, H = {spec.sense_gain:.4g}"),
        ("crossover target", "auto" if t.crossover_hz is None else _e(t.crossover_hz, "Hz")),
        ("phase / gain margin targets", f"{t.phase_margin_deg:g} deg / {t.gain_margin_db:g} dB"),
        ("compensator asked", f"{t.compensator} ({t.strategy})"),
    ]
    ops, feats = [], []
    for cp in (result.plant.nominal, *result.plant.corners):
        op = cp.op
        ops.append(
            [
                cp.corner.name,
                _e(op.v_in, "V"),
                _e(op.i_out, "A"),
                f"{op.duty:.4f}",
                "-" if op.efficiency is None else f"{100 * op.efficiency:.1f} %",
                op.mode.upper(),
                _e(op.i_l_avg, "A"),
                _e(op.i_l_ripple_pp, "A"),
            ]
        )
        if cp.model is not None:
            f = cp.model.features()
            feats.append(
                [
                    cp.corner.name,
                    _e(f.dc_gain, "V"),
                    _e(f.f0_hz, "Hz"),
                    "-" if f.q is None else f"{f.q:.3g}",
                    _e(f.rhp_zero_hz, "Hz") if f.rhp_zero_hz else "none",
                    _e(f.esr_zero_hz, "Hz") if f.esr_zero_hz else "none",
                ]
            )
        else:
            feats.append([cp.corner.name, "DCM: CCM model not valid", "-", "-", "-", "-"])
    comp = result.compensator
    comp_rows = []
    if comp is not None:
        comp_rows = [
            ("type", f"{comp.kind} ({comp.strategy})"),
            ("integrator gain w_i", f"{comp.w_i:.5g} rad/s"),
            ("zeros", ", ".join(_e(z, "Hz") for z in comp.zeros_hz) or "none"),
            ("poles", ", ".join(["origin", *(_e(p, "Hz") for p in comp.poles_hz)])),
            ("K factor", "-" if comp.k is None else f"{comp.k:.4g}"),
            ("crossover aimed at", f"{_e(result.f_c_hz, 'Hz')}: {result.crossover_reason}"),
        ]
    parts = []
    r = result.realization
    if r is not None:
        for name in r.ideal_components:
            unit = "ohm" if name.startswith("R") else ("F" if name.startswith("C") else "S")
            parts.append(
                [name, _e(r.ideal_components[name], unit), _e(r.components.get(name), unit)]
            )
    margins = []
    for c in (result.nominal, *result.corners):
        a = c.analysis
        row = {
            "name": c.name,
            "ok": c.meets_targets,
            "fc": _e(a.crossover_hz, "Hz") if a else "-",
            "pm": _deg(a.phase_margin_deg) if a else "-",
            "gm": _db(a.gain_margin_db) if a else "-",
            "stable": ("yes" if a.closed_loop_stable else "NO") if a else "not proven",
            "rounded": "-"
            if c.meets_targets_rounded is None
            else ("pass" if c.meets_targets_rounded else "FAIL"),
            "failures": "; ".join(c.failures),
        }
        margins.append(row)
    step_rows = []
    if steps is not None:
        s = steps.reference
        step_rows.append(
            [
                "reference (normalised)",
                "1",
                f"{100 * s.overshoot:.2f} %",
                f"{s.peak_deviation:+.4f}",
                _e(s.peak_time_s, "s"),
                _e(s.settling_time_s, "s")
                if math.isfinite(s.settling_time_s)
                else f"> {_e(s.t_s[-1], 's')}",
            ]
        )
        for x, u in ((steps.load, "A"), (steps.line, "V")):
            if x is None:
                continue
            step_rows.append(
                [
                    f"{x.label} step",
                    _e(abs(x.step), u)
                    + (" (into the negative rail)" if x.step < 0 and u == "A" else ""),
                    "-",
                    _e(x.peak_deviation, "V"),
                    _e(x.peak_time_s, "s"),
                    _e(x.settling_time_s, "s")
                    if math.isfinite(x.settling_time_s)
                    else f"> {_e(x.t_s[-1], 's')}",
                ]
            )
        a = result.nominal.analysis
        if a is not None and 0 < a.phase_margin_deg <= 90:
            from ..loop import second_order_estimate

            est = second_order_estimate(a.phase_margin_deg)
            step_rows.append(
                [
                    f"second-order estimate from PM {a.phase_margin_deg:.1f} deg",
                    "1",
                    f"{100 * est.overshoot:.2f} %",
                    "-",
                    "-",
                    f"Q = {est.q:.3f}",
                ]
            )
    digital = None
    if result.digital is not None:
        dd = result.to_dict()["digital"]
        cont = result.nominal.analysis
        digital = {
            "rows": [
                ("sample rate", _e(dd["sample_rate_hz"], "Hz")),
                (
                    "method",
                    f"{dd['method']}"
                    + (f", prewarped at {_e(dd['prewarp_hz'], 'Hz')}" if dd["prewarp_hz"] else ""),
                ),
                ("delay", f"{dd['delay_samples']:g} samples"),
                ("b (error coefficients)", ", ".join(f"{v:.8g}" for v in dd["b"])),
                ("a (output coefficients)", ", ".join(f"{v:.8g}" for v in dd["a"])),
                (
                    "fixed point",
                    f"{dd['fixed_point']['format']}"
                    + (
                        f", shift {dd['fixed_point']['shift']}, "
                        f"b_int {dd['fixed_point']['b_int']}, "
                        f"a_int {dd['fixed_point']['a_int']}"
                        if dd["fixed_point"]["b_int"]
                        else ""
                    ),
                ),
            ],
            "cmp": [
                [
                    "continuous, no delay",
                    _e(cont.crossover_hz, "Hz") if cont else "-",
                    _deg(cont.phase_margin_deg) if cont else "-",
                    _db(cont.gain_margin_db) if cont else "-",
                    ("yes" if cont.closed_loop_stable else "NO") if cont else "-",
                ],
            ],
        }
        for key, label in (
            ("loop_continuous_delay", "continuous with delay"),
            ("loop_z", "sampled (z-domain)"),
            ("loop_z_quantised", "sampled, quantised coefficients"),
        ):
            lz = dd.get(key)
            if lz:
                digital["cmp"].append(
                    [
                        label,
                        _e(lz["crossover_hz"], "Hz"),
                        _deg(lz["phase_margin_deg"]),
                        _db(lz["gain_margin_db"] if lz["gain_margin_db"] is not None else math.inf),
                        "yes" if lz["closed_loop_stable"] else "NO",
                    ]
                )
    dcm = [
        cp.corner.name for cp in (result.plant.nominal, *result.plant.corners) if cp.model is None
    ]
    assumptions = [
        "Voltage-mode PWM control; loop gain T(s) = Gc(s) Fm Gvd(s) H with Fm = 1/ramp and "
        "H = vref/|vout|.",
        "Power stage: state-space averaged small-signal model in continuous conduction (CCM). "
        f"Averaging holds well below the switching frequency; curves above "
        f"{MODEL_LIMIT_FRACTION:g} fsw ({_e(MODEL_LIMIT_FRACTION * ps.f_sw, 'Hz')}) are shaded "
        "and are not to be trusted; the crossover should stay near or below "
        f"{t.max_crossover_fraction:g} fsw.",
        "Stability is decided from the closed-loop poles at every corner; the margins come second.",
        "Corners in discontinuous conduction (DCM) are NOT proven by this report"
        + (f": {', '.join(dcm)}." if dcm else " (none in this design)."),
        "Step responses are small-signal (linear) responses of the nominal loop: duty "
        "saturation, current limits and slew limits are not modelled. Load step = load range "
        "high minus low (50 % of full load without a range); line step = line range (10 % of "
        "vin without a range). Settling band: 2 % of the final value (reference) or of the "
        "peak deviation (disturbances).",
        "Error amplifier treated as ideal (gain-bandwidth and output swing not modelled).",
    ]
    if result.digital is not None:
        assumptions.append(
            "Digital loop: the delay is exact in the frequency responses and a "
            "Pade approximant in the closed-loop poles and step responses."
        )
    failing = result.failing_corners()
    return {
        "name": spec.name,
        "meets": result.meets_targets,
        "n_corners": 1 + len(result.corners),
        "failing": [(c.name, "; ".join(c.failures)) for c in failing],
        "inputs": inputs,
        "ops": ops,
        "feats": feats,
        "comp_rows": comp_rows,
        "parts": parts,
        "parts_series": (r.series_r, r.series_c, r.network) if r is not None else None,
        "margins": margins,
        "steps": step_rows,
        "digital": digital,
        "warnings": list(result.warnings),
        "assumptions": assumptions,
        "figures": [
            {
                "png": f"{f.stem}.png",
                "svg": f"{f.stem}.svg" if f.svg else None,
                "caption": f.caption,
            }
            for f in figures
        ],
        "caution": CAUTION,
        "source_name": Path(spec.source_path).name if spec.source_path else None,
        "version": _version(),
    }


def _version() -> str:
    from .. import __version__

    return __version__


# ----------------------------------------------------------------------------- assembly
def render_report(context: dict) -> str:
    """Render the HTML page from its context with the package's Jinja2 template.

    References
    ----------
    .. [1] WHATWG, *HTML Living Standard* (document structure, ``img`` and ``a`` elements).
    """
    import jinja2

    env = jinja2.Environment(
        loader=jinja2.PackageLoader("loopwright.report", "templates"),
        autoescape=jinja2.select_autoescape(["html", "j2"], default=True),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    return env.get_template("report.html.j2").render(**context)


def _simulation_section(result, steps, *, dpi, svg, progress=None):
    """Switching-level simulation against the averaged model: table rows and one figure."""
    import math

    from ..plotting import plot_measured_loop
    from ..simulate import measure_loop_gain, simulate_design

    spec = result.spec
    ps = spec.power_stage
    controller = result.digital if result.digital is not None else result.compensator
    op = result.plant.nominal.op
    sim = simulate_design(spec, controller)
    rows = [
        ("output voltage (average)", _e(op.v_out, "V"), _e(sim.to_dict()["vout_avg"], "V")),
        ("inductor current (average)", _e(op.i_l_avg, "A"), _e(sim.to_dict()["il_avg"], "A")),
        (
            "inductor ripple (peak-peak)",
            _e(op.i_l_ripple_pp, "A"),
            _e(sim.to_dict()["il_ripple_pp"], "A"),
        ),  # fmt: skip
        ("duty (average)", f"{op.duty:.4f}", f"{sim.to_dict()['duty_avg']:.4f}"),
    ]
    notes = [
        f"steady state {'reached' if sim.to_dict()['steady'] else 'NOT reached'} after "
        f"{sim.to_dict()['cycles']} switching periods"
    ]
    if steps is not None and steps.load is not None:
        lo, hi = ps.i_out_range
        if hi > lo:
            st = simulate_design(spec, controller, load_step=(lo, hi)).to_dict()["load_step"]
            if st:
                rows.append(
                    (
                        f"load step {_e(lo, 'A')} -> {_e(hi, 'A')}: peak deviation",
                        _e(steps.load.peak_deviation, "V"),
                        _e(st["deviation_v"], "V"),
                    )
                )
    meas = measure_loop_gain(spec, controller, points=8, progress=progress).to_dict()
    curves = report_curves(result, n_points=400)
    f = curves.f_hz
    t_nom = curves.loop["nominal"]
    fig, _ = plot_measured_loop(
        f, t_nom, meas["f_hz"], meas["measured_mag_db"], meas["measured_phase_deg"],
        f_sw_hz=ps.f_sw,
    )  # fmt: skip
    figure = _encode(fig, "loop_injection", "Loop gain: averaged model (line) and switching "
                     "model measured by injection (points), T = -Va/Vb", dpi, svg)  # fmt: skip
    worst_db = max(
        abs(a - b) for a, b in zip(meas["measured_mag_db"], meas["model_mag_db"], strict=True)
    )
    dph = [
        abs((a - b + 180.0) % 360.0 - 180.0)
        for a, b in zip(meas["measured_phase_deg"], meas["model_phase_deg"], strict=True)
    ]
    notes.append(
        f"injection at {len(meas['f_hz'])} frequencies: largest difference from the averaged "
        f"model {worst_db:.2f} dB and {max(dph) if dph else math.nan:.1f} deg"
    )
    return {"rows": rows, "notes": notes}, figure


def build_report(
    spec_or_result,
    *,
    dpi: float = 110,
    svg: bool = True,
    n_points: int = 400,
    simulate: bool = False,
    progress=None,
) -> dict[str, str | bytes]:
    """All files of a report, by name, without writing them.

    Parameters
    ----------
    spec_or_result : DesignResult, DesignSpec or path
        A finished design, a validated design, or a design file.
    dpi : float
        PNG resolution. [dots per inch]
    svg : bool
        Also write each figure as SVG.
    n_points : int
        Points of the frequency grid of the figures.
    simulate : bool
        Add a section comparing the switching-level simulation with the averaged model
        (steady state, load step, loop gain by injection); takes seconds.
    progress : callable, optional
        Called with the fraction done of the injection sweep.

    Returns
    -------
    dict of str to str or bytes
        ``index.html``, ``summary.json`` and ``<figure>.png`` / ``.svg``.

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, ch. 9.
    """
    result = _load_result(spec_or_result)
    curves = report_curves(result, n_points=n_points)
    steps = design_steps(result)
    figs = _figures(result, curves, steps, dpi=dpi, svg=svg)
    sim_ctx = None
    if simulate and result.compensator is not None:
        sim_ctx, sim_fig = _simulation_section(result, steps, dpi=dpi, svg=svg, progress=progress)
        figs = [*figs, sim_fig]
    files: dict[str, str | bytes] = {}
    ctx = _context(result, figs, steps)
    ctx["simulation"] = sim_ctx
    files["index.html"] = render_report(ctx)
    files["summary.json"] = to_json(result.to_dict()) + "\n"
    for f in figs:
        files[f"{f.stem}.png"] = f.png
        if f.svg is not None:
            files[f"{f.stem}.svg"] = f.svg
    return files


def write_report(
    spec_or_result,
    out_dir: str | os.PathLike,
    *,
    force: bool = False,
    dpi: float = 110,
    svg: bool = True,
    n_points: int = 400,
    simulate: bool = False,
    progress=None,
) -> Path:
    """Write the design report into a folder.

    Parameters
    ----------
    spec_or_result : DesignResult, DesignSpec or path
        What to report on (a path or spec is designed first).
    out_dir : path-like
        Report folder; created if missing.
    force : bool
        Replace the files of an existing report. Without it nothing is written when any of
        the report's files exists.
    dpi, svg, n_points
        As in :func:`build_report`.

    Returns
    -------
    pathlib.Path
        Path of the written ``index.html``.

    Raises
    ------
    FileExistsError
        A report file exists and ``force`` is false (nothing written).
    DesignError
        Bad design input (names the field).

    References
    ----------
    .. [1] IEEE Std 1003.1-2017 (POSIX), ``rename()`` (atomic replacement).
    """
    files = build_report(
        spec_or_result, dpi=dpi, svg=svg, n_points=n_points, simulate=simulate, progress=progress
    )
    out = Path(out_dir)
    if not force:
        existing = [n for n in files if (out / n).exists()]
        if existing:
            raise FileExistsError(
                f"refusing to overwrite the report in {out}: {', '.join(existing)} exist "
                "(use force / --force to replace them)"
            )
    write_files_atomically(out, files, force=force)
    return out / "index.html"
