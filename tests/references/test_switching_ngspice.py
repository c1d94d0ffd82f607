"""Switching simulation against a general-purpose circuit simulator (ngspice), where installed.

Reference: ngspice transient analysis of netlists written here (switches as voltage-controlled
switches with the stage's on-resistances, ``roff`` = 1 GOhm; complementary PWM pulse sources;
inductor DCR and capacitor ESR as resistors), started from the same initial state as loopwright
(the averaged operating point) and run for 300 periods. Compared over the last 20 periods:
averages within 0.5 %, peak-to-peak ripple within 5 % (SPICE's time-step control and the 1 ns
gate edges limit its accuracy, hence the tolerances of the brief).
"""

from __future__ import annotations

import shutil
import subprocess

import numpy as np
import pytest

from loopwright.averaging import analyze_stage
from loopwright.simulate import simulate
from loopwright.topologies import TOPOLOGIES, PowerStageParameters

NGSPICE = shutil.which("ngspice")
pytestmark = pytest.mark.skipif(
    NGSPICE is None, reason="ngspice not installed (apt-get install -y ngspice); comparison skipped"
)

N_CYCLES = 300
POINTS = 400


def netlist(topology, p, v_in, duty, f_sw, x0, out_file):
    ts = 1.0 / f_sw
    t_on = duty * ts
    pulse_on = f"PULSE(0 1 0 1n 1n {t_on - 1e-9:.12e} {ts:.12e})"
    pulse_off = f"PULSE(1 0 0 1n 1n {t_on - 1e-9:.12e} {ts:.12e})"
    lines = [f"* loopwright check: synchronous {topology}", f"V1 in 0 DC {v_in}"]
    lines += [f"VG1 g1 0 {pulse_on}", f"VG2 g2 0 {pulse_off}"]
    if topology == "buck":
        lines += ["S1 in sw g1 0 swmain", "S2 sw 0 g2 0 swrect", "VS sw a 0",
                  f"RL a l {p.r_dcr}", f"L1 l out {p.inductance} IC={x0[0]}"]  # fmt: skip
    else:  # boost
        lines += ["VS in a 0", f"RL a l {p.r_dcr}", f"L1 l sw {p.inductance} IC={x0[0]}",
                  "S1 sw 0 g1 0 swmain", "S2 sw out g2 0 swrect"]  # fmt: skip
    lines += [
        f"C1 out cn {p.c_out} IC={x0[1]}",
        f"RC cn 0 {p.r_esr}",
        f"RLOAD out 0 {1 / p.g_load}",
        f".model swmain sw vt=0.5 vh=0 ron={p.r_on} roff=1e9",
        f".model swrect sw vt=0.5 vh=0 ron={p.r_rect} roff=1e9",
        f".tran {ts / POINTS:.6e} {N_CYCLES * ts:.6e} 0 {ts / POINTS:.6e} uic",
        ".control",
        "run",
        f"wrdata {out_file} v(out) i(VS)",
        ".endc",
        ".end",
    ]
    return "\n".join(lines) + "\n"


def run_ngspice(tmp_path, topology, p, v_in, duty, f_sw, x0):
    out = tmp_path / "out.txt"
    cir = tmp_path / "stage.cir"
    cir.write_text(netlist(topology, p, v_in, duty, f_sw, x0, out))
    # batch mode with a .control block exits 1 ("no .plot lines") after a good run: judge by
    # the data file
    proc = subprocess.run([NGSPICE, "-b", str(cir)], capture_output=True, timeout=300, text=True)
    assert out.exists(), proc.stdout + proc.stderr
    data = np.loadtxt(out)
    t, v, i = data[:, 0], data[:, 1], data[:, 3]
    ts = 1 / f_sw
    t0, t1 = (N_CYCLES - 20) * ts, N_CYCLES * ts
    sel = (t >= t0 - 1e-15) & (t <= t1 + 1e-15)

    def avg(y):
        return np.trapezoid(y[sel], t[sel]) / (t[sel][-1] - t[sel][0])

    return avg(v), avg(i), np.ptp(v[sel]), np.ptp(i[sel])


CASES = {
    "buck": ("buck", PowerStageParameters(22e-6, 100e-6, 0.25, 0.02, 0.03, 0.03, "synchronous",
                                          0.015), 36.0, 0.346, 250e3),
    "boost": ("boost", PowerStageParameters(47e-6, 220e-6, 1 / 12, 0.05, 0.02, 0.025,
                                            "synchronous", 0.015), 12.0, 0.5, 200e3),
}  # fmt: skip


@pytest.mark.parametrize("name", list(CASES))
def test_synchronous_stage_matches_ngspice(tmp_path, name):
    topo, p, v_in, duty, f_sw = CASES[name]
    avg = analyze_stage(TOPOLOGIES[topo], p, v_in=v_in, v_out=1.0, f_sw=f_sw, duty=duty)
    x0 = [avg.op.i_l_avg, avg.op.v_out]
    r = simulate(topo, p, v_in=v_in, f_sw=f_sw, duty=duty, max_cycles=N_CYCLES, tol=1e-300, x0=x0)
    assert r.cycles == N_CYCLES
    v, i, v_pp, i_pp = run_ngspice(tmp_path, topo, p, v_in, duty, f_sw, x0)
    assert r.vout_avg == pytest.approx(v, rel=5e-3)
    assert r.il_avg == pytest.approx(i, rel=5e-3)
    assert r.vout_ripple_pp == pytest.approx(v_pp, rel=0.05)
    assert r.il_ripple_pp == pytest.approx(i_pp, rel=0.05)
