"""Exact matrix exponentials ``exp(M t)`` of a linear interval, cheap for any ``t``.

Within one switching interval the augmented circuit state obeys ``w' = M w`` (the constant
inputs are states with zero derivative), so ``w(t) = exp(M t) w(0)`` exactly. The switching
instants move from cycle to cycle in closed loop, so ``exp(M t)`` is needed for arbitrary
``t``. It is evaluated as

    exp(M t) = exp(M k delta) exp(M r),     t = k delta + r,  0 <= r < delta,

with ``exp(M delta)`` from its Taylor series, truncated where the remainder falls below the
double-precision rounding level (``||M delta|| <= 0.05``), the table ``exp(M k delta)``
(k = 0..N) by repeated products, computed once, and ``exp(M r)`` again by its Taylor series.
The result is exact to rounding, works for defective ``M`` (integrators driven by constants,
repeated compensator poles) and needs no eigen-decomposition.

The same table gives the value of a linear functional ``row . w(t)`` on the whole grid with
one product, and its Taylor polynomial inside a grid cell, which is how switching instants
(PWM comparator, diode turn-off) are located: first sign change on the grid, then a
safeguarded Newton iteration on the cell's polynomial.

References
----------
.. [1] N. J. Higham, "The scaling and squaring method for the matrix exponential revisited,"
   SIAM J. Matrix Anal. Appl. 26(4):1179-1193, 2005.
.. [2] C. Moler and C. Van Loan, "Nineteen dubious ways to compute the exponential of a
   matrix, twenty-five years later," SIAM Review 45(1):3-49, 2003 (Taylor series for small
   ``||M t||``).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["Propagator", "expm"]

#: Largest ``||M||_1 delta`` of a table cell.
_RHO = 0.05
#: Target truncation error of the Taylor remainder, relative.
_TAYLOR_TOL = 1e-18


class Propagator:
    """``exp(M_b t)`` for a batch of matrices ``M_b`` and ``0 <= t <= span``.

    Parameters
    ----------
    m : ndarray, shape (B, s, s)
        State matrices, one per batch member. [1/s]
    span : float
        Longest time the propagator is asked for (one switching period). [s]
    min_points : int
        Fewest table cells over ``span`` (the grid on which switching instants are
        bracketed).
    """

    def __init__(self, m: np.ndarray, span: float, *, min_points: int = 64) -> None:
        m = np.asarray(m, dtype=float)
        if m.ndim == 2:
            m = m[None]
        self.m = m
        self.batch, self.size, _ = m.shape
        norm = float(np.max(np.sum(np.abs(m), axis=1))) if m.size else 0.0
        n = max(int(min_points), int(math.ceil(norm * span / _RHO)))
        n = min(n, 20000)
        self.n = n
        self.span = float(span)
        self.delta = self.span / n
        self._inv_delta = 1.0 / self.delta
        rho = norm * self.delta
        k = 1
        term = rho
        while term > _TAYLOR_TOL and k < 40:
            k += 1
            term = term * rho / k
        self.order = k
        eye = np.eye(self.size)
        # Mpow[b, j] = M_b^j / j!
        mp = np.empty((self.batch, k + 1, self.size, self.size))
        mp[:, 0] = eye
        for j in range(1, k + 1):
            mp[:, j] = m @ mp[:, j - 1] / j
        self.mpow = mp
        # exp(M delta) by its Taylor series (exact to rounding for ||M delta|| <= 0.05), then
        # the table P[b, j] = exp(M_b j delta) by repeated products
        powers = self.delta ** np.arange(k + 1)
        step = np.einsum("j,bjsk->bsk", powers, mp)
        table = np.empty((self.batch, n + 1, self.size, self.size))
        table[:, 0] = eye
        for j in range(1, n + 1):
            table[:, j] = table[:, j - 1] @ step
        self.table = table
        steps = np.arange(n + 1) * self.delta
        # single-member shortcut: Mpow as one (K+1)s x s matrix
        self._mflat = mp[0].reshape((k + 1) * self.size, self.size) if self.batch == 1 else None
        self.grid = steps

    # ------------------------------------------------------------------------------- values
    def _split(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        k = np.minimum(np.maximum((t * self._inv_delta).astype(np.int64), 0), self.n)
        r = t - k * self.delta
        return k, r

    def apply(self, w: np.ndarray, t: np.ndarray, members: np.ndarray | None = None) -> np.ndarray:
        """``exp(M_b t_i) w_i`` for pairs ``(member b_i, time t_i, vector w_i)``.

        Parameters
        ----------
        w : ndarray, shape (p, s)
        t : ndarray, shape (p,)
            Times in ``[0, span]`` (a little beyond is tolerated). [s]
        members : ndarray of int, shape (p,), optional
            Batch member of each pair (default ``arange(p)``).
        """
        t = np.asarray(t, dtype=float)
        if members is None:
            members = np.arange(w.shape[0]) if self.batch > 1 else np.zeros(w.shape[0], int)
        k, r = self._split(t)
        powers = r[:, None] ** np.arange(self.order + 1)[None, :]
        if self._mflat is not None:
            mw = (w @ self._mflat.T).reshape(w.shape[0], self.order + 1, self.size)
            v = np.einsum("pj,pjs->ps", powers, mw)
            return np.einsum("psk,pk->ps", self.table[0, k], v)
        mw = np.einsum("pjsk,pk->pjs", self.mpow[members], w)
        v = np.einsum("pj,pjs->ps", powers, mw)
        return np.einsum("psk,pk->ps", self.table[members, k], v)

    def matrix(self, t: float, member: int = 0) -> np.ndarray:
        """``exp(M_member t)`` as a matrix."""
        k, r = self._split(np.array([t]))
        powers = r[0] ** np.arange(self.order + 1)
        taylor = np.einsum("j,jsk->sk", powers, self.mpow[member])
        return self.table[member, k[0]] @ taylor

    # ---------------------------------------------------------------------------- crossings
    def row_tables(self, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Tables of a linear functional: ``row_b exp(M_b j delta)`` and ``row_b M_b^j/j!``.

        Parameters
        ----------
        rows : ndarray, shape (B, s)

        Returns
        -------
        grid_rows : ndarray, shape (B, N+1, s)
        taylor_rows : ndarray, shape (B, K+1, s)
        """
        rows = np.broadcast_to(np.asarray(rows, dtype=float), (self.batch, self.size))
        return (
            np.einsum("bs,bnsk->bnk", rows, self.table),
            np.einsum("bs,bjsk->bjk", rows, self.mpow),
        )

    def first_crossing(
        self,
        tables: tuple[np.ndarray, np.ndarray],
        w0: np.ndarray,
        t_max: np.ndarray,
        members: np.ndarray,
        slope: np.ndarray | float = 0.0,
    ) -> np.ndarray:
        """First time the function ``g(t) = row . exp(M t) w0 - slope t`` falls to <= 0.

        Only downward crossings count: a start at ``g(0) <= 0`` is skipped until ``g`` has
        been positive. Returns NaN where ``g`` stays positive on ``(0, t_max]``.

        Parameters
        ----------
        tables : tuple
            From :meth:`row_tables`.
        w0 : ndarray, shape (p, s)
            States at the start of the interval.
        t_max : ndarray, shape (p,)
            End of the search. [s]
        members : ndarray of int, shape (p,)
        slope : float or ndarray, shape (p,)
            Slope of the subtracted ramp. [unit of g / s]

        Returns
        -------
        ndarray, shape (p,)
            Crossing times (exact to about 1e-15 of the period), NaN where none. [s]
        """
        grid_rows, taylor_rows = tables
        p = w0.shape[0]
        slope = np.broadcast_to(np.asarray(slope, dtype=float), (p,))
        t_max = np.asarray(t_max, dtype=float)
        g = np.einsum("pnk,pk->pn", grid_rows[members], w0) - slope[:, None] * self.grid[None, :]
        inside = self.grid[None, :] <= t_max[:, None]
        # value at t_max itself (end of a partial cell)
        k_end, r_end = self._split(t_max)
        y_end = np.einsum("psk,pk->ps", self.table[members, k_end], w0)
        coef_end = np.einsum("pjk,pk->pj", taylor_rows[members], y_end)
        g_end = _polyval(coef_end, r_end) - slope * t_max
        positive = g > 0
        ever_pos = np.maximum.accumulate(positive & inside, axis=1)
        down = inside[:, 1:] & (g[:, 1:] <= 0) & ever_pos[:, :-1]
        has = down.any(axis=1)
        out = np.full(p, np.nan)
        left = np.where(has, np.argmax(down, axis=1), 0)  # cell [left, left+1]
        r_hi = np.full(p, self.delta)
        # no crossing on the grid: maybe inside the last, partial cell
        last = np.clip(np.floor(t_max / self.delta).astype(np.int64), 0, self.n)
        partial = (~has) & (g_end <= 0) & ever_pos[np.arange(p), last]
        left = np.where(partial, last, left)
        r_hi = np.where(partial, r_end, r_hi)
        todo = has | partial
        if not np.any(todo):
            return out
        idx = np.flatnonzero(todo)
        lk = left[idx]
        y = np.einsum("psk,pk->ps", self.table[members[idx], lk], w0[idx])
        coef = np.einsum("pjk,pk->pj", taylor_rows[members[idx]], y)
        coef[:, 0] -= slope[idx] * self.grid[lk]
        coef[:, 1] -= slope[idx]
        out[idx] = self.grid[lk] + _root_in_cell(coef, r_hi[idx])
        return out

    # ----------------------------------------------------------------- single-row fast path
    def apply1(self, w: np.ndarray, t: float, member: int = 0) -> np.ndarray:
        """``exp(M_member t) w`` for one vector ``w`` (s,)."""
        k = min(max(int(t * self._inv_delta), 0), self.n)
        r = t - k * self.delta
        mw = self.mpow[member] @ w  # (K+1, s)
        v = mw[-1]
        for j in range(self.order - 1, -1, -1):
            v = v * r + mw[j]
        return self.table[member, k] @ v

    def first_crossing1(
        self,
        tables: tuple[np.ndarray, np.ndarray],
        w0: np.ndarray,
        t_max: float,
        member: int = 0,
        slope: float = 0.0,
    ) -> float:
        """Single-row :meth:`first_crossing`; NaN when there is none."""
        grid_rows, taylor_rows = tables
        n_in = min(max(int(t_max * self._inv_delta), 0), self.n)
        if self.grid[n_in] > t_max:
            n_in -= 1
        g = grid_rows[member, : n_in + 1] @ w0
        if slope:
            g = g - slope * self.grid[: n_in + 1]
        pos = g > 0
        if not pos.any():
            return math.nan
        first = int(pos.argmax())
        after = g[first:] <= 0
        if after.any():
            left = first + int(after.argmax()) - 1
            r_hi = self.delta
        else:
            left = n_in
            r_hi = t_max - self.grid[n_in]
            if r_hi <= 0:
                return math.nan
            y = self.table[member, left] @ w0
            coef = taylor_rows[member] @ y
            g_end = coef[-1]
            for j in range(coef.size - 2, -1, -1):
                g_end = g_end * r_hi + coef[j]
            if g_end - slope * t_max > 0:
                return math.nan
        y = self.table[member, left] @ w0
        coef = (taylor_rows[member] @ y).tolist()
        coef[0] -= slope * self.grid[left]
        coef[1] -= slope
        return float(self.grid[left]) + _root1(coef, float(r_hi))


def expm(a: np.ndarray) -> np.ndarray:
    """Matrix exponential of a small matrix: scaling, Taylor series, squaring.

    The matrix is scaled by ``2^-j`` until ``||a||_1 <= 0.05``; the Taylor series is summed
    until its terms fall below 1e-18 relative; the result is squared ``j`` times [2]_.
    """
    a = np.asarray(a, dtype=float)
    norm = float(np.max(np.sum(np.abs(a), axis=0))) if a.size else 0.0
    j = max(0, math.ceil(math.log2(norm / _RHO))) if norm > _RHO else 0
    b = a / 2.0**j
    out = np.eye(a.shape[0])
    term = np.eye(a.shape[0])
    for k in range(1, 40):
        term = term @ b / k
        out = out + term
        if float(np.max(np.abs(term))) <= _TAYLOR_TOL * float(np.max(np.abs(out))):
            break
    for _ in range(j):
        out = out @ out
    return out


def _polyval(coef: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Evaluate ``sum_j coef[:, j] r^j`` row by row (Horner)."""
    acc = coef[:, -1].copy()
    for j in range(coef.shape[1] - 2, -1, -1):
        acc = acc * r + coef[:, j]
    return acc


def _root_in_cell(coef: np.ndarray, r_hi: np.ndarray) -> np.ndarray:
    """Root of the cell polynomial on ``[0, r_hi]`` with ``p(0) > 0 >= p(r_hi)``.

    Safeguarded Newton: a Newton step that leaves the bracket is replaced by bisection.
    """
    lo = np.zeros_like(r_hi)
    hi = r_hi.copy()
    dcoef = coef[:, 1:] * np.arange(1, coef.shape[1])[None, :]
    p0 = coef[:, 0]
    p1 = _polyval(coef, hi)
    denom = p0 - p1
    r = np.where(denom > 0, hi * p0 / np.where(denom > 0, denom, 1.0), 0.5 * hi)
    tol = 2e-15 * max(float(np.max(r_hi)), 1e-300)
    for _ in range(60):
        val = _polyval(coef, r)
        zero = val == 0.0
        if np.all(zero):
            break
        pos = val > 0
        lo = np.where(pos, r, lo)
        hi = np.where(pos | zero, hi, r)
        der = _polyval(dcoef, r)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(der != 0, val / der, np.nan)
        rn = r - step
        # a Newton step may land on the bracket end it just moved (a step below one ulp):
        # that is convergence, not a reason to bisect
        bad = ~np.isfinite(rn) | (rn < lo) | (rn > hi)
        rn = np.where(bad, 0.5 * (lo + hi), rn)
        rn = np.where(zero, r, rn)  # an exact root stays put
        done = zero | (np.abs(rn - r) <= tol) | (hi - lo <= tol)
        r = rn
        if np.all(done):
            break
    return r


def _root1(coef: list[float], r_hi: float) -> float:
    """Scalar :func:`_root_in_cell` (pure Python floats)."""
    n = len(coef)

    def val_der(r: float) -> tuple[float, float]:
        v = coef[-1]
        d = 0.0
        for j in range(n - 2, -1, -1):
            d = d * r + v
            v = v * r + coef[j]
        return v, d

    lo, hi = 0.0, r_hi
    p0 = coef[0]
    p1, _ = val_der(hi)
    r = hi * p0 / (p0 - p1) if p0 - p1 > 0 else 0.5 * hi
    tol = 2e-15 * r_hi
    for _ in range(60):
        v, d = val_der(r)
        if v == 0.0:
            return r
        if v > 0:
            lo = r
        else:
            hi = r
        rn = r - v / d if d != 0.0 else math.nan
        if not (lo <= rn <= hi):
            rn = 0.5 * (lo + hi)
        if abs(rn - r) <= tol or hi - lo <= tol:
            return rn
        r = rn
    return r
