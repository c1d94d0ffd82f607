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

* **Proved intervals (batches that list their poles and zeros).** When the response also
  lists every pole and zero of each ``T(s)`` and its pure delay (and the batch is large
  enough for this to pay, some 24 000 grid samples in all), the grid is first sampled at
  about 5 points per decade (a subset of the grid points) and undecided intervals are halved
  at grid points. With ``x = ln w``, ``|d^2 ln T/dx^2|`` and the phase slope are bounded on
  any interval by sums over the poles and zeros; Taylor's theorem then proves an interval
  free of crossings, or holding exactly one crossing (bracketed by its ends), from the two
  end values alone. Only single grid intervals that stay undecided are scanned as above, so
  the crossings found are those the full grid finds, at a small part of the cost.

Phase crossings are the frequencies where ``T(j w)`` crosses the negative real axis, i.e. the
phase passes -180 deg modulo 360 deg.
"""

from __future__ import annotations

import dataclasses
import inspect
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
# Coarse first pass (responses that list their poles and zeros): about _COARSE_PPD points per
# decade taken from the grid, undecided intervals halved; the bounds are raised by
# _BOUND_SAFETY against rounding in the poles and zeros; singular points whose curvature term
# peaks above _SHARP_PEAK are bounded interval by interval, the others by their peak.
_COARSE_PPD = 5.0
_BOUND_SAFETY = 1.25
_SHARP_PEAK = 2.0
_BOUND_SLACK = 1e-12  # absolute slack for rounding in ln|T| and the phase [rad]
_BLOCK = 16384  # samples per block of whole-array passes (temporaries stay small)
# below this many grid samples (loops x points) the full grid is cheaper than the coarse pass
_COARSE_MIN_SAMPLES = 24_000

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
        refinement instead of the ``(k, m)`` form, which saves work on large batches; and
        ``response.on_grid(loops, index, omega_grid)`` returns loop ``loops[i]`` at
        ``omega_grid[index[i]]`` (many points of one grid, so shared factors are computed
        once per grid point); and ``response.singularities = (shared, per_loop, delay_s)``
        lists every finite pole and zero of each ``T(s)`` (a superset is allowed;
        ``shared``: 1-D complex, common to all loops; ``per_loop``: complex ``(k, q)``, a
        row with a nan for a loop whose poles and zeros are unknown) and the pure delay
        ``exp(-s delay_s)`` [rad/s, s]; with it, intervals that provably hold no crossing or
        exactly one are decided without sampling them at the full density.
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
    passes over the grid. With ``singularities`` most of the grid is decided by bounds on
    ``ln T`` (see the module notes): an interval ``[a, b]`` of width ``h`` in ``ln w`` with
    ``|f''| <= M`` holds no zero of ``f`` between ends of one sign, and exactly one between
    ends of opposite signs, when ``(sqrt|f(a)| + sqrt|f(b)|)^2 > M h^2 / 2`` (a further zero
    would need a stationary point within ``sqrt(2 |f| / M)`` of both ends).

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

    def on_grid(self, loops: np.ndarray, index: np.ndarray, w_grid: np.ndarray) -> np.ndarray:
        """Response of loop ``loops[i]`` at ``w_grid[index[i]]`` (1-D arrays of equal length)."""
        on_grid = getattr(self.response, "on_grid", None)
        if on_grid is None:
            return self.at(loops, w_grid[index])
        p = loops.size
        out = np.empty(p, dtype=complex)
        with np.errstate(all="ignore"):
            for i in range(0, p, _BLOCK):
                sl = slice(i, i + _BLOCK)
                out[sl] = np.asarray(on_grid(loops[sl], index[sl], w_grid), dtype=complex).ravel()
        return out

    def at(self, loops: np.ndarray, omega: np.ndarray) -> np.ndarray:
        """Response of loop ``loops[i]`` at ``omega[i]``."""
        p = loops.size
        if p == 0:
            return np.empty(0, dtype=complex)
        pointwise = getattr(self.response, "pointwise", None)
        if pointwise is not None:
            with np.errstate(all="ignore"):
                if p <= _BLOCK:
                    return np.asarray(pointwise(loops, omega), dtype=complex).reshape(p)
                out = np.empty(p, dtype=complex)
                for i in range(0, p, _BLOCK):
                    sl = slice(i, i + _BLOCK)
                    out[sl] = np.asarray(pointwise(loops[sl], omega[sl]), dtype=complex).ravel()
            return out
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


def _objective_sorted(kind: np.ndarray, t: np.ndarray) -> np.ndarray:
    """:func:`_objective` for ``kind`` sorted (gain first): each function on its part only."""
    if t.size < 256:  # few values: one pass over all is quicker than splitting
        return _objective(kind, t)
    ng = int(np.searchsorted(kind, _PHASE))
    with np.errstate(all="ignore"):
        if ng == t.size:
            return 0.5 * np.log(t.real * t.real + t.imag * t.imag)
        if ng == 0:
            return np.arctan2(-t.imag, -t.real)
        out = np.empty(t.shape)
        g, p = t[:ng], t[ng:]
        out[:ng] = 0.5 * np.log(g.real * g.real + g.imag * g.imag)
        out[ng:] = np.arctan2(-p.imag, -p.real)
    return out


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
    bounds: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Scan rows of samples; proper points are columns s0..s1 (others are only neighbours).

    Adds brackets of intervals that are not split, records hidden-pair candidates (with the
    row's entry of ``bounds``: the curvature and phase-slope bounds, shape ``(rows, 2)``), and
    returns (row, column) of the intervals to split. Written as few whole-array passes as
    possible: this runs over every grid point of every loop.
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
                    bounds[r],
                )
            )
    return srows, scols


def _scan_blocks(x, t, loops, s0, s1, may_split, brackets, hidden, bounds, size: int = _BLOCK):
    """:func:`_scan_rows` over blocks of about ``size`` samples, so temporaries stay in cache."""
    nrow = t.shape[0]
    block = max(1, size // max(1, t.shape[1]))
    if nrow <= block:
        return _scan_rows(x, t, loops, s0, s1, may_split, brackets, hidden, bounds)
    rows_all, cols_all = [], []
    for r0 in range(0, nrow, block):
        sl = slice(r0, r0 + block)
        rows, cols = _scan_rows(
            x[sl], t[sl], loops[sl], s0, s1, may_split, brackets, hidden, bounds[sl]
        )
        rows_all.append(rows + r0)
        cols_all.append(cols)
    return np.concatenate(rows_all), np.concatenate(cols_all)


def _extremum(ev: _Evaluator, loops, kind, sense, x1, x2, x3, t1, t2, t3, bounds):
    """Maximise ``sense * objective`` inside the bracketing triples ``x1 < x2 < x3``.

    Successive parabolic interpolation with golden-section fallback (Brent's safeguards),
    vectorised over all candidates; a candidate stops as soon as a sample passes the level
    (``sense * objective >= 0``), its bracket is narrower than 1e-10 in ln(omega), or the
    row's curvature and phase-slope ``bounds`` (shape ``(p, 2)``, infinite when unknown)
    prove that no crossing is left in the bracket (as in :func:`_no_hidden_pair`, with the
    exact distances ``|objective|``). Returns the best abscissa and response found.
    """
    x1, x2, x3 = x1.copy(), x2.copy(), x3.copy()
    t2 = t2.copy()
    f1 = sense * _objective(kind, t1)
    f2 = sense * _objective(kind, t2)
    f3 = sense * _objective(kind, t3)
    width_prev = (x3 - x1) * 2.0
    use_bounds = bool(np.any(np.isfinite(bounds[:, 0])))
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
        if not use_bounds:
            active[idx[done]] = False
            continue
        # all three samples lie below the level: the bounds may rule out a crossing now
        hl = x2[idx] - x1[idx]
        hr = x3[idx] - x2[idx]
        half = bounds[idx, 0] * 0.5
        with np.errstate(invalid="ignore"):
            r1, r2, r3 = (np.sqrt(-f[idx]) for f in (f1, f2, f3))
            clear = (r1 + r2) ** 2 > half * hl * hl + _BOUND_SLACK
            clear &= (r2 + r3) ** 2 > half * hr * hr + _BOUND_SLACK
            clear &= bounds[idx, 1] * np.maximum(hl, hr) < math.pi
        done |= clear
        active[idx[done]] = False
    return x2, t2


def _refine_roots(ev: _Evaluator, loops, kind, xa, xb, ta, tb) -> tuple[np.ndarray, np.ndarray]:
    """Refine every bracket to a root of its objective; returns (ln omega, T) at the roots.

    ``kind`` must be sorted (gain brackets first).
    """
    fa = _objective_sorted(kind, ta)
    fb = _objective_sorted(kind, tb)
    fa_true = fa.copy()
    fb_true = fb.copy()
    active = np.isfinite(fa) & np.isfinite(fb) & (fa != 0) & (fb != 0)
    for iteration in range(_ROOT_MAX_ITERATIONS):
        idx = np.nonzero(active)[0]
        if idx.size == 0:
            break
        xa_, xb_, fa_, fb_ = xa[idx], xb[idx], fa[idx], fb[idx]
        with np.errstate(all="ignore"):
            xc = (xa_ * fb_ - xb_ * fa_) / (fb_ - fa_)
        # a secant step of a few ulps: xb is as good as floating point gets (stepping on would
        # only bisect the bracket down to the x tolerance); checked once brackets are tight
        still = iteration < 4 or ~(np.abs(xc - xb_) <= 4.0 * np.spacing(np.abs(xb_)))
        if not np.all(still):
            active[idx[~still]] = False
            idx, xa_, xb_, fa_, fb_, xc = (v[still] for v in (idx, xa_, xb_, fa_, fb_, xc))
            if idx.size == 0:
                break
        lo = np.minimum(xa_, xb_)
        hi = np.maximum(xa_, xb_)
        bad = ~((xc > lo) & (xc < hi))
        xc = np.where(bad, 0.5 * (lo + hi), xc)
        tc = ev.at(loops[idx], np.exp(xc))
        fc = _objective_sorted(kind[idx], tc)
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


def _curvature_terms(p: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Interval-wise supremum of ``w |p| / |j w - p|^2`` for singular points ``p``.

    For poles or zeros ``p`` of ``T(s)`` (shape ``(r,)``) and the ascending samples ``w``
    (shape ``(nc,)``), returns the ``(nc - 1, r)`` suprema over each interval
    ``[w[i], w[i + 1]]``: each point's share of the bound on ``|d^2 ln T / d(ln w)^2|``
    (and, times ``|Re p| / |p|``, of the bound on the phase slope). The term is unimodal in
    ``w`` with its peak ``|p|^2 / (Re p^2 + (|p| - Im p)^2)`` at ``w = |p|``, so the supremum
    is the larger end value, or the peak in the one interval that holds it.
    """
    sr2 = p.real * p.real
    wi = p.imag
    ap = np.abs(p)
    wc = w[:, None]
    with np.errstate(all="ignore"):
        g = wc * ap / (sr2 + (wc - wi) ** 2)
        g[:, ap == 0.0] = 0.0  # a point at the origin (the integrator) bends nothing
        out = np.maximum(g[:-1], g[1:])
        peak = ap * ap / (sr2 + (ap - wi) ** 2)
    j = np.searchsorted(w, ap, side="right") - 1
    cols = np.nonzero((j >= 0) & (j < w.size - 1) & (ap > 0.0))[0]
    if cols.size:
        out[j[cols], cols] = np.maximum(out[j[cols], cols], peak[cols])
    return out


# classes of a coarse interval (see _classify_intervals)
_OPEN = 0  # may hold anything: look closer
_FREE = 1  # proved free of crossings
_ONE_GAIN = 2  # exactly one gain crossing, no phase crossing
_ONE_PHASE = 3  # exactly one phase crossing, no gain crossing
_ONE_EACH = 4  # exactly one crossing of each kind


def _sample_data(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per sample of ``T``: square roots of lower bounds on the two distances, and side flags.

    ``roots[0]``: of ``|ln y| >= 2 |y - 1| / (y + 1)`` for ``y = |T|^2`` (distance of
    ``ln|T|`` from 0); ``roots[1]``: of ``|angle(-T)| >= |Im T| / |T|`` where ``Re T < 0``,
    >= 90 deg elsewhere (distance of the phase from -180 deg). ``flags``: bit 0 ``|T| > 1``,
    bit 1 ``Im T > 0``, bit 2 ``Re T < 0``.
    """
    re, im = t.real, t.imag
    roots = np.empty((2, *t.shape))
    with np.errstate(all="ignore"):
        m2 = re * re + im * im
        left = re < 0.0
        np.sqrt(np.abs(m2 - 1.0) / (m2 + 1.0), out=roots[0])
        roots[1] = np.where(left, np.sqrt(np.abs(im) / np.sqrt(m2)), math.sqrt(0.5 * math.pi))
    flags = (m2 > 1.0).view(np.int8) | ((im > 0.0).view(np.int8) << 1)
    flags |= left.view(np.int8) << 2
    return roots, flags


# interval class from (gain state, phase state), each 0 undecided, 1 free, 2 one crossing
_CODES = np.array(
    [_OPEN, _OPEN, _OPEN, _OPEN, _FREE, _ONE_PHASE, _OPEN, _ONE_GAIN, _ONE_EACH], dtype=np.int8
)


def _classify_intervals(roots_a, flags_a, roots_b, flags_b, m_bound, r_bound, h) -> np.ndarray:
    """Classify intervals from the :func:`_sample_data` of their ends (codes ``_OPEN`` ...).

    ``m_bound`` bounds ``|f''|`` on each interval (``f = ln|T|`` or the continuous phase),
    ``r_bound`` the phase slope, ``h`` is the width in ``ln w``. If ``f`` had a zero between
    ends of one sign, or a second zero between ends of opposite signs, it would have a
    stationary point ``c`` with ``f(c)`` on the far side of the level (for two zeros: a
    maximum and a later minimum on the far sides), so by Taylor's theorem
    ``|f(a)| <= M (c - a)^2 / 2`` and ``|f(b)| <= M (b - c)^2 / 2`` (``c`` ordered), i.e.
    ``sqrt|f(a)| + sqrt|f(b)| <= h sqrt(M / 2)``. So with
    ``(sqrt d_a + sqrt d_b)^2 > M h^2 / 2`` for the distance bounds ``d``, ends on one side
    mean no crossing and ends on opposite sides exactly one.

    The phase tests also need a turn below 180 deg (``r_bound h < pi``), so the sampled phase
    difference is the true one, and for a crossing both ends left of the imaginary axis (the
    phase then passes -180 deg, not 0 deg; as ``d <= pi / 2``, the test also keeps the
    phase within 90 deg of its chord, away from the next multiple of 360 deg).
    """
    with np.errstate(all="ignore"):
        level = m_bound * (0.5 * h * h) + _BOUND_SLACK
        sums = roots_a + roots_b
        sums *= sums
        clear_g = sums[0] > level
        clear_p = (sums[1] > level) & (r_bound * h < math.pi)
    change = flags_a ^ flags_b
    gain = clear_g.view(np.int8) << (change & 1)  # 1 free, 2 one crossing
    phase = (clear_p & ((change & 2) == 0)).view(np.int8)
    phase |= (clear_p & ((change & 2) != 0) & ((flags_a & flags_b & 4) != 0)).view(np.int8) << 1
    return _CODES[gain * 3 + phase]


def _add_single_crossings(brackets: _Brackets, code, loops, xa, xb, ta, tb) -> np.ndarray:
    """Bracket the intervals with exactly one crossing; returns the mask of open intervals."""
    for kind, codes in ((_GAIN, (_ONE_GAIN, _ONE_EACH)), (_PHASE, (_ONE_PHASE, _ONE_EACH))):
        sel = np.nonzero((code == codes[0]) | (code == codes[1]))[0]
        brackets.add(loops[sel], kind, xa[sel], xb[sel], ta[sel], tb[sel])
    return code == _OPEN


def _curvature_sup(p: np.ndarray, wa: np.ndarray, wb: np.ndarray) -> np.ndarray:
    """Supremum of ``w |p| / |j w - p|^2`` over ``[wa, wb]``, elementwise (arrays broadcast).

    The same unimodal term as in :func:`_curvature_terms`, for intervals that do not share
    their ends.
    """
    sr2 = p.real * p.real
    wi = p.imag
    ap = np.abs(p)
    with np.errstate(all="ignore"):
        out = np.maximum(wa * ap / (sr2 + (wa - wi) ** 2), wb * ap / (sr2 + (wb - wi) ** 2))
        inside = (ap >= wa) & (ap <= wb)
        out = np.where(inside, ap * ap / (sr2 + (ap - wi) ** 2), out)
    return np.where(ap == 0.0, 0.0, out)


class _Bounds:
    """Curvature bound ``M`` and phase-slope bound ``R`` of ``ln T`` on intervals of the grid.

    ``singularities = (shared, per_loop, delay_s)`` lists every finite pole and zero of each
    ``T(s)`` (a superset is allowed) and the pure delay. With ``x = ln w`` and
    ``L(x) = ln T(j e^x)``, each singular point ``p`` contributes ``s / (s - p)`` to ``L'``
    and ``-s p / (s - p)^2`` to ``L''``, the delay ``-s delay_s`` to both, so
    ``|L''| <= M = sum_p w |p| / |j w - p|^2 + w delay_s`` and the phase slope
    ``|Im L'| <= R = sum_p w |Re p| / |j w - p|^2 + w delay_s``. Each term is bounded
    interval by interval for the shared points and for per-loop points whose term peaks
    above ``_SHARP_PEAK`` (a lightly damped pole or zero), by its peak for the others. Both
    bounds are raised by ``_BOUND_SAFETY`` against rounding in the poles and zeros; a loop
    whose per-loop points are not all finite gets infinite bounds.
    """

    def __init__(self, singularities, k: int):
        try:
            shared, per_loop, delay = singularities
            shared = np.asarray(shared, dtype=complex).ravel()
            per_loop = np.asarray(per_loop, dtype=complex)
            delay = float(delay)
        except (TypeError, ValueError) as err:
            raise DesignError(
                f"singularities must be (shared points, per-loop points, delay), got {err}",
                key="response",
            ) from err
        if per_loop.ndim != 2 or per_loop.shape[0] != k:
            raise DesignError(
                f"singularities must list per-loop points as shape ({k}, q), got {per_loop.shape}",
                key="response",
            )
        if not (math.isfinite(delay) and delay >= 0.0):
            raise DesignError(
                f"singularities must carry a delay >= 0 s, got {delay!r}", key="response"
            )
        self.delay = delay
        self.shared = shared if np.all(np.isfinite(shared)) else None
        with np.errstate(all="ignore"):
            self.shared_ratio = np.where(shared == 0.0, 0.0, np.abs(shared.real) / np.abs(shared))
        self.unknown = unknown = ~np.all(np.isfinite(per_loop), axis=1)
        pts = np.where(unknown[:, None], 0.0, per_loop)
        ap = np.abs(pts)
        with np.errstate(all="ignore"):
            peak = np.where(ap == 0.0, 0.0, ap * ap / (pts.real**2 + (ap - pts.imag) ** 2))
            ratio = np.where(ap == 0.0, 0.0, np.abs(pts.real) / ap)
        sharp = ~(peak <= _SHARP_PEAK)
        calm = np.where(sharp, 0.0, peak)
        self.m_base = np.where(unknown, np.inf, calm.sum(axis=1))
        self.r_base = np.where(unknown, np.inf, (calm * ratio).sum(axis=1))
        n_sharp = int(sharp.sum(axis=1).max()) if sharp.size else 0
        order = np.argsort(~sharp, axis=1, kind="stable")[:, :n_sharp]
        # a point at the origin adds nothing: it stands in where a loop has fewer sharp points
        self.sharp = np.where(
            np.take_along_axis(sharp, order, axis=1), np.take_along_axis(pts, order, axis=1), 0.0
        )
        self.sharp_ratio = np.take_along_axis(ratio, order, axis=1)

    def shared_terms(self, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Shared points and delay on the intervals of the ascending samples ``w``."""
        if self.shared is None:
            inf = np.full(w.size - 1, np.inf)
            return inf, inf
        terms = _curvature_terms(self.shared, w)
        tail = self.delay * w[1:]
        return terms.sum(axis=1) + tail, terms @ self.shared_ratio + tail

    def grid(self, m_shared, r_shared, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Raised bounds of all loops on the intervals of the shared samples ``w``.

        Shape ``(w.size - 1, k)``; ``m_shared``, ``r_shared`` from :meth:`shared_terms`.
        """
        m_bound = m_shared[:, None] + self.m_base
        r_bound = r_shared[:, None] + self.r_base
        for col in range(self.sharp.shape[1]):
            terms = _curvature_terms(self.sharp[:, col], w)
            m_bound += terms
            terms *= self.sharp_ratio[:, col]
            r_bound += terms
        m_bound *= _BOUND_SAFETY
        r_bound *= _BOUND_SAFETY
        return m_bound, r_bound

    def intervals(self, loops, m_outer, r_outer, wa, wb) -> tuple[np.ndarray, np.ndarray]:
        """Raised bounds on intervals ``[wa, wb]`` (shape ``(c, r)``) of loops ``loops`` (``(r,)``).

        ``m_outer``, ``r_outer`` (shape ``(r,)``) hold the raised shared bounds of an interval
        that contains each column's intervals.
        """
        m_bound = np.empty(wa.shape)
        r_bound = np.empty(wa.shape)
        m_bound[...] = m_outer + _BOUND_SAFETY * self.m_base[loops]
        r_bound[...] = r_outer + _BOUND_SAFETY * self.r_base[loops]
        for col in range(self.sharp.shape[1]):
            terms = _curvature_sup(self.sharp[loops, col], wa, wb)
            terms *= _BOUND_SAFETY
            m_bound += terms
            terms *= self.sharp_ratio[loops, col]
            r_bound += terms
        return m_bound, r_bound


def _coarse_start(ev: _Evaluator, response, x_grid: np.ndarray, ppd: float, brackets: _Brackets):
    """Decide the grid's intervals from a coarse subset of it, halving what is undecided.

    The grid is sampled first at about ``_COARSE_PPD`` points per decade; every interval not
    yet decided (see :func:`_classify_intervals` and :class:`_Bounds`) is halved at a grid
    point, down to single grid intervals. An interval is dropped only when the bounds on
    ``ln T`` prove that ``|T|`` stays on one side of 1 and the phase away from -180 deg
    (mod 360) all along it, and bracketed as it is (added to ``brackets``) only when they
    prove exactly one crossing in it. A single grid interval still undecided becomes a row
    with its two samples and one neighbour on either side, scanned exactly as the full grid
    would be, so the crossings found are those the full grid finds.

    Loops whose poles and zeros are not all known are scanned on the full grid.
    ``response.singularities`` is read only when the batch is large enough for the coarse
    pass to pay (``k n >= _COARSE_MIN_SAMPLES``).

    Returns ``(k, row_sets)``: each set ``(x, t, loops, s0, s1, bounds)`` in the layout of
    the subdivision rows (``bounds``: the raised curvature and phase-slope bounds valid on
    each row, shape ``(rows, 2)``), or ``None`` when the grid or the batch is too small for a
    coarse pass.
    """
    n = x_grid.size
    top = int(ppd // _COARSE_PPD)
    if top < 2 or n <= 4 * top:
        return None

    # level 0: a shared grid, every `top`-th point (and the last); one column per loop
    idx = np.arange(0, n, top)
    if idx[-1] != n - 1:
        idx = np.append(idx, n - 1)
    w_grid = np.exp(x_grid)
    wc = w_grid[idx]
    tc = ev.grid(wc)
    k = tc.shape[0]
    singularities = response.singularities if k * n >= _COARSE_MIN_SAMPLES else None
    if singularities is None:
        return None
    tc = np.ascontiguousarray(tc.T)
    bnd = _Bounds(singularities, k)
    m_shared, r_shared = bnd.shared_terms(wc)
    m_b, r_b = bnd.grid(m_shared, r_shared, wc)
    roots, flags = _sample_data(tc)
    code = _classify_intervals(
        roots[:, :-1], flags[:-1], roots[:, 1:], flags[1:], m_b, r_b, np.diff(x_grid[idx])[:, None]
    )
    code[:, bnd.unknown] = _FREE  # scanned on the full grid below
    js, loops = np.nonzero(code != _FREE)
    start, end = idx[js], idx[js + 1]
    t_start, t_end = tc[js, loops], tc[js + 1, loops]
    keep = _add_single_crossings(
        brackets, code[js, loops], loops, x_grid[start], x_grid[end], t_start, t_end
    )
    js, loops, start, end, t_start, t_end = (
        v[keep] for v in (js, loops, start, end, t_start, t_end)
    )
    # raised shared bounds on each level-0 interval, and on it with both neighbours; they
    # hold on every part of it
    m_sh = np.concatenate([[0.0], m_shared * _BOUND_SAFETY, [0.0]])
    r_sh = np.concatenate([[0.0], r_shared * _BOUND_SAFETY, [0.0]])
    m_out, r_out = m_sh[js + 1], r_sh[js + 1]
    m_wide = np.maximum(np.maximum(m_sh[js], m_out), m_sh[js + 2])
    r_wide = np.maximum(np.maximum(r_sh[js], r_out), r_sh[js + 2])

    # halve the undecided intervals at a grid point until they are single grid intervals
    done = []
    while True:
        single = end - start == 1
        if np.any(single):
            done.append((loops[single], start[single], t_start[single], t_end[single]))
            done[-1] += (m_wide[single], r_wide[single])
            sel = ~single
            loops, start, end, t_start, t_end = (
                v[sel] for v in (loops, start, end, t_start, t_end)
            )
            m_out, r_out, m_wide, r_wide = (v[sel] for v in (m_out, r_out, m_wide, r_wide))
        if loops.size == 0:
            break
        mid = (start + end) // 2
        ends = np.stack([start, mid, end])
        t3 = np.stack([t_start, ev.on_grid(loops, mid, w_grid), t_end])
        w3 = w_grid[ends]
        x3 = x_grid[ends]
        m_b, r_b = bnd.intervals(loops, m_out, r_out, w3[:-1], w3[1:])
        roots, flags = _sample_data(t3)
        code = _classify_intervals(
            roots[:, :-1], flags[:-1], roots[:, 1:], flags[1:], m_b, r_b, np.diff(x3, axis=0)
        )
        cc, rr = np.nonzero(code != _FREE)
        keep = _add_single_crossings(
            brackets,
            code[cc, rr],
            loops[rr],
            x3[cc, rr],
            x3[cc + 1, rr],
            t3[cc, rr],
            t3[cc + 1, rr],
        )
        cc, rr = cc[keep], rr[keep]
        loops, start, end = loops[rr], ends[cc, rr], ends[cc + 1, rr]
        t_start, t_end = t3[cc, rr], t3[cc + 1, rr]
        m_out, r_out, m_wide, r_wide = (v[rr] for v in (m_out, r_out, m_wide, r_wide))

    # rows: the single grid intervals still undecided, with a neighbour either side (nan
    # beyond the range), by loop and frequency
    loops, start, t_start, t_end, m_wide, r_wide = (
        (np.concatenate(col) for col in zip(*done, strict=True))
        if done
        else (np.empty(0, np.intp), np.empty(0, np.intp), *[np.empty(0)] * 4)
    )
    order = np.lexsort((start, loops))
    loops, start, t_start, t_end, m_wide, r_wide = (
        v[order] for v in (loops, start, t_start, t_end, m_wide, r_wide)
    )
    cols = start[:, None] + np.arange(-1, 3)
    x = x_grid[np.clip(cols, 0, n - 1)]
    t = np.full(x.shape, np.nan + 0j)
    t[:, 1] = t_start
    t[:, 2] = t_end
    need = (cols >= 0) & (cols < n)
    need[:, 1:3] = False
    # neighbouring rows of one loop lend each other their samples
    adj = (loops[1:] == loops[:-1]) & (start[1:] == start[:-1] + 1)
    need[:-1, 3] &= ~adj
    need[1:, 0] &= ~adj
    r_i, c_i = np.nonzero(need)
    t[r_i, c_i] = ev.on_grid(loops[r_i], cols[r_i, c_i], w_grid)
    lend = np.nonzero(adj)[0]
    t[lend, 3] = t[lend + 1, 2]
    t[lend + 1, 0] = t[lend, 1]
    # bounds valid on each row (its outer samples included)
    w_out = np.exp(x[:, [0, -1]].T)
    m_row, r_row = bnd.intervals(loops, m_wide, r_wide, w_out[:1], w_out[1:])
    row_sets = [(x, t, loops, 1, 2, np.column_stack([m_row[0], r_row[0]]))]
    # loops without known poles and zeros: the full grid
    unknown = np.nonzero(bnd.unknown)[0]
    if unknown.size:
        full = np.broadcast_to(x_grid, (unknown.size, n))
        index = np.broadcast_to(np.arange(n), full.shape)
        t_full = ev.on_grid(np.repeat(unknown, n), index.ravel(), w_grid).reshape(full.shape)
        inf = np.broadcast_to(np.inf, (unknown.size, 2))
        row_sets.append((full, t_full, unknown, 0, n - 1, inf))
    return k, row_sets


def _unique_candidates(loops, kind, xc) -> np.ndarray:
    """Mask keeping one of each hidden-pair candidate found twice (by neighbouring rows)."""
    keep = np.ones(loops.size, dtype=bool)
    if loops.size > 1:
        order = np.lexsort((xc, kind, loops))
        same = (
            (loops[order[1:]] == loops[order[:-1]])
            & (kind[order[1:]] == kind[order[:-1]])
            & (xc[order[1:]] == xc[order[:-1]])
        )
        keep[order[1:][same]] = False
    return keep


def _no_hidden_pair(kind, sense, x1, x2, x3, t1, t2, t3, bounds) -> np.ndarray:
    """True where the curvature bound proves there is no crossing in ``[x1, x3]``.

    ``bounds[:, 0]`` bounds ``|L''|`` and ``bounds[:, 1]`` the phase slope on the row (see
    :class:`_Bounds`; infinite without them). All three samples lie on one side of the
    level, so neither sub-interval holds a crossing when its ends pass the test of
    :func:`_classify_intervals` (for the phase, with a turn below 180 deg).
    """
    h1 = x2 - x1
    h2 = x3 - x2
    with np.errstate(all="ignore"):
        roots = []
        for t in (t1, t2, t3):
            m2 = t.real * t.real + t.imag * t.imag
            gain = np.abs(m2 - 1.0) / (m2 + 1.0)
            phase = np.where(t.real < 0.0, np.abs(t.imag) / np.sqrt(m2), 0.5 * math.pi)
            roots.append(np.sqrt(np.where(kind == _GAIN, gain, phase)))
        half = bounds[:, 0] * 0.5
        clear = (roots[0] + roots[1]) ** 2 > half * h1 * h1 + _BOUND_SLACK
        clear &= (roots[1] + roots[2]) ** 2 > half * h2 * h2 + _BOUND_SLACK
        clear &= bounds[:, 1] * np.maximum(h1, h2) < math.pi
    return clear


def _scan_and_split(ev: _Evaluator, x, t, loops, s0, s1, bounds, brackets, hidden) -> None:
    """Scan rows of samples, subdividing fast intervals, until nothing is left to split."""
    for depth in range(_SPLIT_DEPTH + 1):
        rows, cols = _scan_blocks(
            x, t, loops, s0, s1, depth < _SPLIT_DEPTH, brackets, hidden, bounds
        )
        if rows.size == 0:
            break
        if rows.size > _SPLIT_MAX_ROWS:
            warnings.warn(
                f"the loop response has {rows.size} intervals with fast magnitude or phase "
                "changes; crossings there are bracketed without further subdivision",
                ModelValidityWarning,
                stacklevel=4,
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
        x, t, loops, bounds = x_new, t_new, loops_new, bounds[rows]
        s0, s1 = 1, _SPLIT_PARTS + 1


def _find(response: Response, f_min_hz: float, f_max_hz: float, ppd: float) -> list[LoopMargins]:
    _check_inputs(f_min_hz, f_max_hz, ppd)
    ev = _Evaluator(response)
    x_lo = math.log(2.0 * math.pi * f_min_hz)
    x_hi = math.log(2.0 * math.pi * f_max_hz)
    n = max(3, int(math.ceil(math.log10(f_max_hz / f_min_hz) * ppd)) + 1)
    x_grid = np.linspace(x_lo, x_hi, n)
    brackets = _Brackets()
    start = None
    # looked up without evaluating it: a response may compute its singularities on demand
    if inspect.getattr_static(response, "singularities", None) is not None:
        start = _coarse_start(ev, response, x_grid, ppd, brackets)
    if start is None:
        t = ev.grid(np.exp(x_grid))
        k = t.shape[0]
        full = np.broadcast_to(x_grid, t.shape)
        row_sets = [(full, t, np.arange(k), 0, n - 1, np.broadcast_to(np.inf, (k, 2)))]
    else:
        k, row_sets = start

    hidden: list[tuple[np.ndarray, ...]] = []
    for x, t, loops, s0, s1, bounds in row_sets:
        _scan_and_split(ev, x, t, loops, s0, s1, bounds, brackets, hidden)

    if hidden:
        cand = [np.concatenate(col) for col in zip(*hidden, strict=True)]
        keep = _unique_candidates(cand[0], cand[1], cand[4])
        keep &= ~_no_hidden_pair(*cand[1:])
        h_loops, h_kind, h_sense, h_xa, h_xc, h_xb, h_ta, h_tc, h_tb, h_bounds = (
            col[keep] for col in cand
        )
    if hidden and h_loops.size:
        x_star, t_star = _extremum(
            ev, h_loops, h_kind, h_sense, h_xa, h_xc, h_xb, h_ta, h_tc, h_tb, h_bounds
        )
        crossed = h_sense * _objective(h_kind, t_star) >= 0.0
        for kind in (_GAIN, _PHASE):
            sel = crossed & (h_kind == kind)
            if np.any(sel):
                brackets.add(h_loops[sel], kind, h_xa[sel], x_star[sel], h_ta[sel], t_star[sel])
                brackets.add(h_loops[sel], kind, x_star[sel], h_xb[sel], t_star[sel], h_tb[sel])

    b_loops, b_kind, b_xa, b_xb, b_ta, b_tb = brackets.arrays()
    by_kind = np.argsort(b_kind, kind="stable")
    b_loops, b_kind, b_xa, b_xb, b_ta, b_tb = (
        v[by_kind] for v in (b_loops, b_kind, b_xa, b_xb, b_ta, b_tb)
    )
    x_root, t_root = _refine_roots(
        ev, b_loops, b_kind, b_xa.copy(), b_xb.copy(), b_ta.copy(), b_tb.copy()
    )
    with np.errstate(all="ignore"):
        ok = np.abs(_objective_sorted(b_kind, t_root)) < _ROOT_ACCEPT
        if np.any(b_kind == _PHASE):
            ok &= (b_kind == _GAIN) | (t_root.real < 0)
    # direction of each phase crossing: +1 when Im T goes from negative to positive
    direction = np.where(b_ta.imag < 0, 1, -1) * np.where(b_xb > b_xa, 1, -1)
    sel = np.nonzero(ok)[0]
    order = sel[np.lexsort((x_root[sel], b_kind[sel], b_loops[sel]))]
    return _assemble(
        k, b_loops[order], b_kind[order], x_root[order], t_root[order], direction[order]
    )


def _frozen_instances(cls, *columns) -> list:
    """Instances of the frozen dataclass ``cls`` from one sequence per field, in field order.

    Same as ``list(map(cls, *columns))`` for a dataclass whose generated ``__init__`` only
    stores its fields (no ``__post_init__``, no ``__slots__``), which is what this checks;
    filling each instance's ``__dict__`` directly is about three times faster, which matters
    for thousands of results.
    """
    names = tuple(f.name for f in dataclasses.fields(cls))
    if len(names) != len(columns) or hasattr(cls, "__post_init__") or "__slots__" in vars(cls):
        return list(map(cls, *columns))
    new = object.__new__
    out = []
    for values in zip(*columns, strict=True):
        obj = new(cls)
        obj.__dict__.update(zip(names, values, strict=True))
        out.append(obj)
    return out


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

    def per_loop(values: np.ndarray, bounds: list[int]) -> list[tuple[float, ...]]:
        values = values.tolist()
        return [tuple(values[i:j]) for i, j in zip(bounds[:-1], bounds[1:], strict=True)]

    grm_or_none = [
        v if has else None for v, has in zip(grm.tolist(), has_above.tolist(), strict=True)
    ]
    # fields in declaration order: crossover, PM, GM, gain-reduction margin, delay margin,
    # gain crossings, phase crossings, PMs, conditional stability
    return _frozen_instances(
        LoopMargins,
        fc.tolist(),
        pmc.tolist(),
        gm.tolist(),
        grm_or_none,
        delay.tolist(),
        per_loop(g_f, g_bounds),
        per_loop(p_f, p_bounds),
        per_loop(g_pm, g_bounds),
        cond.tolist(),
    )
