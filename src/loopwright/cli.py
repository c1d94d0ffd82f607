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

    for extra in _EXTRA_VERBS:
        extra(sub)
    return p


_EXTRA_VERBS: list = []


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
