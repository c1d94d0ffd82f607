"""Bench: wall time of ``loopwright plant EXAMPLE`` against the bare import floor.

Both commands run as fresh processes, interleaved, several times; the best of each is kept
(the least disturbed by other load on the machine):

* measured: ``loopwright plant examples/harbor-logger-buck.toml`` (16 corners plus nominal);
* floor:    ``python -c "import control"`` -- python-control (and with it numpy, scipy and
  matplotlib) must be imported by any run of the tool, so no ``plant`` can start faster.

The goal is a ratio of at most 1.3: the tool's own imports, the file parsing and the analysis of
every corner together cost less than a third of the unavoidable start-up. Not a timed test.

Run:  python bench/bench_plant.py [--repeats 7] [--example examples/harbor-logger-buck.toml]
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
GOAL = 1.3


def _plant_command(example: Path) -> list[str]:
    script = Path(sys.executable).with_name("loopwright")
    if script.exists():
        return [str(script), "plant", str(example)]
    return [sys.executable, "-m", "loopwright.cli", "plant", str(example)]


def _wall(cmd: list[str]) -> float:
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True)
    dt = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(f"command failed ({proc.returncode}): {' '.join(cmd)}\n{proc.stderr}")
    return dt


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=7, help="runs of each command (best kept)")
    ap.add_argument(
        "--example",
        type=Path,
        default=ROOT / "examples" / "harbor-logger-buck.toml",
        help="design file to analyse",
    )
    args = ap.parse_args(argv)
    plant = _plant_command(args.example)
    floor = [sys.executable, "-c", "import control"]
    # warm the file-system cache once, then interleave so both see the same machine load
    _wall(floor)
    _wall(plant)
    t_floor, t_plant = [], []
    for _ in range(args.repeats):
        t_floor.append(_wall(floor))
        t_plant.append(_wall(plant))
    best_floor, best_plant = min(t_floor), min(t_plant)
    ratio = best_plant / best_floor
    print(f"import floor  (python -c 'import control'): best {best_floor:.3f} s of {args.repeats}")
    print(f"loopwright plant {args.example.name}: best {best_plant:.3f} s of {args.repeats}")
    print(
        f"ratio plant / floor: {ratio:.2f} (goal <= {GOAL})  {'ok' if ratio <= GOAL else 'MISSED'}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
