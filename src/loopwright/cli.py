"""Command line: argument parsing and output only; the library does the work.

Exit codes: 0 ok, 1 targets not met (``check``), 2 bad input (a message names the field).
"""

from __future__ import annotations

import argparse
import sys
import warnings
from collections.abc import Sequence
from pathlib import Path

from . import __version__
from .errors import DesignError

__all__ = ["main"]

CAUTION = (
    "Caution: switching converters carry hazardous voltages and stored energy. loopwright's "
    "results are models; verify every design on hardware, and follow local codes and licensed "
    "practice."
)


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # argparse's own usage errors: exit 2, no traceback
        self.print_usage(sys.stderr)
        self.exit(2, f"loopwright: error: {message}\n")


def _err(msg: str) -> None:
    print(f"loopwright: error: {msg}", file=sys.stderr)


def _warn(lines: Sequence[str]) -> None:
    for w in lines:
        print(f"warning: {w}", file=sys.stderr)


# ----------------------------------------------------------------------------- verbs
def _cmd_new(args) -> int:
    from ._io import write_files_atomically
    from .starters import starter_text

    out = Path(args.output or f"{args.topology}.toml")
    try:
        write_files_atomically(
            out.parent if str(out.parent) else ".",
            {out.name: starter_text(args.topology)},
            force=args.force,
        )
    except FileExistsError:
        _err(f"{out} exists; choose another name with -o or replace it with --force")
        return 2
    print(f"wrote {out}: edit the power stage and targets, then run `loopwright plant {out}`")
    return 0


def _cmd_plant(args) -> int:
    from .plant import analyze_plant
    from .spec import load_design

    spec = load_design(args.file)
    if args.symbolic:
        return _plant_symbolic(spec, args)
    analysis = analyze_plant(spec)
    if args.json:
        from .textout import to_json

        print(to_json(analysis.to_dict()))
        _warn(analysis.warnings)
        return 0
    print(_plant_text(analysis))
    _warn(analysis.warnings)
    return 0


def _plant_symbolic(spec, args) -> int:
    from .symbolic import symbolic_plant

    ps = spec.power_stage
    print("Symbolic control-to-output transfer function (state-space averaging on symbols)")
    print(symbolic_plant(ps.topology).pretty())
    print()
    say = _progress(True)
    if say:
        say("deriving the lossy model on symbols (takes several seconds)")
    print(symbolic_plant(ps.topology, lossy=True, rectifier=ps.rectifier).pretty())
    return 0


def _plant_text(analysis) -> str:
    from .quantities import format_eng as e
    from .textout import roots_text, table

    spec = analysis.spec
    ps = spec.power_stage
    head = (
        f"{spec.name}: {ps.topology}, fsw {e(ps.f_sw, 'Hz')}, vin {e(ps.v_in, 'V')} "
        f"({e(ps.v_in_range[0], 'V')} to {e(ps.v_in_range[1], 'V')}), |vout| {e(ps.v_out, 'V')}, "
        f"L {e(ps.inductance, 'H')}, C {e(ps.c_out, 'F')}"
    )
    rows, prow = [], []
    for cp in (analysis.nominal, *analysis.corners):
        op = cp.op
        eff = "-" if op.efficiency is None else f"{100 * op.efficiency:.1f} %"
        if cp.model is not None:
            f = cp.model.features()
            feats = [
                e(f.dc_gain, "V"),
                e(f.f0_hz, "Hz"),
                "-" if f.q is None else f"{f.q:.3g}",
                e(f.rhp_zero_hz, "Hz") if f.rhp_zero_hz else "none",
                e(f.esr_zero_hz, "Hz") if f.esr_zero_hz else "none",
            ]
            prow.append([cp.corner.name, roots_text(f.poles_hz), roots_text(f.zeros_hz)])
        else:
            feats = ["(DCM)", "-", "-", "-", "-"]
            prow.append([cp.corner.name, "CCM model not valid (DCM)", ""])
        rows.append(
            [
                cp.corner.name,
                f"{op.duty:.4f}",
                e(op.v_out, "V"),
                e(op.i_l_avg, "A"),
                eff,
                op.mode.upper(),
                *feats,
            ]
        )
    t1 = table(
        [
            "corner",
            "duty",
            "vout",
            "IL avg",
            "eff",
            "mode",
            "Gvd(0)",
            "f0",
            "Q",
            "RHP zero",
            "ESR zero",
        ],
        rows,
    )
    t2 = table(["corner", "Gvd poles", "Gvd zeros"], prow)
    return "\n\n".join(
        [
            head,
            "Operating point and control-to-output features",
            t1,
            "Poles and zeros of Gvd(s)",
            t2,
            CAUTION,
        ]
    )


def _progress(enabled: bool):
    """Stage messages on stderr (only for a terminal, never in --json output)."""
    if not enabled or not sys.stderr.isatty():
        return None
    return lambda text: print(f"... {text}", file=sys.stderr, flush=True)


def _cmd_design(args) -> int:
    from .design import design
    from .spec import load_design

    spec = load_design(args.file)
    result = design(spec, progress=_progress(not args.json))
    if args.json:
        from .textout import to_json

        print(to_json(result.to_dict()))
        return 0
    print(_design_text(result))
    return 0


def _cmd_check(args) -> int:
    from .design import design
    from .spec import load_design

    spec = load_design(args.file)
    result = design(spec)
    bad = result.failing_corners()
    if result.compensator is None:
        print(f"FAIL {spec.name}: no compensator could be synthesised")
        for t in result.tried:
            print(f"  {t}")
        return 1
    rounded_bad = [c for c in (result.nominal, *result.corners) if c.meets_targets_rounded is False]
    if not bad and not rounded_bad:
        n = 1 + len(result.corners)
        print(
            f"PASS {spec.name}: {n} corner(s) meet PM >= {spec.target.phase_margin_deg:g} deg, "
            f"GM >= {spec.target.gain_margin_db:g} dB, closed loop stable"
        )
        return 0
    print(
        f"FAIL {spec.name}: {len(bad)} corner(s) miss the targets"
        + (f", {len(rounded_bad)} with rounded parts" if rounded_bad else "")
    )
    for c in bad:
        print(f"  {c.name}: " + "; ".join(c.failures))
    for c in rounded_bad:
        if c not in bad:
            print(f"  {c.name} (rounded parts): misses the targets")
    return 1


def _cmd_export(args) -> int:
    from ._io import write_files_atomically
    from .design import design
    from .export import render
    from .spec import load_design

    spec = load_design(args.file)
    if spec.digital is None:
        raise DesignError(
            "the design has no [digital] table; add sample_rate, delay, method and format",
            key="digital",
        )
    result = design(spec, progress=_progress(True))
    if result.digital is None:
        _err("no compensator could be synthesised, so there is nothing to export:")
        for t in result.tried:
            print(f"  {t}", file=sys.stderr)
        return 1
    files = render(result.digital, args.format, design_name=spec.name, design_text=spec.source_text)
    out = Path(args.output or Path("export") / spec.name)
    try:
        paths = write_files_atomically(out, files, force=args.force)
    except FileExistsError as err:
        _err(f"{err}")
        return 2
    for p in paths:
        print(f"wrote {p}")
    if not result.meets_targets:
        print(
            "warning: the continuous design does not meet its targets at every corner "
            "(run `loopwright check`)",
            file=sys.stderr,
        )
    return 0


def _progress_bar(enabled: bool):
    """A one-line progress bar on stderr for long runs (terminal only)."""
    if not enabled or not sys.stderr.isatty():
        return None
    state = {"last": -1}

    def show(fraction: float) -> None:
        pct = int(100 * min(max(fraction, 0.0), 1.0))
        if pct != state["last"]:
            state["last"] = pct
            bar = "#" * (pct // 4)
            print(f"\r[{bar:<25}] {pct:3d} %", end="", file=sys.stderr, flush=True)
            if pct >= 100:
                print(file=sys.stderr)

    return show


def _cmd_simulate(args) -> int:
    from .spec import load_design

    spec = load_design(args.file)
    controller = None
    if not args.open_loop or args.frequency_response:
        from .design import design

        result = design(spec, progress=_progress(not args.json))
        if result.compensator is None:
            _err("no compensator could be synthesised; use --open-loop")
            return 1
        controller = result.digital if result.digital is not None else result.compensator
    bar = _progress_bar(True)
    if args.frequency_response:
        from .simulate import measure_loop_gain

        fr = measure_loop_gain(spec, controller, points=args.points, progress=bar)
        data = fr.to_dict()
        if args.json:
            from .textout import to_json

            print(to_json(data))
        else:
            from .textout import table

            rows = [
                [f"{f:.4g}", f"{m:.2f}", f"{p:.1f}", f"{mm:.2f}", f"{mp:.1f}"]
                for f, m, p, mm, mp in zip(
                    data["f_hz"],
                    data["measured_mag_db"],
                    data["measured_phase_deg"],
                    data["model_mag_db"],
                    data["model_phase_deg"],
                    strict=True,
                )
            ]
            print("Loop gain measured by injection on the switching model vs the averaged model")
            print(table(["f Hz", "meas dB", "meas deg", "model dB", "model deg"], rows))
        return 0
    from .simulate import simulate_design

    if args.load_step is not None:
        lo, hi = args.load_step
        for v, name in ((lo, "FROM"), (hi, "TO")):
            if not (v >= 0 and v < 1e6):
                raise DesignError(f"must be >= 0 A, got {v!r}", key=f"--load-step {name}")
    sim = simulate_design(
        spec,
        controller,
        open_loop=args.open_loop,
        max_cycles=args.cycles,
        load_step=tuple(args.load_step) if args.load_step else None,
        progress=bar,
    )
    data = sim.to_dict()
    if args.plot:
        from .plotting import plot_waveforms

        fig, _ = plot_waveforms(sim)
        import io

        from ._io import write_files_atomically

        buf = io.BytesIO()
        fmt = Path(args.plot).suffix.lstrip(".") or "png"
        fig.savefig(buf, format=fmt)
        target = Path(args.plot)
        try:
            write_files_atomically(target.parent, {target.name: buf.getvalue()}, force=args.force)
        except FileExistsError as err:
            _err(str(err))
            return 2
    if args.json:
        from .textout import to_json

        print(to_json(data))
        return 0
    from .quantities import format_eng as e

    print(f"{spec.name}: switching-level simulation ({data['mode']})")
    steady = "reached" if data["steady"] else "NOT reached"
    print(f"  cycles run {data['cycles']}, steady state {steady}")
    print(f"  vout avg {e(data['vout_avg'], 'V')}, ripple {e(data['vout_ripple_pp'], 'V')} p-p")
    print(f"  iL avg {e(data['il_avg'], 'A')}, ripple {e(data['il_ripple_pp'], 'A')} p-p")
    print(f"  duty avg {data['duty_avg']:.4f}")
    ls = data.get("load_step")
    if ls:
        print(
            f"  load step {e(ls['from_a'], 'A')} -> {e(ls['to_a'], 'A')}: deviation "
            f"{e(ls['deviation_v'], 'V')}, settling {e(ls['settling_time_s'], 's')}"
        )
    return 0


def _design_text(result) -> str:
    from .quantities import format_eng as e
    from .textout import table

    spec = result.spec
    out = [f"{spec.name}: {spec.power_stage.topology} loop design"]
    verdict = "MEETS TARGETS at every corner" if result.meets_targets else "DOES NOT MEET TARGETS"
    out.append(f"verdict: {verdict}")
    out.append(f"crossover target {e(result.f_c_hz, 'Hz')} ({result.crossover_reason})")
    comp = result.compensator
    if comp is None:
        out.append("no compensator:")
        out.extend(f"  {t}" for t in result.tried)
        return "\n".join(out)
    out.append(
        f"compensator {comp.kind} ({comp.strategy}"
        + (f", K = {comp.k:.4g}" if comp.k else "")
        + f"): integrator w_i = {comp.w_i:.5g} rad/s, zeros at "
        + (", ".join(e(f, "Hz") for f in comp.zeros_hz) or "none")
        + ", poles at 0 Hz"
        + "".join(", " + e(f, "Hz") for f in comp.poles_hz)
    )
    real = result.realization
    if real is not None:
        unit = {"R": "ohm", "C": "F", "g": "S"}
        rows = [
            [k, e(real.ideal_components[k], unit[k[0]]), e(v, unit[k[0]])]
            for k, v in real.components.items()
        ]
        out.append(
            f"\n{real.network} network, resistors {real.series_r}, capacitors {real.series_c}"
        )
        out.append(table(["part", "ideal", "rounded"], rows))
    rows = []
    for c in (result.nominal, *result.corners):
        a = c.analysis
        if a is None:
            rows.append([c.name, "-", "-", "-", "-", "not proven (DCM)"])
            continue
        m = a.margins
        rounded = ""
        if c.analysis_rounded is not None:
            rounded = f"{c.analysis_rounded.phase_margin_deg:.1f}"
        elif c.sampled is not None:
            rounded = f"{c.sampled['phase_margin_deg']:.1f} (z)"
        rows.append(
            [
                c.name,
                e(m.crossover_hz, "Hz"),
                f"{m.phase_margin_deg:.1f}",
                "inf" if m.gain_margin_db == float("inf") else f"{m.gain_margin_db:.1f}",
                rounded or "-",
                ("stable" if a.closed_loop_stable else "UNSTABLE")
                + ("  pass" if c.meets_targets else "  FAIL: " + "; ".join(c.failures)),
            ]
        )
    out.append("")
    out.append(
        table(
            ["corner", "crossover", "PM deg", "GM dB", "PM parts/z", "verdict"],
            rows,
            left_last=True,
        )
    )
    if result.digital is not None:
        dg = result.digital
        o = dg.options
        out.append("")
        out.append(
            f"digital controller: {o.method} at {e(o.sample_rate_hz, 'Hz')}, delay "
            f"{o.delay_samples:g} samples, {o.number_format}; b = "
            + ", ".join(f"{x:.6g}" for x in dg.controller.b)
            + "; a = "
            + ", ".join(f"{x:.6g}" for x in dg.controller.a)
        )
        rows = []
        for label, lf in (
            ("continuous, e^(-s Td)", dg.loop_continuous_delay),
            ("sampled (z-domain)", dg.loop_z),
        ):
            stable = (
                "-"
                if lf.closed_loop_stable is None
                else ("stable" if lf.closed_loop_stable else "UNSTABLE")
            )
            rows.append(
                [
                    label,
                    e(lf.crossover_hz, "Hz"),
                    f"{lf.phase_margin_deg:.1f}",
                    f"{lf.gain_margin_db:.1f}",
                    stable,
                ]
            )
        out.append(table(["nominal loop", "crossover", "PM deg", "GM dB", "closed loop"], rows))
        out.append(
            f"phase lost to sampling and delay at crossover: {dg.phase_lost_at_fc_deg:.1f} deg"
        )
    if result.warnings:
        out.append("")
        out.append("notes:")
        out.extend(f"  - {w}" for w in result.warnings)
    out.append("")
    out.append(CAUTION)
    return "\n".join(out)


# ----------------------------------------------------------------------------- parser
def build_parser() -> argparse.ArgumentParser:
    p = _Parser(
        prog="loopwright",
        description="Close the feedback loop of PWM DC-DC converters from one design file.",
        epilog=CAUTION,
    )
    p.add_argument("--version", action="version", version=f"loopwright {__version__}")
    sub = p.add_subparsers(dest="verb", metavar="VERB", parser_class=_Parser)
    sub.required = True

    n = sub.add_parser("new", help="write an annotated starter design file")
    n.add_argument("topology", choices=["buck", "boost", "buck-boost"])
    n.add_argument("-o", "--output", help="file to write (default TOPOLOGY.toml)")
    n.add_argument("--force", action="store_true", help="replace an existing file")
    n.set_defaults(func=_cmd_new)

    pl = sub.add_parser("plant", help="operating point and small-signal models at every corner")
    pl.add_argument("file", help="design file (TOML)")
    pl.add_argument("--json", action="store_true", help="machine-readable output")
    pl.add_argument(
        "--symbolic", action="store_true", help="print Gvd(s) with symbols (ideal and lossy)"
    )
    pl.set_defaults(func=_cmd_plant)

    de = sub.add_parser(
        "design", help="synthesise the compensator and prove the loop at every corner"
    )
    de.add_argument("file", help="design file (TOML)")
    de.add_argument("--json", action="store_true", help="machine-readable output")
    de.set_defaults(func=_cmd_design)

    ch = sub.add_parser(
        "check",
        help="exit 0 when every corner meets the targets, 1 when any misses, 2 on bad input",
    )
    ch.add_argument("file", help="design file (TOML)")
    ch.set_defaults(func=_cmd_check)

    ex = sub.add_parser("export", help="digital controller for firmware (needs [digital])")
    ex.add_argument("file", help="design file (TOML)")
    ex.add_argument("--format", required=True, choices=["c", "json", "csv"])
    ex.add_argument("-o", "--output", help="output folder (default export/NAME/)")
    ex.add_argument("--force", action="store_true", help="replace existing files")
    ex.set_defaults(func=_cmd_export)

    si = sub.add_parser(
        "simulate", help="switching-level simulation that checks the averaged model"
    )
    si.add_argument("file", help="design file (TOML)")
    si.add_argument("--open-loop", action="store_true", help="fixed duty at the operating point")
    si.add_argument("--cycles", type=int, default=20000, help="cycle cap (default 20000)")
    si.add_argument(
        "--load-step", nargs=2, type=float, metavar=("FROM", "TO"), help="load step [A]"
    )
    si.add_argument(
        "--frequency-response", action="store_true", help="measure the loop gain by injection"
    )
    si.add_argument("--points", type=int, default=12, help="injection frequencies (default 12)")
    si.add_argument("--plot", help="write a waveform plot (PNG or SVG) to this file")
    si.add_argument("--force", action="store_true", help="replace an existing plot file")
    si.add_argument("--json", action="store_true", help="machine-readable output")
    si.set_defaults(func=_cmd_simulate)

    for extra in _EXTRA_VERBS:
        extra(sub)
    return p


def _report_verb(sub) -> None:
    from .report.cli import add_report_verb

    add_report_verb(sub)


_EXTRA_VERBS: list = [_report_verb]


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``loopwright`` command; returns the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    with warnings.catch_warnings():
        # the library's warnings reach the user through the results (printed once, plainly)
        warnings.simplefilter("ignore")
        try:
            return int(args.func(args) or 0)
        except DesignError as err:
            _err(str(err))
            return 2
        except KeyboardInterrupt:
            _err("interrupted")
            return 130
        except BrokenPipeError:
            return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
