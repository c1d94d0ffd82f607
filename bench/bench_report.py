"""Bench: a full design report against rendering the same number of bare matplotlib figures.

Both run in this process: (1) ``build_report`` on a design (design, step responses, figures
as PNG and SVG, HTML); (2) the same number of bare figures (one 400-point line on a log axis,
two axes per Bode-type figure) saved as PNG and SVG at the same dpi. The ratio is printed; the
goal is at most 2. Not a timed test.

Run:  python bench/bench_report.py [FILE] [--repeat 3]
"""

from __future__ import annotations

import argparse
import io
import tempfile
import time
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from loopwright.report import build_report
from loopwright.starters import starter_text


def bare_figures(n_figs: int, n_axes: list[int], dpi: float) -> None:
    f = np.geomspace(10, 1e5, 400)
    for i in range(n_figs):
        fig = Figure(figsize=(7.2, 5.0))
        axes = np.atleast_1d(fig.subplots(n_axes[i], 1))
        for ax in axes:
            ax.semilogx(f, np.log(f))
        for fmt in ("png", "svg"):
            fig.savefig(io.BytesIO(), format=fmt, dpi=dpi)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("file", nargs="?")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--dpi", type=float, default=110)
    args = ap.parse_args()
    if args.file:
        path = Path(args.file)
    else:
        path = Path(tempfile.mkdtemp()) / "buck.toml"
        path.write_text(starter_text("buck"))
    files = build_report(path, dpi=args.dpi)  # warm-up (imports, caches)
    pngs = sorted(n for n in files if n.endswith(".png"))
    n_axes = [2 if n.startswith(("plant", "compensator", "loop")) else 1 for n in pngs]
    t_rep, t_bare = [], []
    for _ in range(args.repeat):
        t0 = time.perf_counter()
        build_report(path, dpi=args.dpi)
        t_rep.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        bare_figures(len(pngs), n_axes, args.dpi)
        t_bare.append(time.perf_counter() - t0)
    r, b = min(t_rep), min(t_bare)
    print(f"design file: {path}")
    print(f"full report ({len(files)} files, {len(pngs)} figures): {r:.3f} s")
    print(f"bare figures ({len(pngs)}, PNG+SVG): {b:.3f} s")
    print(f"ratio report/bare: {r / b:.2f} (goal <= 2)")


if __name__ == "__main__":
    main()
