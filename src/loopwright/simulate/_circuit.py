"""The switched circuit as exact linear intervals over an augmented state.

Augmented state ``w`` (one row per batch member)::

    [i_l, v_c, z_1..z_m, (s_1, s_2), q_v, q_i, q_in, v_in, i_load, v_f, ref, ref_rate]

* ``i_l, v_c``: power-stage states (the topology's :class:`~loopwright.topologies.Interval`
  equations, unchanged);
* ``z``: states of an analog compensator driven by ``e = ref - H sigma (v_out + s_1)``, with
  ``sigma`` the sense sign (:func:`sense_sign`: -1 for the inverting stage, whose error
  amplifier senses the inverted output);
* ``s_1 = A sin(w t), s_2 = A cos(w t)``: the injection oscillator (loop-gain measurement);
* ``q_v, q_i, q_in``: running integrals of ``v_out``, ``i_l`` and ``i_in`` over the period
  (reset at each period start), which give exact period averages;
* ``v_in, i_load, v_f``: the stage's inputs, constant within a period;
* ``ref, ref_rate``: the reference and its slope (soft-start ramp).

Every interval is then ``w' = M w`` with a constant ``M``: solved exactly by
:class:`~loopwright.simulate._propagator.Propagator`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..topologies import Interval, SwitchedModel
from ._propagator import Propagator
from .controllers import AnalogController

ON, OFF, IDLE = 0, 1, 2
_MAX_SEGMENTS = 8


def sense_sign(model: SwitchedModel | object) -> float:
    """Sign of the sensed output: -1 for an inverting stage, +1 otherwise.

    The inverting buck-boost's output is negative; its error amplifier senses ``-v_out`` (an
    inverted divider or a difference amplifier), so the loop is negative feedback with the
    positive divider ``H = v_ref/|v_out|`` and a positive reference, as in the design flow,
    whose loop gain is built from ``-Gvd``.

    Parameters
    ----------
    model : SwitchedModel or Topology
        Anything with an ``inverting`` flag.

    Returns
    -------
    float
        ``-1.0`` or ``1.0``.

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.5 (loop gain ``T = Gc Fm Gvd H``; the inverting stage's negative
       ``Gvd(0)`` is compensated by an inverted sense).
    """
    return -1.0 if bool(getattr(model, "inverting", False)) else 1.0


@dataclass(frozen=True)
class Layout:
    """Index map of the augmented state."""

    n_ctrl: int
    n_osc: int

    @property
    def il(self) -> int:
        return 0

    @property
    def vc(self) -> int:
        return 1

    @property
    def z(self) -> slice:
        return slice(2, 2 + self.n_ctrl)

    @property
    def s1(self) -> int:
        return 2 + self.n_ctrl

    @property
    def s2(self) -> int:
        return 3 + self.n_ctrl

    @property
    def qv(self) -> int:
        return 2 + self.n_ctrl + self.n_osc

    @property
    def qi(self) -> int:
        return self.qv + 1

    @property
    def qin(self) -> int:
        return self.qv + 2

    @property
    def u(self) -> slice:
        return slice(self.qv + 3, self.qv + 6)

    @property
    def ref(self) -> int:
        return self.qv + 6

    @property
    def rate(self) -> int:
        return self.qv + 7

    @property
    def size(self) -> int:
        return self.qv + 8

    @property
    def dynamic(self) -> list[int]:
        """States that carry the circuit's memory from one period to the next."""
        return [0, 1, *range(2, 2 + self.n_ctrl)]


@dataclass
class Cycle:
    """One switching period for every row of a batch."""

    w_end: np.ndarray  # (P, s)
    t_on: np.ndarray  # (P,)
    seg_kind: np.ndarray  # (P, S) int, -1 unused
    seg_t0: np.ndarray  # (P, S), inf unused
    seg_w0: np.ndarray  # (P, S, s)
    dcm: np.ndarray  # (P,) bool: an idle segment of positive length


class Circuit:
    """Augmented interval matrices, their propagators and output rows.

    Parameters
    ----------
    model : SwitchedModel
        Per-interval equations of the stage.
    f_sw : float
        Switching frequency. [Hz]
    controller : AnalogController or None
        Solved together with the stage when analog.
    omegas : ndarray, optional
        Injection angular frequency of each batch member. [rad/s]
    """

    def __init__(
        self,
        model: SwitchedModel,
        f_sw: float,
        controller: AnalogController | None = None,
        omegas: np.ndarray | None = None,
        *,
        min_points: int = 64,
    ) -> None:
        self.model = model
        self.t_s = 1.0 / f_sw
        analog = isinstance(controller, AnalogController)
        self.controller = controller
        m = controller.order if analog else 0
        osc = omegas is not None
        self.lay = lay = Layout(m, 2 if osc else 0)
        om = np.zeros(1) if omegas is None else np.asarray(omegas, dtype=float)
        self.batch = om.size
        self.diode = model.idle is not None
        intervals: list[Interval] = [model.on, model.off] + ([model.idle] if self.diode else [])
        s = lay.size
        self.sense_sign = sgn = sense_sign(model)
        h = controller.sense_gain if controller is not None else 0.0
        self.rows_vout = np.zeros((len(intervals), s))
        self.rows_iin = np.zeros((len(intervals), s))
        self.rows_vc = np.zeros((len(intervals), s))
        mats = []
        for kind, iv in enumerate(intervals):
            rv = self.rows_vout[kind]
            rv[0:2] = iv.c[0]
            rv[lay.u] = iv.d[0]
            ri = self.rows_iin[kind]
            ri[0:2] = iv.c[1]
            ri[lay.u] = iv.d[1]
            row_e = np.zeros(s)
            row_e[lay.ref] = 1.0
            row_e -= h * sgn * rv
            if osc:
                row_e[lay.s1] -= h * sgn
            mm = np.zeros((self.batch, s, s))
            mm[:, 0:2, 0:2] = iv.a
            mm[:, 0:2, lay.u] = iv.b
            if analog and m:
                mm[:, lay.z, lay.z] = controller.a
                mm[:, lay.z, :] += np.outer(controller.b[:, 0], row_e)[None]
            if analog:
                self.rows_vc[kind][lay.z] = controller.c[0]
                self.rows_vc[kind] += controller.d[0, 0] * row_e
            if osc:
                mm[:, lay.s1, lay.s2] = om
                mm[:, lay.s2, lay.s1] = -om
            mm[:, lay.qv, :] = rv
            mm[:, lay.qi, 0] = 1.0
            mm[:, lay.qin, :] = ri
            mm[:, lay.ref, lay.rate] = 1.0
            mats.append(mm)
        self.mats = mats
        self.props = [Propagator(mm, self.t_s, min_points=min_points) for mm in mats]
        if analog:
            self.vc_tables = self.props[ON].row_tables(
                np.broadcast_to(self.rows_vc[ON], (self.batch, s))
            )
        if self.diode:
            e_il = np.zeros((self.batch, s))
            e_il[:, 0] = 1.0
            self.il_tables = self.props[OFF].row_tables(e_il)
            # forward bias of the rectifier while idle: the off interval's di/dt at i_l = 0
            fwd = -mats[OFF][:, 0, :].copy()
            fwd[:, 0] = 0.0
            self.fwd_rows = -fwd
            self.fwd_tables = self.props[IDLE].row_tables(fwd)

    # ------------------------------------------------------------------------------ helpers
    def v_out(self, w: np.ndarray, kind: int = ON) -> np.ndarray:
        """Output voltage of states ``w`` (..., s) in interval ``kind``. [V]"""
        return w @ self.rows_vout[kind]

    def v_control(self, w: np.ndarray) -> np.ndarray:
        """Analog control voltage at states ``w`` (on-interval output equation). [V]"""
        return w @ self.rows_vc[ON]

    def natural_t_on(self, w0: np.ndarray, members: np.ndarray) -> np.ndarray:
        """Trailing-edge PWM: first instant the control voltage meets the ramp ``t/(Fm Ts)``."""
        c = self.controller
        ts = self.t_s
        vc0 = self.v_control(w0)
        t_max = np.full(w0.shape[0], c.duty_max * ts)
        slope = 1.0 / (c.modulator_gain * ts)
        tc = self.props[ON].first_crossing(self.vc_tables, w0, t_max, members, slope)
        t_on = np.where(np.isfinite(tc), tc, t_max)
        return np.where(vc0 > 0, t_on, 0.0)

    # ------------------------------------------------------------------------------- period
    def cycle(self, w0: np.ndarray, members: np.ndarray, t_on: np.ndarray | None) -> Cycle:
        """Run one period from states ``w0`` (P, s); ``t_on`` None means natural PWM."""
        if w0.shape[0] == 1:
            return self._cycle1(w0[0], int(members[0]), None if t_on is None else float(t_on[0]))
        lay = self.lay
        ts = self.t_s
        p, s = w0.shape
        w = w0.copy()
        w[:, lay.qv : lay.qv + 3] = 0.0
        if t_on is None:
            t_on = self.natural_t_on(w, members)
        t_on = np.clip(np.asarray(t_on, dtype=float), 0.0, ts)
        kinds = np.full((p, _MAX_SEGMENTS), -1, dtype=np.int64)
        t0s = np.full((p, _MAX_SEGMENTS), np.inf)
        w0s = np.zeros((p, _MAX_SEGMENTS, s))
        kinds[:, 0] = ON
        t0s[:, 0] = 0.0
        w0s[:, 0] = w
        w = self.props[ON].apply(w, t_on, members)
        t = t_on.copy()
        kind = np.full(p, OFF, dtype=np.int64)
        dcm = np.zeros(p, dtype=bool)
        if self.diode:
            il = w[:, 0]
            fwd = np.einsum("ps,ps->p", self.fwd_rows[members], w)
            to_idle = (il <= 0) & (fwd <= 0)
            w[to_idle, 0] = 0.0
            kind[to_idle] = IDLE
        active = t < ts
        for seg in range(1, _MAX_SEGMENTS):
            if not np.any(active):
                break
            idx = np.flatnonzero(active)
            kinds[idx, seg] = kind[idx]
            t0s[idx, seg] = t[idx]
            w0s[idx, seg] = w[idx]
            last = seg == _MAX_SEGMENTS - 1
            groups = [(k, idx[kind[idx] == k]) for k in (OFF, IDLE)]
            for k, sel in groups:
                if sel.size == 0:
                    continue
                rem = ts - t[sel]
                if self.diode and not last:
                    tables = self.il_tables if k == OFF else self.fwd_tables
                    tc = self.props[k].first_crossing(tables, w[sel], rem, members[sel])
                else:
                    tc = np.full(sel.size, np.nan)
                hit = np.isfinite(tc) & (tc < rem)
                tau = np.where(hit, tc, rem)
                wn = self.props[k].apply(w[sel], tau, members[sel])
                if k == OFF:
                    wn[hit, 0] = 0.0
                else:
                    dcm[sel] |= tau > 0
                w[sel] = wn
                t[sel] = np.where(hit, t[sel] + tau, ts)
                kind[sel[hit]] = IDLE if k == OFF else OFF
            active = t < ts
        return Cycle(w, t_on, kinds, t0s, w0s, dcm)

    def _cycle1(self, w0: np.ndarray, member: int, t_on: float | None) -> Cycle:
        """Single-row :meth:`cycle` (same arithmetic, scalar control flow)."""
        lay = self.lay
        ts = self.t_s
        s = w0.size
        w = w0.copy()
        w[lay.qv : lay.qv + 3] = 0.0
        if t_on is None:
            c = self.controller
            t_max = c.duty_max * ts
            if float(w @ self.rows_vc[ON]) > 0:
                tc = self.props[ON].first_crossing1(
                    self.vc_tables, w, t_max, member, 1.0 / (c.modulator_gain * ts)
                )
                t_on = t_max if math.isnan(tc) else tc
            else:
                t_on = 0.0
        t_on = min(max(t_on, 0.0), ts)
        kinds = np.full((1, _MAX_SEGMENTS), -1, dtype=np.int64)
        t0s = np.full((1, _MAX_SEGMENTS), np.inf)
        w0s = np.zeros((1, _MAX_SEGMENTS, s))
        kinds[0, 0] = ON
        t0s[0, 0] = 0.0
        w0s[0, 0] = w
        w = self.props[ON].apply1(w, t_on, member)
        t = t_on
        kind = OFF
        dcm = False
        if self.diode and w[0] <= 0 and float(self.fwd_rows[member] @ w) <= 0:
            w[0] = 0.0
            kind = IDLE
        seg = 1
        while t < ts and seg < _MAX_SEGMENTS:
            kinds[0, seg] = kind
            t0s[0, seg] = t
            w0s[0, seg] = w
            rem = ts - t
            tc = math.nan
            if self.diode and seg < _MAX_SEGMENTS - 1:
                tables = self.il_tables if kind == OFF else self.fwd_tables
                tc = self.props[kind].first_crossing1(tables, w, rem, member)
            hit = not math.isnan(tc) and tc < rem
            tau = tc if hit else rem
            w = self.props[kind].apply1(w, tau, member)
            if kind == IDLE:
                dcm = dcm or tau > 0
            if hit:
                if kind == OFF:
                    w[0] = 0.0
                t += tau
                kind = IDLE if kind == OFF else OFF
            else:
                t = ts
            seg += 1
        return Cycle(w[None, :], np.array([t_on]), kinds, t0s, w0s, np.array([dcm]))

    # --------------------------------------------------------------------------- evaluation
    def evaluate(self, cyc: Cycle, members: np.ndarray, times: np.ndarray) -> tuple:
        """States and interval kind at ``times`` (n,) inside the period, for every row.

        Returns
        -------
        w : ndarray, shape (P, n, s)
        kind : ndarray of int, shape (P, n)
        """
        p = cyc.seg_kind.shape[0]
        n = times.size
        # segment containing each time: last segment with t0 <= t
        seg = np.sum(cyc.seg_t0[:, None, :] <= times[None, :, None], axis=2) - 1
        seg = np.clip(seg, 0, None)
        rows = np.repeat(np.arange(p), n)
        segf = seg.reshape(-1)
        kind = cyc.seg_kind[rows, segf]
        tau = np.tile(times, p) - cyc.seg_t0[rows, segf]
        wstart = cyc.seg_w0[rows, segf]
        out = np.empty((p * n, wstart.shape[1]))
        for k in np.unique(kind):
            sel = kind == k
            out[sel] = self.props[k].apply(wstart[sel], tau[sel], members[rows[sel]])
        return out.reshape(p, n, -1), kind.reshape(p, n)

    def boundary_values(self, cyc: Cycle) -> tuple[np.ndarray, np.ndarray]:
        """``v_out`` and ``i_l`` on both sides of every switching instant (P, 2S)."""
        p, nseg = cyc.seg_kind.shape
        vals_v = np.full((p, 2 * nseg), np.nan)
        vals_i = np.full((p, 2 * nseg), np.nan)
        for j in range(nseg):
            k = cyc.seg_kind[:, j]
            if not np.any(k >= 0):
                break
            nxt = cyc.seg_w0[:, j + 1] if j + 1 < nseg else cyc.w_end
            has_next = (cyc.seg_kind[:, j + 1] >= 0) if j + 1 < nseg else np.zeros(p, bool)
            w_end = np.where(has_next[:, None], nxt, cyc.w_end)
            t_next = np.where(has_next, cyc.seg_t0[:, min(j + 1, nseg - 1)], self.t_s)
            used = (k >= 0) & (t_next > cyc.seg_t0[:, j])
            kk = np.where(used, k, 0)
            vals_v[used, 2 * j] = np.einsum("ps,ps->p", cyc.seg_w0[:, j], self.rows_vout[kk])[used]
            vals_v[used, 2 * j + 1] = np.einsum("ps,ps->p", w_end, self.rows_vout[kk])[used]
            vals_i[used, 2 * j] = cyc.seg_w0[used, j, 0]
            vals_i[used, 2 * j + 1] = w_end[used, 0]
        return vals_v, vals_i
