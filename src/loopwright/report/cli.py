"""The ``report`` verb: ``loopwright report FILE [-o DIR] [--force]``."""

from __future__ import annotations

import sys
from pathlib import Path

__all__ = ["add_report_verb"]


def _cmd_report(args) -> int:
    import warnings

    from ..design import design
    from ..spec import load_design
    from .builder import write_report

    spec = load_design(args.file)
    out = Path(args.output) if args.output else Path("reports") / spec.name
    from ..cli import _progress, _progress_bar

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = design(spec, progress=_progress(True))
    say = _progress(True)
    if say:
        say(
            "drawing the figures" + (" and simulating the switching stage" if args.simulate else "")
        )
    try:
        index = write_report(
            result, out, force=args.force, simulate=args.simulate, progress=_progress_bar(True)
        )
    except FileExistsError as err:
        print(f"loopwright: error: {err}", file=sys.stderr)  # noqa: T201
        return 2
    print(f"wrote {index}")  # noqa: T201
    failing = result.failing_corners()
    if failing:
        print(  # noqa: T201
            f"TARGETS NOT MET at {len(failing)} of {1 + len(result.corners)} corner(s); "
            "the report flags them at the top"
        )
    return 0


def add_report_verb(sub) -> None:
    """Register ``report FILE [-o DIR] [--force]`` on an argparse sub-parser collection.

    Default folder ``reports/<design name>/``; an existing report is not overwritten without
    ``--force`` (exit 2 with a message). Exit 0 when written, also when targets are missed
    (``loopwright check`` gives the pass/fail exit code).
    """
    r = sub.add_parser("report", help="HTML report with plots and summary.json")
    r.add_argument("file", help="design file (TOML)")
    r.add_argument("-o", "--output", metavar="DIR", help="report folder (default reports/NAME/)")
    r.add_argument("--force", action="store_true", help="replace an existing report's files")
    r.add_argument(
        "--simulate",
        action="store_true",
        help="add the switching-level simulation against the averaged model (takes seconds)",
    )
    r.set_defaults(func=_cmd_report)
