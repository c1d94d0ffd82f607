"""Bench: switching-level simulation speed against baselines measured in the same run.

1. Open loop, 1000 periods from the zero state, synchronous buck with parasitics (the METHODS
   scenario A stage) and a diode boost: loopwright's exact interval solution against
   ``scipy.integrate.solve_ivp`` (DOP853, restarted at every switching instant, events for the
   diode) at matched accuracy (solver tolerance tightened until its final state agrees with
   loopwright's to 1e-6 of the state scale). Goal: ratio >= 100.
2. The same synchronous buck in ngspice (voltage-controlled switches, 200 time points per
   period at most), where installed. Goal: ratio >= 200.
3. Closed loop: periods per second for a buck (analog type III, natural-sampling PWM) and a
   boost, and a 15-point loop-gain sweep by injection.

Not a timed test: it prints times and ratios. Run:  python bench/bench_simulate.py
"""

from __future__ import annotations

import math
import shutil
import subprocess
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

from loopwright.averaging import analyze_stage
from loopwright.simulate import AnalogController, loop_gain_by_injection, simulate
from loopwright.topologies import TOPOLOGIES, PowerStageParameters

N = 1000
BUCK = ("buck", PowerStageParameters(22e-6, 100e-6, 0.25, 0.02, 0.03, 0.03, "synchronous", 0.015),
        36.0, 1 / 3, 250e3)  # fmt: skip
BOOST_DIODE = ("boost", PowerStageParameters(47e-6, 220e-6, 1 / 12, 0.05, 0.02, 0.025, "diode",
                                             0.015, 0.45), 12.0, 0.5, 200e3)  # fmt: skip


def ivp_open_loop(model, u, duty, ts, cycles, rtol, atol):
    """Baseline: solve_ivp interval by interval, events at the diode instants."""
    diode = model.idle is not None

    def rhs(iv):
        a, b = iv.a, iv.b @ u
        return lambda t, x: a @ x + b

    def il_zero(t, x):
        return x[0]

    def fwd(t, x):
        return model.off.a[0, 1] * x[1] + model.off.b[0] @ u

    il_zero.terminal, il_zero.direction = True, -1
    fwd.terminal, fwd.direction = True, 1
    x = np.zeros(2)
    for _ in range(cycles):
        t_on = duty * ts
        x = solve_ivp(rhs(model.on), (0, t_on), x, method="DOP853", rtol=rtol, atol=atol).y[:, -1]
        t, kind = t_on, "off"
        while t < ts * (1 - 1e-14):
            iv = model.off if kind == "off" else model.idle
            ev = None if not diode else (il_zero if kind == "off" else fwd)
            sol = solve_ivp(rhs(iv), (t, ts), x, method="DOP853", rtol=rtol, atol=atol, events=ev)
            if sol.status == 1:
                t, x = sol.t_events[0][0], sol.y_events[0][0].copy()
                if kind == "off":
                    x[0] = 0.0
                kind = "idle" if kind == "off" else "off"
            else:
                t, x = ts, sol.y[:, -1]
    return x


def timed(fn, repeat=5):
    best = math.inf
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def open_loop_vs_ivp(case):
    topo, p, v_in, duty, fs = case
    t_lw, r = timed(
        lambda: simulate(
            topo, p, v_in=v_in, f_sw=fs, duty=duty, max_cycles=N + 1, tol=1e-300, record_cycles=1
        )  # fmt: skip
    )
    x_lw = r.final_state  # state at the start of period N
    model = TOPOLOGIES[topo].build(p)
    u = np.array([v_in, 0.0, p.v_f if p.rectifier == "diode" else 0.0])
    scale = np.array([max(abs(r.il_avg), 0.1), abs(r.vout_avg)])
    for rtol in (1e-3, 1e-4, 1e-5, 1e-6, 1e-7, 1e-8, 1e-9, 1e-10, 1e-11):
        t_ivp, x_ivp = timed(lambda rt=rtol: ivp_open_loop(model, u, duty, 1 / fs, N, rt, rt * 1e-2),
                             repeat=1)  # fmt: skip
        err = float(np.max(np.abs(x_ivp - x_lw) / scale))
        if err < 1e-6:
            break
    print(f"  {topo} ({p.rectifier}), {N} periods: loopwright {t_lw * 1e3:8.2f} ms | "
          f"solve_ivp rtol {rtol:g}: {t_ivp * 1e3:9.1f} ms | ratio {t_ivp / t_lw:7.0f}x | "
          f"state difference {err:.1e}")  # fmt: skip
    return t_lw, r


def ngspice_buck(t_lw, r):
    exe = shutil.which("ngspice")
    if exe is None:
        print("  ngspice not installed: skipped")
        return
    topo, p, v_in, duty, fs = BUCK
    ts = 1 / fs
    t_on = duty * ts
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "out.txt"
        cir = Path(tmp) / "buck.cir"
        cir.write_text("\n".join([
            "* synchronous buck", f"V1 in 0 DC {v_in}",
            f"VG1 g1 0 PULSE(0 1 0 1n 1n {t_on - 1e-9:.12e} {ts:.12e})",
            f"VG2 g2 0 PULSE(1 0 0 1n 1n {t_on - 1e-9:.12e} {ts:.12e})",
            "S1 in sw g1 0 swmain", "S2 sw 0 g2 0 swrect", "VS sw a 0", f"RL a l {p.r_dcr}",
            f"L1 l out {p.inductance} IC=0", f"C1 out cn {p.c_out} IC=0", f"RC cn 0 {p.r_esr}",
            f"RLOAD out 0 {1 / p.g_load}",
            f".model swmain sw vt=0.5 vh=0 ron={p.r_on} roff=1e9",
            f".model swrect sw vt=0.5 vh=0 ron={p.r_rect} roff=1e9",
            f".tran {ts / 200:.6e} {(N + 1) * ts:.6e} 0 {ts / 200:.6e} uic",
            ".control", "run", f"wrdata {out} v(out) i(VS)", ".endc", ".end", "",
        ]))  # fmt: skip
        t0 = time.perf_counter()
        subprocess.run([exe, "-b", str(cir)], capture_output=True, timeout=600)
        t_sp = time.perf_counter() - t0
        data = np.loadtxt(out)
    t, v = data[:, 0], data[:, 1]
    sel = (t >= N * ts - 1e-15) & (t <= (N + 1) * ts + 1e-15)
    v_sp = np.trapezoid(v[sel], t[sel]) / (t[sel][-1] - t[sel][0])
    print(f"  ngspice, same buck, {N} periods (<= 200 points/period): {t_sp * 1e3:9.1f} ms | "
          f"ratio {t_sp / t_lw:7.0f}x | last-period average {v_sp:.6f} V vs loopwright "
          f"{r.vout_avg:.6f} V")  # fmt: skip


def closed_loop_rates():
    fs = 250e3
    wz, wp1, wp2 = 2 * math.pi * 3393.195, 2 * math.pi * 53051.65, math.pi * fs
    wi = 10807.1466 / 0.1
    num = wi * wp1 * wp2 / wz**2 * np.polymul([1, wz], [1, wz])
    den = np.polymul([1, 0], np.polymul([1, wp1], [1, wp2]))
    buck_ctl = AnalogController.from_transfer_function(num, den, modulator_gain=0.4,
                                                       sense_gain=0.1, v_ref=1.2)  # fmt: skip
    buck_p = PowerStageParameters(22e-6, 100e-6, 0.25, r_esr=0.03)
    boost_p = PowerStageParameters(47e-6, 220e-6, 1 / 12, 0.05, 0.02, 0.025, "synchronous", 0.015)
    avg = analyze_stage(TOPOLOGIES["boost"], boost_p, v_in=12.0, v_out=24.0, f_sw=200e3)
    bz, bp1, bp2 = 2 * math.pi * 782.6, 2 * math.pi * 10158.0, math.pi * 200e3

    def gc(s):
        return (1 + s / bz) ** 2 / (s * (1 + s / bp1) * (1 + s / bp2))

    bwi = 1 / abs(gc(2j * math.pi * 2e3) * 0.1 * avg.freqresp("v_out", "d", [2e3])[0])
    bnum = bwi * bp1 * bp2 / bz**2 * np.polymul([1, bz], [1, bz])
    bden = np.polymul([1, 0], np.polymul([1, bp1], [1, bp2]))
    boost_ctl = AnalogController.from_transfer_function(bnum, bden, modulator_gain=1.0,
                                                        sense_gain=0.1, v_ref=2.4)  # fmt: skip
    n = 3000
    for name, topo, p, vin, f, ctl in (
        ("buck", "buck", buck_p, 36.0, fs, buck_ctl),
        ("boost", "boost", boost_p, 12.0, 200e3, boost_ctl),
    ):
        kw = dict(v_in=vin, f_sw=f, controller=ctl)
        t0 = time.perf_counter()
        simulate(topo, p, max_cycles=n, tol=1e-300, **kw)
        t = time.perf_counter() - t0
        t0 = time.perf_counter()
        r2 = simulate(topo, p, **kw)
        t2 = time.perf_counter() - t0
        print(f"  closed loop {name}: {n / t:8.0f} periods/s ({n} periods in {t:.2f} s, setup "
              f"included); to steady state: {r2.cycles} periods in {t2:.2f} s, "
              f"vout {r2.vout_avg:.6f} V")  # fmt: skip
    f = np.logspace(math.log10(2e3), math.log10(62.5e3), 15)
    t, m = timed(lambda: loop_gain_by_injection("buck", buck_p, buck_ctl, v_in=36.0, f_sw=fs,
                                                f_hz=f), repeat=1)  # fmt: skip
    dmag = np.max(np.abs(m.measured_mag_db - m.model_mag_db))
    dph = np.max(np.abs((m.measured_phase_deg - m.model_phase_deg + 180) % 360 - 180))
    print(f"  injection sweep, 15 frequencies 2-62.5 kHz, one batch: {t:.2f} s "
          f"({m.settle_cycles} settling + {m.cycles} batch periods); max |dT| vs averaged "
          f"model {dmag:.2f} dB, {dph:.2f} deg")  # fmt: skip


def main():
    print("open loop, loopwright vs solve_ivp at matched accuracy:")
    t_lw, r = open_loop_vs_ivp(BUCK)
    open_loop_vs_ivp(BOOST_DIODE)
    print("open loop, loopwright vs ngspice:")
    ngspice_buck(t_lw, r)
    print("closed loop:")
    closed_loop_rates()


if __name__ == "__main__":
    main()
