"""Bench: loop margins and closed-loop poles over 2,000 corners, vectorised vs per corner.

A buck power stage (ideal switches, capacitor ESR; textbook closed-form state space, built
inline) is perturbed at random: inductance and capacitance +-20 %, ESR +-50 %, load 4 ... 40 ohm,
input 30 ... 42 V. One type III compensator (K factor at the nominal corner, 25 kHz, 60 deg) is
checked at every corner, twice:

* vectorised: ``loopwright.loop.analyze_loops`` on the whole batch (margins by bracketing and
  root refinement on the exact response, closed-loop poles by batched eigenvalues);
* baseline: a Python loop over the corners with python-control (``control.ss``,
  ``control.stability_margins`` on the loop, ``control.feedback(...).poles()``).

Both must agree (crossover, phase margin, every -180 deg crossing, stability verdict) before the
wall times and their ratio are printed. The goal is a ratio of at least 100. Not a timed test.

Run:  python bench/bench_corners.py [--corners 2000] [--points-per-decade 200 50]
"""

from __future__ import annotations

import argparse
import math
import time

import control
import numpy as np

from loopwright.compensators.kfactor import synthesize_k_factor
from loopwright.loop import analyze_loops, plant_freqresp

V_M = 2.5  # PWM ramp [V]


def buck_batch(rng: np.random.Generator, k: int):
    """Buck control-to-output state space (states i_L, v_C) times 1/V_M, k random corners."""
    inductance = 22e-6 * rng.uniform(0.8, 1.2, k)
    c_out = 100e-6 * rng.uniform(0.8, 1.2, k)
    r_esr = 30e-3 * rng.uniform(0.5, 1.5, k)
    r_load = rng.uniform(4.0, 40.0, k)
    v_in = rng.uniform(30.0, 42.0, k)
    return buck_statespace(inductance, c_out, r_esr, r_load, v_in)


def buck_statespace(inductance, c_out, r_esr, r_load, v_in):
    inductance, c_out, r_esr, r_load, v_in = np.broadcast_arrays(
        *(
            np.atleast_1d(np.asarray(v, dtype=float))
            for v in (inductance, c_out, r_esr, r_load, v_in)
        )
    )
    k = inductance.size
    par = r_load / (r_load + r_esr)
    a = np.empty((k, 2, 2))
    a[:, 0, 0] = -par * r_esr / inductance
    a[:, 0, 1] = -par / inductance
    a[:, 1, 0] = par / c_out
    a[:, 1, 1] = -1.0 / ((r_load + r_esr) * c_out)
    b = np.zeros((k, 2))
    b[:, 0] = v_in / (V_M * inductance)
    c = np.stack([par * r_esr, par], axis=1)
    d = np.zeros(k)
    return a, b, c, d


def _agreement(fast, base, f_lo, f_hi):
    """Largest differences between the two routes; raises if a crossing is missing."""
    d_pm = d_fc = d_pc = 0.0
    verdicts = 0
    band = (2 * math.pi * f_lo, 2 * math.pi * f_hi)
    for fa, (pm, wpc, wgc, poles) in zip(fast, base, strict=True):
        keep = (wgc > band[0]) & (wgc < band[1])
        f_gc = np.sort(wgc[keep]) / (2 * math.pi)
        if len(f_gc) != len(fa.margins.gain_crossovers_hz):
            raise AssertionError(f"gain crossings differ: {f_gc} vs {fa.margins}")
        d_fc = max(d_fc, float(np.max(np.abs(f_gc / fa.margins.gain_crossovers_hz - 1))))
        pm_ref = np.asarray(pm)[keep][np.argsort(wgc[keep])]
        d_pm = max(d_pm, float(np.max(np.abs(pm_ref - fa.margins.phase_margins_deg))))
        keep = (wpc > band[0]) & (wpc < band[1])
        f_pc = np.sort(wpc[keep]) / (2 * math.pi)
        if len(f_pc) != len(fa.margins.phase_crossovers_hz):
            raise AssertionError(f"phase crossings differ: {f_pc} vs {fa.margins}")
        if f_pc.size:
            d_pc = max(d_pc, float(np.max(np.abs(f_pc / fa.margins.phase_crossovers_hz - 1))))
        verdicts += bool(np.all(poles.real < 0)) == fa.closed_loop_stable
    return d_pm, d_fc, d_pc, verdicts


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--corners", type=int, default=2000)
    parser.add_argument("--points-per-decade", type=float, nargs="+", default=[200.0, 50.0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args(argv)

    f_c = 25e3
    nominal = buck_statespace(22e-6, 100e-6, 30e-3, 4.0, 36.0)
    p_fc = plant_freqresp(*nominal, [2 * math.pi * f_c])[0, 0]
    comp = synthesize_k_factor(p_fc, f_c, 60.0, "type3")
    a, b, c, d = buck_batch(np.random.default_rng(args.seed), args.corners)
    f_lo, f_hi = 10.0, 1e6

    # baseline: python-control, one corner at a time (after one warm-up corner)
    gc_tf = comp.to_control()
    control.stability_margins(gc_tf * control.ss(a[0], b[0][:, None], c[0][None, :], d[0]))
    t0 = time.perf_counter()
    base = []
    for i in range(args.corners):
        plant = control.ss(a[i], b[i][:, None], c[i][None, :], d[i])
        loop = gc_tf * plant
        _gm, pm, _sm, wpc, wgc, _wms = control.stability_margins(loop, returnall=True)
        poles = control.feedback(loop, 1).poles()
        base.append((pm, wpc, wgc, poles))
    t_base = time.perf_counter() - t0
    print(
        f"corners: {args.corners}; search range {f_lo:g} Hz .. {f_hi:g} Hz; "
        f"vectorised time = best of {args.repeats}"
    )
    print(f"per corner (python-control loop): {t_base * 1e3:9.1f} ms")

    for ppd in args.points_per_decade:
        analyze_loops(a, b, c, d, comp, f_min_hz=f_lo, f_max_hz=f_hi, points_per_decade=ppd)
        times = []
        for _ in range(args.repeats):
            t0 = time.perf_counter()
            fast = analyze_loops(
                a, b, c, d, comp, f_min_hz=f_lo, f_max_hz=f_hi, points_per_decade=ppd
            )
            times.append(time.perf_counter() - t0)
        t_fast = min(times)
        d_pm, d_fc, d_pc, verdicts = _agreement(fast, base, f_lo, f_hi)
        n_cond = sum(fa.margins.conditionally_stable for fa in fast)
        print(
            f"grid {ppd:g} points/decade: vectorised {t_fast * 1e3:7.1f} ms, "
            f"speed ratio {t_base / t_fast:5.0f}x (goal >= 100x)"
        )
        print(
            f"    agreement: max |dPM| = {d_pm:.1e} deg, max rel d(f_gc) = {d_fc:.1e}, "
            f"max rel d(f_pc) = {d_pc:.1e}; verdicts equal {verdicts}/{args.corners}; "
            f"conditionally stable corners {n_cond}"
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
