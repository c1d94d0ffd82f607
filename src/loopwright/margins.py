"""Loop margins found on the exact frequency response of one loop or a batch of loops.

Every crossing of the loop gain ``T(j w)`` is bracketed on a logarithmic frequency grid and then
refined by root finding on the exact response (vectorised regula falsi with the Anderson-Bjorck
modification, applied to all brackets at once). Nothing is read off the grid.

The grid is made trustworthy before it is used:

* **Adaptive subdivision.** Wherever two neighbouring grid points differ by more than
  ``6 dB`` in magnitude or ``45 deg`` in phase (a sharp resonance, a notch, a fast phase
  swing), the interval is split into 16 logarithmic sub-intervals, recursively, up to five
  levels (a resolution of about ``1e-8`` in relative frequency). With at most 45 deg between
  neighbours, the phase is continuous from point to point, so consecutive samples unwrap
  unambiguously; inside a bracket the phase is measured as ``angle(-T)``, which is continuous
  across the negative real axis where the phase crossings live.
* **Hidden pairs.** Two crossings closer together than the grid spacing leave no sign change
  on the grid (the curve dips through the level and back between two samples). Each grid
  extremum of ``|T|`` (and of the phase near -180 deg) that stays on one side of the level
  within a window of 20 dB (60 deg) is refined by a safeguarded parabolic search on the
  exact response; if the true extremum passes the level, the two crossings on either side of
  it are bracketed and refined like any other.

Phase crossings are the frequencies where ``T(j w)`` crosses the negative real axis, i.e. the
phase passes -180 deg modulo 360 deg.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from loopwright.errors import DesignError, ModelValidityWarning

__all__ = ["LoopMargins", "find_margins", "find_margins_batch"]

# Subdivision triggers between neighbouring samples, and the subdivision itself.
_SPLIT_DB = 6.0
_SPLIT_DEG = 45.0
_SPLIT_PARTS = 16
_SPLIT_DEPTH = 5
_SPLIT_MAX_ROWS = 200_000
# Windows in which a grid extremum is checked for a hidden pair of crossings.
_HIDDEN_WINDOW_DB = 20.0
_HIDDEN_WINDOW_DEG = 60.0
_EXTREMUM_ITERATIONS = 100
# Root refinement.
_ROOT_MAX_ITERATIONS = 200
_ROOT_XTOL = 1e-13  # in ln(omega)
_ROOT_FTOL = 1e-14  # in ln|T| or rad
_ROOT_ACCEPT = 1e-7  # a refined root must satisfy |ln|T|| or |angle(-T)| below this [rad]
_DEDUPE_X = 1e-10  # roots closer than this in ln(omega) are one crossing

_RATIO2 = 10.0 ** (_SPLIT_DB / 10.0)  # magnitude-squared ratio for the split trigger
_COS2 = math.cos(math.radians(_SPLIT_DEG)) ** 2
_HID_LO2 = 10.0 ** (-_HIDDEN_WINDOW_DB / 10.0)
_HID_HI2 = 10.0 ** (_HIDDEN_WINDOW_DB / 10.0)
_HID_TAN = math.tan(math.radians(_HIDDEN_WINDOW_DEG))
_CGOLD = (3.0 - math.sqrt(5.0)) / 2.0

_GAIN = 0
_PHASE = 1


@dataclass(frozen=True)
class LoopMargins:
    """Stability margins of one loop gain ``T(j w)``, closed loop ``1/(1 + T)``.

    Attributes
    ----------
    crossover_hz : float
        The gain crossover (``|T| = 1``) whose phase margin is smallest in magnitude: the one
        nearest the critical point -1 (for a loop with only positive margins, the lowest
        margin); ``nan`` if ``|T|`` never crosses 1 in the searched range. [Hz]
    phase_margin_deg : float
        ``180 + angle T`` at ``crossover_hz``, wrapped into (-180, 180]; ``nan`` without a
        crossover. [deg]
    gain_margin_db : float
        Margin to a gain *increase*: ``-20 log10 |T|`` at the phase crossing with ``|T| < 1``
        that is closest to 0 dB (the one a gain increase reaches first); ``+inf`` if the phase
        never crosses -180 deg where ``|T| < 1``. For a loop with an integrator these
        crossings lie above the gain crossover. [dB]
    gain_reduction_margin_db : float or None
        Margin to a gain *reduction* (conditional stability): the smallest ``20 log10 |T|``
        over phase crossings where ``|T| > 1``; ``None`` if there is none. [dB]
    delay_margin_s : float
        Smallest extra pure delay that brings a gain crossover onto -1: the minimum over all
        crossovers of ``(PM mod 360 deg) / w_c`` in radians per rad/s (a crossover with a
        negative margin needs the delay that turns it once more around to -1, the convention
        of python-control); ``+inf`` without a crossover. [s]
    gain_crossovers_hz : tuple of float
        Every frequency where ``|T| = 1``, ascending. [Hz]
    phase_crossovers_hz : tuple of float
        Every frequency where the phase is -180 deg (mod 360), ascending. [Hz]
    phase_margins_deg : tuple of float
        Phase margin at each entry of ``gain_crossovers_hz``. [deg]
    conditionally_stable : bool
        True when the phase crosses -180 deg below ``crossover_hz`` where ``|T| > 1`` and the
        crossings with ``|T| > 1`` cancel in the Nyquist sense (as many downward as upward
        passes of the negative real axis): for an open-loop stable ``T`` the closed loop is
        stable, but a gain reduction by ``gain_reduction_margin_db`` makes it unstable.
    """

    crossover_hz: float
    phase_margin_deg: float
    gain_margin_db: float
    gain_reduction_margin_db: float | None
    delay_margin_s: float
    gain_crossovers_hz: tuple[float, ...]
    phase_crossovers_hz: tuple[float, ...]
    phase_margins_deg: tuple[float, ...]
    conditionally_stable: bool


Response = Callable[[np.ndarray], np.ndarray]


def find_margins(
    response: Response,
    f_min_hz: float,
    f_max_hz: float,
    *,
    points_per_decade: float = 200,
) -> LoopMargins:
    """Gain and phase crossings and stability margins of one loop.

    Parameters
    ----------
    response : callable
        ``response(omega) -> T(j omega)``: the exact loop gain at the angular frequencies of a
        1-D array ``omega`` [rad/s], returned as a complex array of the same shape. The loop is
        closed as ``1/(1 + T)`` (negative feedback, sign absorbed).
    f_min_hz, f_max_hz : float
        Searched frequency range, ``0 < f_min_hz < f_max_hz``. [Hz]
    points_per_decade : float, optional
        Density of the logarithmic bracketing grid (>= 10). The crossings are refined on the
        exact response, so the density affects only what is detected, not the accuracy.

    Returns
    -------
    LoopMargins
        Crossover, phase margin, gain margin, margin to gain reduction, delay margin and every
        crossing.

    Raises
    ------
    DesignError
        Invalid range or density, or a response of the wrong shape.

    Notes
    -----
    Gain crossings are roots of ``ln|T(j w)|`` and phase crossings roots of ``angle(-T(j w))``
    in ``x = ln w``, bracketed on the grid and refined by regula falsi with the Anderson-Bjorck
    modification [1]_ to ``|dx| < 1e-13`` or a residual below ``1e-14``. The phase margin
    definition and the gain margin as the gain factor that brings the Nyquist curve to -1
    follow [2]_. See the module docstring for the grid subdivision and the search for pairs
    of crossings closer than the grid spacing.

    References
    ----------
    .. [1] N. Anderson and A. Bjorck, "A new high order method of regula falsi type for
       computing a root of an equation", BIT 13, pp. 253-264, 1973.
    .. [2] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.4.

    Examples
    --------
    >>> import numpy as np
    >>> m = find_margins(lambda w: 1e4 / (1j * w * (1 + 1j * w / 1e5)), 1.0, 1e7)
    >>> round(m.crossover_hz, 3), round(m.phase_margin_deg, 3)
    (1583.728, 84.317)
    """

    def batch(omega: np.ndarray) -> np.ndarray:
        omega = np.asarray(omega, dtype=float)
        values = np.asarray(response(omega.ravel()), dtype=complex)
        if values.shape != (omega.size,):
            raise DesignError(
                f"must return shape ({omega.size},) for {omega.size} frequencies, "
                f"got {values.shape}",
                key="response",
            )
        return values.reshape(1, -1)

    return _find(batch, f_min_hz, f_max_hz, points_per_decade)[0]


def find_margins_batch(
    response: Response,
    f_min_hz: float,
    f_max_hz: float,
    *,
    points_per_decade: float = 200,
) -> list[LoopMargins]:
    """Stability margins of ``k`` loops at once (corners, tolerance sweeps).

    Parameters
    ----------
    response : callable
        ``response(omega)`` evaluates all ``k`` loop gains. Given a 1-D ``omega`` of length
        ``n`` it returns a complex array of shape ``(k, n)``; given a 2-D ``omega`` of shape
        ``(k, m)`` it returns shape ``(k, m)`` with row ``i`` evaluated at ``omega[i]``
        (used for the refinement, where every loop has its own frequencies). [rad/s]
        Optionally, ``response.pointwise(loops, omega)`` (two 1-D arrays of equal length)
        returns loop ``loops[i]`` at ``omega[i]``; when present it is used for the
        refinement instead of the ``(k, m)`` form, which saves work on large batches.
    f_min_hz, f_max_hz : float
        Searched frequency range. [Hz]
    points_per_decade : float, optional
        Density of the bracketing grid (>= 10).

    Returns
    -------
    list of LoopMargins
        One entry per loop, in row order.

    Raises
    ------
    DesignError
        Invalid range or density, or a response of the wrong shape.

    Notes
    -----
    Same method as :func:`find_margins`; the grid, the subdivision, the hidden-pair search and
    the root refinement run on all loops together, so the cost per loop is a few vectorised
    passes over the grid.

    References
    ----------
    .. [1] N. Anderson and A. Bjorck, "A new high order method of regula falsi type for
       computing a root of an equation", BIT 13, pp. 253-264, 1973.
    """
    return _find(response, f_min_hz, f_max_hz, points_per_decade)


# ----------------------------------------------------------------------------------------------
# engine


def _check_inputs(f_min_hz: float, f_max_hz: float, points_per_decade: float) -> None:
    for key, value in (("f_min_hz", f_min_hz), ("f_max_hz", f_max_hz)):
        if not (isinstance(value, int | float | np.floating | np.integer) and math.isfinite(value)):
            raise DesignError(f"must be a finite number of hertz, got {value!r}", key=key)
        if value <= 0:
            raise DesignError(f"must be > 0 Hz, got {value!r}", key=key)
    if not f_max_hz > f_min_hz:
        raise DesignError(
            f"must exceed f_min_hz = {f_min_hz!r} Hz, got {f_max_hz!r} Hz", key="f_max_hz"
        )
    if not (math.isfinite(points_per_decade) and points_per_decade >= 10):
        raise DesignError(f"must be >= 10, got {points_per_decade!r}", key="points_per_decade")


class _Evaluator:
    """Evaluates a batch response on a shared grid and at scattered (loop, omega) points."""

    def __init__(self, response: Response):
        self.response = response
        self.k = 0
        self.fill = 1.0

    def grid(self, omega: np.ndarray) -> np.ndarray:
        with np.errstate(all="ignore"):
            values = np.asarray(self.response(omega), dtype=complex)
        if values.ndim != 2 or values.shape[1] != omega.size:
            raise DesignError(
                f"must return shape (k, {omega.size}) for {omega.size} frequencies, "
                f"got {values.shape}",
                key="response",
            )
        self.k = values.shape[0]
        self.fill = float(omega[0])
        return values

    def at(self, loops: np.ndarray, omega: np.ndarray) -> np.ndarray:
        """Response of loop ``loops[i]`` at ``omega[i]``."""
        p = loops.size
        if p == 0:
            return np.empty(0, dtype=complex)
        pointwise = getattr(self.response, "pointwise", None)
        if pointwise is not None:
            with np.errstate(all="ignore"):
                return np.asarray(pointwise(loops, omega), dtype=complex).reshape(p)
        counts = np.bincount(loops, minlength=self.k)
        order = np.argsort(loops, kind="stable")
        starts = np.cumsum(counts) - counts
        rank = np.empty(p, dtype=np.intp)
        rank[order] = np.arange(p) - starts[loops[order]]
        width = int(counts.max())
        table = np.full((self.k, width), self.fill)
        table[loops, rank] = omega
        with np.errstate(all="ignore"):
            values = np.asarray(self.response(table), dtype=complex)
        if values.shape != table.shape:
            raise DesignError(
                f"must return shape {table.shape} for a frequency array of that shape "
                f"(row i evaluated at omega[i]), got {values.shape}",
                key="response",
            )
        return values[loops, rank]


class _Brackets:
    """Accumulates brackets: loop, kind, ln-omega and response at both ends."""

    def __init__(self) -> None:
        self.parts: list[tuple[np.ndarray, ...]] = []

    def add(self, loops, kind, xa, xb, ta, tb) -> None:
        if loops.size:
            kinds = np.full(loops.size, kind, dtype=np.int8)
            self.parts.append((loops, kinds, xa, xb, ta, tb))

    def arrays(self) -> tuple[np.ndarray, ...]:
        if not self.parts:
            empty_f = np.empty(0)
            empty_c = np.empty(0, dtype=complex)
            return (np.empty(0, np.intp), np.empty(0, np.int8), empty_f, empty_f, empty_c, empty_c)
        return tuple(np.concatenate(col) for col in zip(*self.parts, strict=True))


def _objective(kind: np.ndarray, t: np.ndarray) -> np.ndarray:
    """ln|T| for gain brackets, angle(-T) for phase brackets (continuous near -180 deg)."""
    with np.errstate(all="ignore"):
        gain = 0.5 * np.log(t.real * t.real + t.imag * t.imag)
        phase = np.arctan2(-t.imag, -t.real)
    return np.where(kind == _GAIN, gain, phase)


def _interval_brackets(x, t, loops, rows, cols, brackets: _Brackets) -> None:
    """Bracket the crossings in the intervals (rows, cols) -> (rows, cols + 1)."""
    ta = t[rows, cols]
    tb = t[rows, cols + 1]
    xa = x[rows, cols]
    xb = x[rows, cols + 1]
    lp = loops[rows]
    with np.errstate(all="ignore"):
        # gain: |T|^2 - 1 changes sign
        gain = (ta.real**2 + ta.imag**2 >= 1.0) != (tb.real**2 + tb.imag**2 >= 1.0)
        # phase: Im T changes sign where T crosses the negative real axis
        phase = (ta.imag >= 0.0) != (tb.imag >= 0.0)
        frac = ta.imag / (ta.imag - tb.imag)
        phase &= (ta.real + frac * (tb.real - ta.real)) < 0.0
    brackets.add(lp[gain], _GAIN, xa[gain], xb[gain], ta[gain], tb[gain])
    brackets.add(lp[phase], _PHASE, xa[phase], xb[phase], ta[phase], tb[phase])


def _scan_rows(
    x: np.ndarray,
    t: np.ndarray,
    loops: np.ndarray,
    s0: int,
    s1: int,
    may_split: bool,
    brackets: _Brackets,
    hidden: list[tuple[np.ndarray, ...]],
) -> tuple[np.ndarray, np.ndarray]:
    """Scan rows of samples; proper points are columns s0..s1 (others are only neighbours).

    Adds brackets of intervals that are not split, records hidden-pair candidates, and returns
    (row, column) of the intervals to split. Written as few whole-array passes as possible:
    this runs over every grid point of every loop.
    """
    nrow, ncol = t.shape
    re = t.real
    im = t.imag
    with np.errstate(all="ignore"):
        m2 = re * re
        m2 += im * im
        ma, mb = m2[:, :-1], m2[:, 1:]
        # |Ta||Tb| sin(dphi): sign gives the direction of the phase, size the turn
        cross = re[:, :-1] * im[:, 1:]
        cross -= im[:, :-1] * re[:, 1:]
        split = None
        if may_split:
            dot = re[:, :-1] * re[:, 1:]
            dot += im[:, :-1] * im[:, 1:]
            split = dot < np.abs(cross)  # phase step above 45 deg
            split |= mb > _RATIO2 * ma
            split |= ma > _RATIO2 * mb
            split[:, :s0] = False
            split[:, s1:] = False
    up = m2 >= 1.0
    change = up[:, :-1] != up[:, 1:]
    upper = im >= 0.0
    change |= upper[:, :-1] != upper[:, 1:]
    change[:, :s0] = False
    change[:, s1:] = False
    srows = scols = np.empty(0, dtype=np.intp)
    if split is not None:
        srows, scols = np.nonzero(split)
        narrow = (x[srows, scols + 1] - x[srows, scols]) <= 1e-9
        if np.any(narrow):
            split[srows[narrow], scols[narrow]] = False
            srows, scols = srows[~narrow], scols[~narrow]
        if srows.size:
            change[srows, scols] = False
    rows, cols = np.nonzero(change)
    _interval_brackets(x, t, loops, rows, cols, brackets)

    # hidden pairs: interior extrema of |T| or of the phase that stay on one side of the level
    lo = max(s0, 1)
    hi = min(s1, ncol - 2)
    if hi < lo:
        return srows, scols
    with np.errstate(invalid="ignore"):
        inc = mb > ma
        ext = inc[:, :-1] != inc[:, 1:]  # column e <-> centre e + 1
        turn_up = cross > 0.0
        ext |= turn_up[:, :-1] != turn_up[:, 1:]
    ext[:, : lo - 1] = False
    ext[:, hi:] = False
    rows, cols = np.nonzero(ext)
    if rows.size == 0:
        return srows, scols
    c = cols + 1
    ml, mc, mr = m2[rows, c - 1], m2[rows, c], m2[rows, c + 1]
    tl, tc, tr = t[rows, c - 1], t[rows, c], t[rows, c + 1]
    with np.errstate(all="ignore"):
        gmax = (mc >= ml) & (mc >= mr) & (ml < 1) & (mc < 1) & (mr < 1) & (mc > _HID_LO2)
        gmin = (mc <= ml) & (mc <= mr) & (ml >= 1) & (mc >= 1) & (mr >= 1) & (mc < _HID_HI2)
        ql, qc, qr = tl.imag / tl.real, tc.imag / tc.real, tr.imag / tr.real
        left3 = (tl.real < 0) & (tc.real < 0) & (tr.real < 0)
        # z = angle(-T) = atan(q) where Re T < 0
        zmax = left3 & (qc >= ql) & (qc >= qr) & (ql < 0) & (qc < 0) & (qr < 0) & (qc > -_HID_TAN)
        zmin = left3 & (qc <= ql) & (qc <= qr) & (ql > 0) & (qc > 0) & (qr > 0) & (qc < _HID_TAN)
    for mask, kind, sense in (
        (gmax, _GAIN, 1.0),
        (gmin, _GAIN, -1.0),
        (zmax, _PHASE, 1.0),
        (zmin, _PHASE, -1.0),
    ):
        # candidates beside a split interval are kept: the split rows may not reach the
        # extremum, and a pair found twice is merged when the roots are collected
        sel = np.nonzero(mask)[0]
        if sel.size:
            r, cc = rows[sel], c[sel]
            hidden.append(
                (
                    loops[r],
                    np.full(sel.size, kind, np.int8),
                    np.full(sel.size, sense),
                    x[r, cc - 1],
                    x[r, cc],
                    x[r, cc + 1],
                    t[r, cc - 1],
                    t[r, cc],
                    t[r, cc + 1],
                )
            )
    return srows, scols


def _scan_blocks(x, t, loops, s0, s1, may_split, brackets, hidden, block: int = 64):
    """:func:`_scan_rows` over blocks of rows, so each block's temporaries stay in cache."""
    nrow = t.shape[0]
    if nrow <= block:
        return _scan_rows(x, t, loops, s0, s1, may_split, brackets, hidden)
    rows_all, cols_all = [], []
    for r0 in range(0, nrow, block):
        sl = slice(r0, r0 + block)
        rows, cols = _scan_rows(x[sl], t[sl], loops[sl], s0, s1, may_split, brackets, hidden)
        rows_all.append(rows + r0)
        cols_all.append(cols)
    return np.concatenate(rows_all), np.concatenate(cols_all)


def _extremum(ev: _Evaluator, loops, kind, sense, x1, x2, x3, t1, t2, t3):
    """Maximise ``sense * objective`` inside the bracketing triples ``x1 < x2 < x3``.

    Successive parabolic interpolation with golden-section fallback (Brent's safeguards),
    vectorised over all candidates; a candidate stops as soon as a sample passes the level
    (``sense * objective >= 0``) or its bracket is narrower than 1e-10 in ln(omega).
    Returns the best abscissa and response found.
    """
    x1, x2, x3 = x1.copy(), x2.copy(), x3.copy()
    t2 = t2.copy()
    f1 = sense * _objective(kind, t1)
    f2 = sense * _objective(kind, t2)
    f3 = sense * _objective(kind, t3)
    width_prev = (x3 - x1) * 2.0
    active = np.isfinite(f1) & np.isfinite(f2) & np.isfinite(f3) & (f2 < 0.0)
    for _ in range(_EXTREMUM_ITERATIONS):
        idx = np.nonzero(active)[0]
        if idx.size == 0:
            break
        a, b, c = x1[idx], x2[idx], x3[idx]
        fa, fb, fc = f1[idx], f2[idx], f3[idx]
        d1 = b - a
        d3 = b - c
        with np.errstate(all="ignore"):
            num = d1 * d1 * (fb - fc) - d3 * d3 * (fb - fa)
            den = d1 * (fb - fc) - d3 * (fb - fa)
            u = b - 0.5 * num / den
        width = c - a
        tol = 1e-12 * (1.0 + np.abs(b))
        golden = np.where(c - b > b - a, b + _CGOLD * (c - b), b - _CGOLD * (b - a))
        slow = width > 0.7 * width_prev[idx]
        bad = ~np.isfinite(u) | (u <= a + tol) | (u >= c - tol) | (np.abs(u - b) < tol) | slow
        u = np.where(bad, golden, u)
        width_prev[idx] = width
        tu = ev.at(loops[idx], np.exp(u))
        fu = sense[idx] * _objective(kind[idx], tu)
        better = fu >= fb
        right = u > b
        # new triple: the best point in the middle, the bracket shrinks
        x1[idx] = np.where(better, np.where(right, b, a), np.where(right, a, u))
        x3[idx] = np.where(better, np.where(right, c, b), np.where(right, u, c))
        f1[idx] = np.where(better, np.where(right, fb, fa), np.where(right, fa, fu))
        f3[idx] = np.where(better, np.where(right, fc, fb), np.where(right, fu, fc))
        x2[idx] = np.where(better, u, b)
        f2[idx] = np.where(better, fu, fb)
        t2[idx] = np.where(better, tu, t2[idx])
        done = ~np.isfinite(fu) | (np.where(better, fu, fb) >= 0.0)
        done |= (x3[idx] - x1[idx]) < 1e-10
        active[idx[done]] = False
    return x2, t2


def _refine_roots(ev: _Evaluator, loops, kind, xa, xb, ta, tb) -> tuple[np.ndarray, np.ndarray]:
    """Refine every bracket to a root of its objective; returns (ln omega, T) at the roots."""
    fa = _objective(kind, ta)
    fb = _objective(kind, tb)
    fa_true = fa.copy()
    fb_true = fb.copy()
    active = np.isfinite(fa) & np.isfinite(fb) & (fa != 0) & (fb != 0)
    for _ in range(_ROOT_MAX_ITERATIONS):
        idx = np.nonzero(active)[0]
        if idx.size == 0:
            break
        xa_, xb_, fa_, fb_ = xa[idx], xb[idx], fa[idx], fb[idx]
        with np.errstate(all="ignore"):
            xc = (xa_ * fb_ - xb_ * fa_) / (fb_ - fa_)
        lo = np.minimum(xa_, xb_)
        hi = np.maximum(xa_, xb_)
        bad = ~((xc > lo) & (xc < hi))
        xc = np.where(bad, 0.5 * (lo + hi), xc)
        tc = ev.at(loops[idx], np.exp(xc))
        fc = _objective(kind[idx], tc)
        swap = np.signbit(fc) != np.signbit(fb_)
        # Anderson-Bjorck: when the retained end stays, scale its value down
        with np.errstate(all="ignore"):
            scale = 1.0 - fc / fb_
        scale = np.where((scale > 0.0) & np.isfinite(scale), scale, 0.5)
        xa[idx] = np.where(swap, xb_, xa_)
        ta[idx] = np.where(swap, tb[idx], ta[idx])
        fa[idx] = np.where(swap, fb_, scale * fa_)
        fa_true[idx] = np.where(swap, fb_true[idx], fa_true[idx])
        xb[idx], tb[idx], fb[idx], fb_true[idx] = xc, tc, fc, fc
        done = (np.abs(fc) <= _ROOT_FTOL) | (np.abs(fa_true[idx]) <= _ROOT_FTOL)
        done |= ~np.isfinite(fc)
        done |= np.abs(xb[idx] - xa[idx]) <= _ROOT_XTOL
        active[idx[done]] = False
    use_b = np.abs(fb_true) <= np.abs(fa_true)
    return np.where(use_b, xb, xa), np.where(use_b, tb, ta)


def _find(response: Response, f_min_hz: float, f_max_hz: float, ppd: float) -> list[LoopMargins]:
    _check_inputs(f_min_hz, f_max_hz, ppd)
    ev = _Evaluator(response)
    x_lo = math.log(2.0 * math.pi * f_min_hz)
    x_hi = math.log(2.0 * math.pi * f_max_hz)
    n = max(3, int(math.ceil(math.log10(f_max_hz / f_min_hz) * ppd)) + 1)
    x_grid = np.linspace(x_lo, x_hi, n)
    t = ev.grid(np.exp(x_grid))
    k = t.shape[0]
    x = np.broadcast_to(x_grid, t.shape)
    loops = np.arange(k)

    brackets = _Brackets()
    hidden: list[tuple[np.ndarray, ...]] = []
    s0, s1 = 0, n - 1
    for depth in range(_SPLIT_DEPTH + 1):
        rows, cols = _scan_blocks(x, t, loops, s0, s1, depth < _SPLIT_DEPTH, brackets, hidden)
        if rows.size == 0:
            break
        if rows.size > _SPLIT_MAX_ROWS:
            warnings.warn(
                f"the loop response has {rows.size} intervals with fast magnitude or phase "
                "changes; crossings there are bracketed without further subdivision",
                ModelValidityWarning,
                stacklevel=3,
            )
            _interval_brackets(x, t, loops, rows, cols, brackets)
            break
        # subdivide: each split interval becomes a row of _SPLIT_PARTS sub-intervals, with one
        # extra sample beyond either end as a neighbour for the hidden-pair search
        xa = x[rows, cols]
        h = (x[rows, cols + 1] - xa) / _SPLIT_PARTS
        steps = np.arange(-1, _SPLIT_PARTS + 2)
        x_new = xa[:, None] + h[:, None] * steps
        x_new[:, 1] = xa
        x_new[:, -2] = x[rows, cols + 1]
        loops_new = loops[rows]
        t_new = ev.at(np.repeat(loops_new, steps.size), np.exp(x_new).ravel()).reshape(x_new.shape)
        t_new[:, 1] = t[rows, cols]
        t_new[:, -2] = t[rows, cols + 1]
        x, t, loops = x_new, t_new, loops_new
        s0, s1 = 1, _SPLIT_PARTS + 1

    if hidden:
        h_loops, h_kind, h_sense, h_xa, h_xc, h_xb, h_ta, h_tc, h_tb = (
            np.concatenate(col) for col in zip(*hidden, strict=True)
        )
        x_star, t_star = _extremum(ev, h_loops, h_kind, h_sense, h_xa, h_xc, h_xb, h_ta, h_tc, h_tb)
        crossed = h_sense * _objective(h_kind, t_star) >= 0.0
        for kind in (_GAIN, _PHASE):
            sel = crossed & (h_kind == kind)
            if np.any(sel):
                brackets.add(h_loops[sel], kind, h_xa[sel], x_star[sel], h_ta[sel], t_star[sel])
                brackets.add(h_loops[sel], kind, x_star[sel], h_xb[sel], t_star[sel], h_tb[sel])

    b_loops, b_kind, b_xa, b_xb, b_ta, b_tb = brackets.arrays()
    x_root, t_root = _refine_roots(
        ev, b_loops, b_kind, b_xa.copy(), b_xb.copy(), b_ta.copy(), b_tb.copy()
    )
    with np.errstate(all="ignore"):
        ok = np.abs(_objective(b_kind, t_root)) < _ROOT_ACCEPT
        if np.any(b_kind == _PHASE):
            ok &= (b_kind == _GAIN) | (t_root.real < 0)
    # direction of each phase crossing: +1 when Im T goes from negative to positive
    direction = np.where(b_ta.imag < 0, 1, -1) * np.where(b_xb > b_xa, 1, -1)
    sel = np.nonzero(ok)[0]
    order = sel[np.lexsort((x_root[sel], b_kind[sel], b_loops[sel]))]
    return _assemble(
        k, b_loops[order], b_kind[order], x_root[order], t_root[order], direction[order]
    )


def _assemble(k, loops, kind, x, t, direction) -> list[LoopMargins]:
    """Build one LoopMargins per loop from the refined crossings, sorted by (loop, kind, x)."""
    keep = np.ones(loops.size, dtype=bool)
    if loops.size > 1:
        same = (loops[1:] == loops[:-1]) & (kind[1:] == kind[:-1])
        keep[1:] = ~(same & (np.abs(np.diff(x)) < _DEDUPE_X))
    loops, kind, x, t, direction = loops[keep], kind[keep], x[keep], t[keep], direction[keep]
    freq = np.exp(x) / (2.0 * math.pi)
    with np.errstate(all="ignore"):
        mag = np.abs(t)
        pm = 180.0 + np.degrees(np.angle(t))
    pm = np.where(pm > 180.0, pm - 360.0, pm)
    g = kind == _GAIN
    g_loop, g_f, g_pm = loops[g], freq[g], pm[g]
    p_loop, p_f, p_mag, p_dir = loops[~g], freq[~g], mag[~g], direction[~g]
    g_bounds = np.searchsorted(g_loop, np.arange(k + 1)).tolist()
    p_bounds = np.searchsorted(p_loop, np.arange(k + 1)).tolist()

    # per-loop figures, vectorised
    fc = np.full(k, math.nan)
    pmc = np.full(k, math.nan)
    delay = np.full(k, math.inf)
    if g_loop.size:
        order = np.lexsort((np.abs(g_pm), g_loop))
        first = order[np.searchsorted(g_loop[order], np.unique(g_loop))]
        fc[g_loop[first]] = g_f[first]
        pmc[g_loop[first]] = g_pm[first]
        np.minimum.at(delay, g_loop, np.radians(np.mod(g_pm, 360.0)) / (2.0 * math.pi * g_f))
    below = p_mag < 1.0
    above = p_mag > 1.0
    mag_below = np.full(k, -math.inf)
    np.maximum.at(mag_below, p_loop[below], p_mag[below])
    mag_above = np.full(k, math.inf)
    np.minimum.at(mag_above, p_loop[above], p_mag[above])
    f_above = np.full(k, math.inf)
    np.minimum.at(f_above, p_loop[above], p_f[above])
    net = np.bincount(p_loop[above], weights=p_dir[above], minlength=k)
    with np.errstate(divide="ignore"):
        gm = np.where(mag_below > 0, -20.0 * np.log10(np.maximum(mag_below, 0.0)), math.inf)
        grm = 20.0 * np.log10(mag_above)
    has_above = np.isfinite(mag_above)
    cond = has_above & (net == 0) & (f_above < fc)

    g_f_l, g_pm_l, p_f_l = g_f.tolist(), g_pm.tolist(), p_f.tolist()
    rows = zip(
        fc.tolist(),
        pmc.tolist(),
        gm.tolist(),
        grm.tolist(),
        has_above.tolist(),
        delay.tolist(),
        cond.tolist(),
        strict=True,
    )
    out = []
    for j, (fcj, pmj, gmj, grmj, hasj, dj, cj) in enumerate(rows):
        out.append(
            LoopMargins(
                crossover_hz=fcj,
                phase_margin_deg=pmj,
                gain_margin_db=gmj,
                gain_reduction_margin_db=grmj if hasj else None,
                delay_margin_s=dj,
                gain_crossovers_hz=tuple(g_f_l[g_bounds[j] : g_bounds[j + 1]]),
                phase_crossovers_hz=tuple(p_f_l[p_bounds[j] : p_bounds[j + 1]]),
                phase_margins_deg=tuple(g_pm_l[g_bounds[j] : g_bounds[j + 1]]),
                conditionally_stable=cj,
            )
        )
    return out
