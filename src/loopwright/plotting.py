"""Figures of a design: Bode overlays, loop gain with its margins, step responses, polar view.

matplotlib lives here (and in :mod:`loopwright.report`) only. Every function draws what it is
given -- arrays computed elsewhere -- and returns ``(fig, axes)``; nothing is saved here. The
figures are created with :class:`matplotlib.figure.Figure` directly (no pyplot state), so they
work headless and are freed when dropped.

Frequency is in Hz on a log axis, magnitude in dB, phase in degrees.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import EngFormatter, NullFormatter

__all__ = [
    "PALETTE",
    "plot_bode",
    "plot_loop_gain",
    "plot_nyquist",
    "plot_step",
]

#: Colours of the report figures (nominal, other corners, failing corner, markers, shading).
PALETTE = {
    "nominal": "#12506b",
    "corner": "#7f9fae",
    "fail": "#b3261e",
    "mark": "#c77c02",
    "shade": "#eceff1",
    "grid": "#d5dde1",
    "sampled": "#5a3d8a",
}

_SIZE = (7.2, 5.0)


def _new(nrows: int = 1, *, size=_SIZE, sharex: bool = True, left: float = 0.11):
    # fixed margins: a layout engine would re-measure every text on each save
    fig = Figure(figsize=size)
    axes = fig.subplots(nrows, 1, sharex=sharex)
    fig.subplots_adjust(
        left=left,
        right=0.97,
        top=0.92 if nrows == 1 else 0.94,
        bottom=0.11 if nrows > 1 else 0.14,
        hspace=0.12,
    )
    axs = np.atleast_1d(axes)
    for ax in axs:
        ax.grid(True, which="major", color=PALETTE["grid"], lw=0.7)
        ax.grid(True, which="minor", color=PALETTE["grid"], lw=0.35, alpha=0.6)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
    return fig, axes


def _db(h: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.abs(h))


def _phase(h: np.ndarray) -> np.ndarray:
    return np.degrees(np.unwrap(np.angle(h)))


def _style(name: str, first: bool, failing: bool) -> dict:
    if failing:
        return {"color": PALETTE["fail"], "lw": 1.1, "ls": "--", "alpha": 0.9, "zorder": 3}
    if first:
        return {"color": PALETTE["nominal"], "lw": 2.0, "zorder": 4}
    return {"color": PALETTE["corner"], "lw": 0.8, "alpha": 0.75, "zorder": 2}


def plot_bode(
    f_hz,
    curves: Mapping[str, np.ndarray],
    *,
    title: str = "",
    failing: Sequence[str] = (),
    shade_above_hz: float | None = None,
    shade_label: str = "beyond the averaged model",
    mag_label: str = "magnitude [dB]",
    ax=None,
):
    """Bode overlay of several complex responses on one frequency grid.

    Parameters
    ----------
    f_hz : array_like
        Frequencies, increasing. [Hz]
    curves : mapping of str to complex ndarray
        Responses by name; the first is drawn as the reference (bold), the rest thin.
    title : str
        Figure title.
    failing : sequence of str
        Names drawn in the failure style (red, dashed).
    shade_above_hz : float, optional
        Shade frequencies above this (e.g. where the averaged model stops holding). [Hz]
    shade_label : str
        Legend text of the shaded band.
    mag_label : str
        Magnitude axis label.
    ax : pair of Axes, optional
        Draw into these (magnitude, phase) instead of a new figure.

    Returns
    -------
    fig : matplotlib.figure.Figure
    axes : tuple (ax_mag, ax_phase)

    References
    ----------
    .. [1] H. W. Bode, *Network Analysis and Feedback Amplifier Design*, Van Nostrand, 1945.
    """
    f = np.asarray(f_hz, float)
    if ax is None:
        fig, (am, ap) = _new(2)
    else:
        am, ap = ax
        fig = am.figure
    names = list(curves)
    fail = set(failing)
    n_other = 0
    for i, name in enumerate(names):
        h = np.asarray(curves[name])
        st = _style(name, i == 0, name in fail)
        label = name if (i == 0 or name in fail) else None
        if i > 0 and name not in fail:
            n_other += 1
            if n_other == 1:
                label = "other corners" if len(names) > 2 else name
        am.semilogx(f, _db(h), label=label, **st)
        ap.semilogx(f, _phase(h), **st)
    for a in (am, ap):
        a.set_xlim(f[0], f[-1])
        if shade_above_hz is not None and shade_above_hz < f[-1]:
            a.axvspan(
                shade_above_hz,
                f[-1],
                color=PALETTE["shade"],
                zorder=0,
                label=shade_label if a is am else None,
            )
    am.set_ylabel(mag_label)
    ap.set_ylabel("phase [deg]")
    ap.set_xlabel("frequency")
    ap.xaxis.set_major_formatter(EngFormatter(unit="Hz", sep=" "))
    ap.xaxis.set_minor_formatter(NullFormatter())
    ap.yaxis.set_major_locator(_phase_locator())
    if title:
        am.set_title(title, loc="left", fontsize=11)
    if names:
        am.legend(fontsize=8, frameon=False, loc="best")
    return fig, (am, ap)


def _phase_locator():
    from matplotlib.ticker import MaxNLocator

    return MaxNLocator(nbins=7, steps=[1, 1.5, 3, 4.5, 9, 10])


def plot_loop_gain(
    f_hz,
    curves: Mapping[str, np.ndarray],
    *,
    crossover_hz: float | None = None,
    phase_margin_deg: float | None = None,
    gain_margin_db: float | None = None,
    phase_crossover_hz: float | None = None,
    title: str = "loop gain T",
    failing: Sequence[str] = (),
    shade_above_hz: float | None = None,
    extra: Mapping[str, np.ndarray] | None = None,
    extra_f_hz=None,
):
    """Loop gain overlay with the first curve's crossover, phase margin and gain margin marked.

    Parameters
    ----------
    f_hz, curves, title, failing, shade_above_hz
        As in :func:`plot_bode`; the first curve is the nominal loop.
    crossover_hz : float, optional
        Nominal gain crossover. [Hz]
    phase_margin_deg : float, optional
        Nominal phase margin. [deg]
    gain_margin_db : float, optional
        Nominal gain margin (finite to be drawn). [dB]
    phase_crossover_hz : float, optional
        Where the nominal phase crosses -180 deg. [Hz]
    extra : mapping of str to complex ndarray, optional
        Further responses on ``extra_f_hz`` (e.g. the sampled loop), drawn dotted.
    extra_f_hz : array_like, optional
        Frequencies of ``extra``. [Hz]

    Returns
    -------
    fig, (ax_mag, ax_phase)

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.4 (phase margin and crossover on the loop-gain Bode plot).
    """
    fig, (am, ap) = plot_bode(
        f_hz,
        curves,
        title=title,
        failing=failing,
        shade_above_hz=shade_above_hz,
        mag_label="|T| [dB]",
    )
    if extra:
        for name, h in extra.items():
            am.semilogx(extra_f_hz, _db(h), color=PALETTE["sampled"], ls=":", lw=1.5, label=name)
            ap.semilogx(extra_f_hz, _phase(h), color=PALETTE["sampled"], ls=":", lw=1.5)
        am.legend(fontsize=8, frameon=False, loc="best")
    am.axhline(0.0, color="0.35", lw=0.8)
    # the phase is unwrapped from the low end; draw the -180 deg line of that branch
    first = np.asarray(next(iter(curves.values()))) if curves else None
    m = PALETTE["mark"]
    if first is not None and crossover_hz and math.isfinite(crossover_hz):
        f = np.asarray(f_hz, float)
        ph = _phase(first)
        ph_c = float(np.interp(math.log(crossover_hz), np.log(f), ph))
        branch = ph_c - (phase_margin_deg if phase_margin_deg is not None else ph_c + 180.0)
        ap.axhline(branch, color="0.35", lw=0.8)
        am.axvline(crossover_hz, color=m, lw=0.9, ls="--")
        ap.axvline(crossover_hz, color=m, lw=0.9, ls="--")
        am.plot([crossover_hz], [0.0], "o", color=m, ms=6, zorder=6)
        if phase_margin_deg is not None and math.isfinite(phase_margin_deg):
            ap.annotate(
                "",
                xy=(crossover_hz, ph_c),
                xytext=(crossover_hz, branch),
                arrowprops={"arrowstyle": "<->", "color": m, "lw": 1.6},
            )
            ap.text(
                crossover_hz * 1.12,
                (ph_c + branch) / 2,
                f"PM {phase_margin_deg:.1f} deg",
                color=m,
                fontsize=9,
                va="center",
            )
        am.text(crossover_hz * 1.12, 3.0, f"fc {_eng(crossover_hz)}Hz", color=m, fontsize=9)
        if (
            phase_crossover_hz
            and math.isfinite(phase_crossover_hz)
            and gain_margin_db
            and math.isfinite(gain_margin_db)
        ):
            am.annotate(
                "",
                xy=(phase_crossover_hz, -gain_margin_db),
                xytext=(phase_crossover_hz, 0.0),
                arrowprops={"arrowstyle": "<->", "color": m, "lw": 1.2},
            )
            am.text(
                phase_crossover_hz * 1.12,
                -gain_margin_db / 2,
                f"GM {gain_margin_db:.1f} dB",
                color=m,
                fontsize=9,
                va="center",
            )
    return fig, (am, ap)


def _eng(x: float) -> str:
    for scale, p in ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "u")):
        if abs(x) >= scale:
            return f"{x / scale:.3g} {p}"
    return f"{x:.3g} "


def plot_step(
    t_s,
    y,
    *,
    final_value: float,
    title: str = "",
    ylabel: str = "",
    y_scale: float = 1.0,
    peak: tuple[float, float] | None = None,
    settling_time_s: float | None = None,
    band: float | None = None,
    estimate: tuple[np.ndarray, np.ndarray, str] | None = None,
):
    """One step response with its peak, settling band and settling time marked.

    Parameters
    ----------
    t_s, y : array_like
        Time [s] and response.
    final_value : float
        Steady-state value (drawn as a line).
    title, ylabel : str
        Labels.
    y_scale : float
        Factor applied to ``y`` for display (e.g. 1e3 for mV).
    peak : (time [s], value), optional
        Peak to mark (value in the units of ``y``).
    settling_time_s : float, optional
        Settling time to mark. [s]
    band : float, optional
        Half-width of the settling band around ``final_value`` (units of ``y``).
    estimate : (t_s, y, label), optional
        A comparison curve (e.g. the second-order estimate), drawn dashed.

    Returns
    -------
    fig, ax

    References
    ----------
    .. [1] G. F. Franklin, J. D. Powell and A. Emami-Naeini, *Feedback Control of Dynamic
       Systems*, Pearson, sec. 3.4 (step-response specifications; recalled).
    """
    fig, ax = _new(1, size=(7.2, 3.6))
    t_us = np.asarray(t_s) * 1e6
    yy = np.asarray(y) * y_scale
    fv = final_value * y_scale
    if band is not None and band > 0:
        ax.axhspan(
            fv - band * y_scale,
            fv + band * y_scale,
            color=PALETTE["shade"],
            zorder=0,
            label="settling band",
        )
    ax.axhline(fv, color="0.35", lw=0.8)
    if estimate is not None:
        ax.plot(
            np.asarray(estimate[0]) * 1e6,
            np.asarray(estimate[1]) * y_scale,
            color=PALETTE["corner"],
            ls="--",
            lw=1.2,
            label=estimate[2],
        )
    ax.plot(t_us, yy, color=PALETTE["nominal"], lw=1.8, label="closed loop (nominal)")
    m = PALETTE["mark"]
    if peak is not None:
        ax.plot(
            [peak[0] * 1e6],
            [peak[1] * y_scale],
            "v" if peak[1] < final_value else "^",
            color=m,
            ms=7,
            zorder=5,
            label="peak",
        )
    if settling_time_s is not None and math.isfinite(settling_time_s):
        ax.axvline(settling_time_s * 1e6, color=m, ls="--", lw=0.9, label="settled (2 %)")
    ax.set_xlim(0, t_us[-1])
    ax.set_xlabel("time after the step [us]")
    ax.set_ylabel(ylabel)
    if title:
        ax.set_title(title, loc="left", fontsize=11)
    ax.legend(fontsize=8, frameon=False, loc="best")
    return fig, ax


def plot_nyquist(
    curves: Mapping[str, np.ndarray],
    *,
    title: str = "loop gain near -1 (polar view)",
    failing: Sequence[str] = (),
    radius: float = 2.5,
):
    """Polar (Nyquist) view of loop gains around the critical point -1, with the unit circle.

    Parameters
    ----------
    curves : mapping of str to complex ndarray
        ``T(j w)`` for positive ``w``; the first is the nominal loop. The mirror image
        (negative frequencies) is drawn faintly.
    title : str
        Figure title.
    failing : sequence of str
        Names drawn in the failure style.
    radius : float
        Half-width of the view around ``-1 + 0j``.

    Returns
    -------
    fig, ax

    References
    ----------
    .. [1] H. Nyquist, "Regeneration theory," Bell System Technical Journal 11, pp. 126-147,
       1932.
    """
    fig, ax = _new(1, size=(5.6, 5.2))
    th = np.linspace(0, 2 * np.pi, 361)
    ax.plot(np.cos(th), np.sin(th), color="0.45", lw=0.9, ls="--", label="unit circle")
    fail = set(failing)
    n_other = 0
    for i, (name, h) in enumerate(curves.items()):
        h = np.asarray(h)
        st = _style(name, i == 0, name in fail)
        label = name if (i == 0 or name in fail) else None
        if i > 0 and name not in fail:
            n_other += 1
            label = "other corners" if n_other == 1 else None
        ax.plot(h.real, h.imag, label=label, **st)
        st2 = dict(st, lw=0.6, alpha=0.35)
        st2.pop("label", None)
        ax.plot(h.real, -h.imag, **st2)
    ax.plot([-1.0], [0.0], "P", color=PALETTE["fail"], ms=9, zorder=6, label="-1")
    ax.set_xlim(-1 - radius, -1 + radius)
    ax.set_ylim(-radius, radius)
    ax.set_aspect("equal")
    ax.axhline(0, color="0.6", lw=0.6)
    ax.axvline(0, color="0.6", lw=0.6)
    ax.set_xlabel("Re T")
    ax.set_ylabel("Im T")
    ax.set_title(title, loc="left", fontsize=11)
    ax.legend(fontsize=8, frameon=False, loc="lower left")
    return fig, ax


def plot_waveforms(result, *, title: str | None = None):
    """Switching waveforms of a simulation: inductor current, output voltage, duty.

    Parameters
    ----------
    result : loopwright.simulate.SimulationResult
        Its ``waveforms`` (the recorded last periods of the steady state); when the run
        has a load or line step, that step's own waveforms are drawn instead.

    Returns
    -------
    fig, axes
        A matplotlib Figure with three stacked axes sharing a time axis in microseconds.
    """
    wf = result.waveforms
    for step in (getattr(result, "load_step", None), getattr(result, "line_step", None)):
        if step is not None and getattr(step, "waveforms", None) is not None:
            wf = step.waveforms
            break
    fig, axes = _new(3, size=(7.2, 6.2))
    t_us = (np.asarray(wf.t) - float(np.asarray(wf.t)[0])) * 1e6
    specs = (
        (axes[0], wf.i_l, "inductor current [A]"),
        (axes[1], wf.v_out, "output voltage [V]"),
        (axes[2], wf.duty, "duty [-]"),
    )
    for ax, y, label in specs:
        ax.plot(t_us, y, color=PALETTE["nominal"], lw=1.1)
        ax.set_ylabel(label)
    axes[2].set_xlabel("time [us]")
    axes[0].set_title(title or "switching waveforms", loc="left")
    return fig, axes


def plot_measured_loop(
    f_model_hz,
    t_model,
    f_meas_hz,
    meas_mag_db,
    meas_phase_deg,
    *,
    f_sw_hz: float | None = None,
):
    """Loop gain of the averaged model (curve) beside the switching model's injection points.

    Parameters
    ----------
    f_model_hz : array_like
        Frequencies of the model curve. [Hz]
    t_model : array_like of complex
        Model loop gain ``T(j 2 pi f)``.
    f_meas_hz, meas_mag_db, meas_phase_deg : array_like
        Injection measurement (``T = -Va/Vb``, Middlebrook 1975). [Hz], [dB], [deg]
    f_sw_hz : float, optional
        Shades the band above ``f_sw/2`` where the averaged model does not hold. [Hz]

    Returns
    -------
    fig, axes
    """
    f = np.asarray(f_model_hz, dtype=float)
    t = np.asarray(t_model, dtype=complex)
    fig, axes = _new(2)
    ph = _phase(t)
    meas_ph = np.asarray(meas_phase_deg, dtype=float)
    # put the measured phases on the model curve's branch
    ref = np.interp(np.log(f_meas_hz), np.log(f), ph)
    meas_ph = meas_ph + 360.0 * np.round((ref - meas_ph) / 360.0)
    axes[0].semilogx(f, _db(t), color=PALETTE["nominal"], lw=1.6, label="averaged model")
    axes[0].semilogx(f_meas_hz, meas_mag_db, "o", color=PALETTE["mark"], ms=5,
                     label="switching model, injection")  # fmt: skip
    axes[1].semilogx(f, ph, color=PALETTE["nominal"], lw=1.6)
    axes[1].semilogx(f_meas_hz, meas_ph, "o", color=PALETTE["mark"], ms=5)
    axes[0].axhline(0, color="0.4", lw=0.8)
    axes[1].axhline(-180, color="0.4", lw=0.8)
    if f_sw_hz:
        for ax in axes:
            ax.axvspan(f_sw_hz / 2, f[-1], color=PALETTE["shade"], lw=0)
    axes[0].set_ylabel("|T| [dB]")
    axes[1].set_ylabel("phase [deg]")
    axes[1].set_xlabel("frequency")
    axes[1].xaxis.set_major_formatter(EngFormatter(unit="Hz", sep=" "))
    axes[1].xaxis.set_minor_formatter(NullFormatter())
    axes[0].legend(loc="lower left", fontsize=8, frameon=False)
    axes[0].set_title("loop gain: averaged model vs switching model", loc="left")
    return fig, axes
