"""Curves the report draws, computed from a design result (no plotting here).

References
----------
.. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed., Kluwer,
   2001, ch. 9 (loop gain ``T = Gc Fm Gvd H``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

__all__ = ["ReportCurves", "report_curves"]


@dataclass(frozen=True)
class ReportCurves:
    """Frequency responses of a design on one grid.

    Attributes
    ----------
    f_hz : ndarray
        Frequency grid. [Hz]
    gvd : dict of str to complex ndarray
        Control-to-output ``Gvd`` per CCM corner, nominal first. [V per unit duty]
    gc : complex ndarray or None
        Compensator ``Gc``. [V/V]
    loop : dict of str to complex ndarray
        Loop gain ``T`` per CCM corner, nominal first (delay included exactly). [-]
    failing : tuple of str
        Corners that miss a target.
    sampled_f_hz : ndarray or None
        Grid of the sampled loop (up to half the sample rate). [Hz]
    sampled_loop : complex ndarray or None
        Sampled (z-domain) loop gain of a digital design. [-]
    """

    f_hz: np.ndarray
    gvd: dict = field(default_factory=dict)
    gc: np.ndarray | None = None
    loop: dict = field(default_factory=dict)
    failing: tuple[str, ...] = ()
    sampled_f_hz: np.ndarray | None = None
    sampled_loop: np.ndarray | None = None


def report_curves(result, *, n_points: int = 400) -> ReportCurves:
    """Compute the report's frequency responses.

    Parameters
    ----------
    result : loopwright.design.DesignResult
        The design.
    n_points : int
        Points of the log frequency grid, ``1e-4 fsw`` to ``fsw``.

    Returns
    -------
    ReportCurves

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.1.
    """
    spec = result.spec
    ps = spec.power_stage
    f = np.geomspace(ps.f_sw * 1e-4, ps.f_sw, int(n_points))
    w = 2 * math.pi * f
    sign = -1.0 if ps.topology == "buck-boost" else 1.0
    g = spec.modulator_gain * spec.sense_gain * sign
    comp = result.compensator
    gc = comp.freqresp(w) if comp is not None else None
    delay = np.exp(-1j * w * result.delay_s) if result.delay_s else 1.0
    gvd: dict = {}
    loop: dict = {}
    for cp in (result.plant.nominal, *result.plant.corners):
        if cp.model is None:
            continue
        h = cp.model.freqresp("v_out", "d", f)
        gvd[cp.corner.name] = h
        if gc is not None:
            loop[cp.corner.name] = gc * g * h * delay
    failing = tuple(c.name for c in result.failing_corners())
    sf = sl = None
    if result.digital is not None:
        fs = result.digital.options.sample_rate_hz
        sf = np.geomspace(ps.f_sw * 1e-4, 0.499 * fs, int(n_points))
        sl = result.digital.loop_response(sf)
    return ReportCurves(f, gvd, gc, loop, failing, sf, sl)
