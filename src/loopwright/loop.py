"""Loop gain, margins, closed-loop poles and closed-loop responses over many corners at once.

The plant is a batch of ``k`` single-input single-output state-space models

    x' = a[i] x + b[i] u,   y = c[i] x + d[i] u,      i = 0 ... k-1

with arrays ``a (k, n, n)``, ``b (k, n)``, ``c (k, n)``, ``d (k,)``, describing
``P = Fm H |sign| Gvd`` already scaled and sign-corrected by the caller, so that the loop gain
is ``T = Gc P`` (times ``exp(-s delay)`` for a digital loop viewed in continuous time) and the
closed loop carries ``1/(1 + T)``. A single model (``a (n, n)``, ``b (n,)``, ``c (n,)``,
scalar ``d``) is accepted as a batch of one.

Frequency responses use the modal form: each ``a[i]`` is diagonalised once, after which
``P(j w) = d + sum_m r_m / (j w - lambda_m)`` costs ``O(k n)`` per frequency. Corners whose
eigenvector matrix is ill-conditioned (near-defective ``a``; Frobenius-norm condition number
above 1e8) fall back to solving ``(j w I - a) x = b`` directly.

Stability is decided from the closed-loop poles, never from the margins.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from loopwright.compensators.base import Compensator
from loopwright.errors import DesignError
from loopwright.margins import LoopMargins, _frozen_instances, find_margins_batch

__all__ = [
    "ClosedLoopResponses",
    "LoopAnalysis",
    "SecondOrderEstimate",
    "analyze_loops",
    "closed_loop_poles",
    "closed_loop_responses",
    "closed_loop_statespace",
    "loop_freqresp",
    "phase_margin_from_q",
    "plant_freqresp",
    "q_from_phase_margin",
    "second_order_estimate",
    "transmission_zeros",
]

_MODAL_COND_LIMIT = 1e8
# zeros are trusted (for the margin search's curvature bound) when d, or the first nonzero
# Markov parameter, is at least this fraction of its scale
_ZERO_TRUST = 1e-6
DEFAULT_PADE_ORDER = 6


# ----------------------------------------------------------------------------------------------
# plant batches


def _as_batch(a, b, c, d) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    a = np.asarray(a, dtype=float)
    if a.ndim == 2:
        a = a[None]
        b = np.reshape(np.asarray(b, dtype=float), (1, -1))
        c = np.reshape(np.asarray(c, dtype=float), (1, -1))
        d = np.reshape(np.asarray(d, dtype=float), (1,))
    if a.ndim != 3 or a.shape[1] != a.shape[2]:
        raise DesignError(f"must have shape (k, n, n), got {a.shape}", key="a")
    k, n, _ = a.shape
    b = np.asarray(b, dtype=float)
    c = np.asarray(c, dtype=float)
    d = np.asarray(d, dtype=float)
    if b.shape == (k, n, 1):
        b = b[..., 0]
    if c.shape == (k, 1, n):
        c = c[:, 0, :]
    if d.shape in ((k, 1), (k, 1, 1)):
        d = d.reshape(k)
    if d.ndim == 0:
        d = np.full(k, float(d))
    for key, arr, shape in (("b", b, (k, n)), ("c", c, (k, n)), ("d", d, (k,))):
        if arr.shape != shape:
            raise DesignError(
                f"must have shape {shape} to match a {a.shape}, got {arr.shape}", key=key
            )
    for key, arr in (("a", a), ("b", b), ("c", c), ("d", d)):
        if not np.all(np.isfinite(arr)):
            raise DesignError("must be finite (no nan or inf entries)", key=key)
    return a, b, c, d


def _small_eigvals(mats: np.ndarray) -> np.ndarray:
    """Eigenvalues of a stack of real square matrices; closed form up to 2 x 2.

    For 2 x 2: ``tr/2 +- sqrt((tr/2)^2 - det)`` with the discriminant formed as
    ``((a - d)/2)^2 + b c`` (no cancellation between the trace and determinant), and the
    smaller real root as ``det / larger`` (no cancellation in the sum).
    """
    n = mats.shape[-1]
    if n == 1:
        return mats[:, :, 0].astype(complex)
    if n != 2:
        return np.linalg.eigvals(mats).astype(complex)
    a, b, c, d = mats[:, 0, 0], mats[:, 0, 1], mats[:, 1, 0], mats[:, 1, 1]
    half = 0.5 * (a + d)
    disc = (0.5 * (a - d)) ** 2 + b * c
    root = np.sqrt(np.abs(disc))
    out = np.empty((mats.shape[0], 2), dtype=complex)
    cplx = disc < 0.0
    out[:, 0] = np.where(cplx, half + 1j * root, 0.0)
    out[:, 1] = np.where(cplx, half - 1j * root, 0.0)
    real = np.nonzero(~cplx)[0]
    if real.size:
        big = half[real] + np.copysign(root[real], half[real])
        det = a[real] * d[real] - b[real] * c[real]
        with np.errstate(all="ignore"):
            small = np.where(big != 0.0, det / big, 0.0)
        out[real, 0] = big
        out[real, 1] = small
    return out


def _small_eig(mats: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues and unit eigenvectors (columns) of a stack of real square matrices.

    Closed form for many 2 x 2 (eigenvalues as in :func:`_small_eigvals`; for each eigenvalue
    the larger of the two null vectors read off the rows of ``A - lambda I``), LAPACK
    otherwise.
    A defective 2 x 2 gets two parallel vectors, like LAPACK's.
    """
    if mats.shape[-1] != 2 or mats.shape[0] < 32:  # LAPACK is quicker for a few
        return np.linalg.eig(mats)
    lam = _small_eigvals(mats)
    a, b, c, d = (mats[:, i, j, None] for i, j in ((0, 0), (0, 1), (1, 0), (1, 1)))
    # (A - lam I) v = 0: v = (b, lam - a) from the first row, (lam - d, c) from the second
    first = np.stack(np.broadcast_arrays(b + 0j, lam - a), axis=1)
    second = np.stack(np.broadcast_arrays(lam - d, c + 0j), axis=1)
    n1 = np.sqrt(np.sum(np.abs(first) ** 2, axis=1, keepdims=True))
    n2 = np.sqrt(np.sum(np.abs(second) ** 2, axis=1, keepdims=True))
    vec = np.where(n1 >= n2, first, second)
    norm = np.maximum(n1, n2)
    with np.errstate(all="ignore"):
        vec = vec / norm
    # A = lam I: any basis
    scalar = (norm == 0.0)[:, 0, :]
    if np.any(scalar):
        vec[scalar[:, 0], :, 0] = (1.0, 0.0)
        vec[scalar[:, 1], :, 1] = (0.0, 1.0)
    if np.all(lam.imag == 0.0):
        return lam.real, vec.real
    return lam, vec


def _inv_or_nan(m: np.ndarray) -> np.ndarray:
    try:
        return np.linalg.inv(m)
    except np.linalg.LinAlgError:
        return np.full(m.shape, np.nan, dtype=m.dtype)


class _ModalPlant:
    """A plant batch prepared for repeated frequency-response evaluation."""

    def __init__(self, a, b, c, d):
        self.a, self.b, self.c, self.d = _as_batch(a, b, c, d)
        k, n, _ = self.a.shape
        self.k, self.n = k, n
        if n == 0:
            self.lam = np.zeros((k, 0), complex)
            self.res = np.zeros((k, 0), complex)
            self.direct = np.zeros(k, bool)
            self._lam_t = self._res_t = np.zeros((0, k), complex)
            return
        lam, vec = _small_eig(self.a)
        # Frobenius-norm condition number of the eigenvectors (>= the 2-norm one)
        with np.errstate(all="ignore"):
            try:
                vinv = np.linalg.inv(vec)
            except np.linalg.LinAlgError:  # an exactly singular eigenvector matrix somewhere
                vinv = np.stack([_inv_or_nan(v) for v in vec])
            cond = np.sqrt(np.sum(np.abs(vec) ** 2, axis=(1, 2))) * np.sqrt(
                np.sum(np.abs(vinv) ** 2, axis=(1, 2))
            )
        direct = ~(np.isfinite(cond) & (cond < _MODAL_COND_LIMIT))
        res = np.zeros((k, n), complex)
        ok = ~direct
        if np.any(ok):
            vinv_b = np.einsum("knm,km->kn", vinv[ok], self.b[ok])
            c_v = np.einsum("kn,knm->km", self.c[ok], vec[ok])
            res[ok] = c_v * vinv_b
        self.lam, self.res, self.direct = lam, res, direct
        # one contiguous row per mode: fast gathers in pointwise()
        self._lam_t = np.ascontiguousarray(lam.T)
        self._res_t = np.ascontiguousarray(res.T)

    def __call__(self, omega, factor=None) -> np.ndarray:
        """``P(j omega)`` (times ``factor``, broadcast like ``omega``), rows in blocks."""
        omega = np.asarray(omega, dtype=float)
        per_loop = omega.ndim == 2
        if per_loop and omega.shape[0] != self.k:
            raise DesignError(f"2-D omega must have {self.k} rows, got {omega.shape}", key="omega")
        if omega.ndim > 2:
            raise DesignError(f"must be 1-D or (k, m), got shape {omega.shape}", key="omega")
        out = np.empty((self.k, omega.shape[-1]), dtype=complex)
        jw = 1j * omega
        # blocks of rows keep the temporaries in cache on large batches
        block = max(1, 65536 // max(1, omega.shape[-1]))
        with np.errstate(divide="ignore", invalid="ignore"):
            for r0 in range(0, self.k, block):
                sl = slice(r0, r0 + block)
                o = out[sl]
                o[...] = self.d[sl, None]
                jws = jw[sl] if per_loop else jw[None, :]
                for m in range(self.n):
                    o += self.res[sl, m, None] / (jws - self.lam[sl, m, None])
                if factor is not None:
                    o *= factor[sl] if (per_loop and np.ndim(factor) == 2) else factor
        if np.any(self.direct):
            idx = np.nonzero(self.direct)[0]
            w = omega[idx] if per_loop else np.broadcast_to(omega, (idx.size, omega.size))
            eye = np.eye(self.n)
            mats = 1j * w[..., None, None] * eye - self.a[idx][:, None, :, :]
            rhs = np.broadcast_to(self.b[idx][:, None, :, None], mats.shape[:-1] + (1,))
            with np.errstate(all="ignore"):
                x = np.linalg.solve(mats, rhs.astype(complex))[..., 0]
            direct = self.d[idx, None] + np.einsum("kn,kwn->kw", self.c[idx], x)
            if factor is not None:
                direct = direct * (factor[idx] if np.ndim(factor) == 2 else factor)
            out[idx] = direct
        return out

    def pointwise(self, loops: np.ndarray, omega: np.ndarray) -> np.ndarray:
        """``P_loops[i](j omega[i])`` for 1-D integer ``loops`` and ``omega`` of equal length."""
        loops = np.asarray(loops, dtype=np.intp)
        omega = np.asarray(omega, dtype=float)
        jw = 1j * omega
        out = self.d.take(loops).astype(complex)
        with np.errstate(divide="ignore", invalid="ignore"):
            for res, lam in zip(self._res_t, self._lam_t, strict=True):
                out += res.take(loops) / (jw - lam.take(loops))
        direct = self.direct.take(loops)
        if np.any(direct):
            sel = np.nonzero(direct)[0]
            li = loops[sel]
            mats = jw[sel, None, None] * np.eye(self.n) - self.a[li]
            with np.errstate(all="ignore"):
                x = np.linalg.solve(mats, self.b[li][..., None].astype(complex))[..., 0]
            out[sel] = self.d[li] + np.einsum("pn,pn->p", self.c[li], x)
        return out

    def dc_gain(self) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore"):
            return self(np.array([0.0]))[:, 0]

    def singular_points(self) -> np.ndarray:
        """Poles and finite zeros of every plant, shape ``(k, 2 n)``; a row of nan where unknown.

        Poles are the eigenvalues of ``a``. Zeros are eigenvalues of ``a - b c / d`` when ``d``
        is not negligible, else of ``(I - b c a^(r-1) / (c a^(r-1) b)) a`` with ``r`` the
        relative degree (the first nonzero Markov parameter ``c a^(r-1) b``); that matrix also
        has ``r`` eigenvalues at the origin, which only loosen the bounds they are used for.
        Corners solved directly (near-defective ``a``), with a tiny nonzero ``d`` or a tiny
        first Markov parameter (zeros too ill-conditioned to trust) get a row of nan.
        """
        k, n = self.k, self.n
        out = np.full((k, 2 * n), np.nan + 0j)
        if n == 0:
            return out
        a, b, c, d = self.a, self.b, self.c, self.d
        norm_a = np.sqrt(np.einsum("kij,kij->k", a, a))
        norm_b = np.sqrt(np.einsum("ki,ki->k", b, b))
        row = c.copy()
        markov = np.zeros(k)
        rel = np.zeros(k)
        found = np.zeros(k, dtype=bool)
        for _ in range(n):
            h = np.einsum("ki,ki->k", row, b)
            new = ~found & (h != 0.0)
            markov[new] = h[new]
            rel[new] = np.abs(h[new]) / (
                np.sqrt(np.einsum("ki,ki->k", row[new], row[new])) * norm_b[new]
            )
            found |= new
            if np.all(found):
                break
            row = np.where(found[:, None], row, np.einsum("ki,kij->kj", row, a))
        with np.errstate(all="ignore"):
            d_rel = np.abs(d) * norm_a / (np.sqrt(np.einsum("ki,ki->k", c, c)) * norm_b)
            use_d = d_rel > _ZERO_TRUST
            mats = np.where(
                use_d[:, None, None],
                a - b[:, :, None] * c[:, None, :] / d[:, None, None],
                a - b[:, :, None] * np.einsum("ki,kij->kj", row / markov[:, None], a)[:, None, :],
            )
        trusted = (use_d | ((d == 0.0) & found & (rel > _ZERO_TRUST))) & ~self.direct
        trusted &= np.all(np.isfinite(mats), axis=(1, 2))
        # a plant without any nonzero Markov parameter and d == 0 is identically zero: no zeros
        null = (d == 0.0) & ~found & ~self.direct
        zeros = np.zeros((k, n), dtype=complex)
        if np.any(trusted):
            zeros[trusted] = _small_eigvals(mats[trusted])
        ok = trusted | null
        out[ok, :n] = self.lam[ok]
        out[ok, n:] = zeros[ok]
        return out


def plant_freqresp(a, b, c, d, omega) -> np.ndarray:
    """Frequency response of a batch of SISO state-space plants.

    Parameters
    ----------
    a : array_like, shape (k, n, n)
        State matrices (a single ``(n, n)`` model is a batch of one). [1/s]
    b, c : array_like, shape (k, n)
        Input and output vectors.
    d : array_like, shape (k,)
        Feed-through.
    omega : array_like, shape (nw,) or (k, m)
        Angular frequencies, shared by all plants or one row per plant. [rad/s]

    Returns
    -------
    ndarray of complex, shape (k, nw) or (k, m)
        ``P_i(j omega) = c_i (j omega I - a_i)^-1 b_i + d_i``.

    Raises
    ------
    DesignError
        Inconsistent shapes or non-finite entries.

    Notes
    -----
    Modal form: ``a_i = V diag(lambda) V^-1``, residues ``r = (c V) * (V^-1 b)``, so
    ``P(j w) = d + sum r_m/(j w - lambda_m)`` [1]_; corners whose eigenvectors have a
    Frobenius-norm condition number ``||V||_F ||V^-1||_F > 1e8`` are solved directly.

    References
    ----------
    .. [1] T. Kailath, *Linear Systems*, Prentice-Hall, 1980, sec. 2.1 (modal decomposition).

    Examples
    --------
    >>> import numpy as np
    >>> a = np.array([[[-1.0]]]); b = np.array([[1.0]]); c = np.array([[1.0]]); d = np.zeros(1)
    >>> complex(np.round(plant_freqresp(a, b, c, d, [1.0])[0, 0], 6))
    (0.5-0.5j)
    """
    return _ModalPlant(a, b, c, d)(omega)


def transmission_zeros(a, b, c, d) -> list[np.ndarray]:
    """Finite zeros of each SISO plant in a batch.

    Parameters
    ----------
    a, b, c, d : array_like
        Plant batch as in :func:`plant_freqresp`.

    Returns
    -------
    list of ndarray of complex
        The finite zeros ``s`` of each plant [rad/s], from the generalised eigenvalues of the
        Rosenbrock system matrix ``[[a, b], [c, d]]`` against ``diag(I, 0)``; a
        right-half-plane zero has positive real part.

    References
    ----------
    .. [1] A. Emami-Naeini and P. Van Dooren, "Computation of zeros of linear multivariable
       systems", Automatica 18(4), pp. 415-430, 1982.
    """
    from scipy.linalg import eigvals

    a, b, c, d = _as_batch(a, b, c, d)
    k, n, _ = a.shape
    out = []
    for i in range(k):
        m = np.zeros((n + 1, n + 1))
        m[:n, :n] = a[i]
        m[:n, n] = b[i]
        m[n, :n] = c[i]
        m[n, n] = d[i]
        e = np.zeros_like(m)
        e[:n, :n] = np.eye(n)
        with np.errstate(all="ignore"):
            z = eigvals(m, e)
        z = z[np.isfinite(z) & (np.abs(z) < 1e15)]
        out.append(np.sort_complex(z))
    return out


# ----------------------------------------------------------------------------------------------
# loop gain and closed loop


def _check_delay(delay_s: float) -> float:
    try:
        t = float(delay_s)
    except (TypeError, ValueError) as err:
        raise DesignError(f"must be a number of seconds, got {delay_s!r}", key="delay_s") from err
    if not (math.isfinite(t) and t >= 0):
        raise DesignError(f"must be finite and >= 0 s, got {delay_s!r}", key="delay_s")
    return t


def _check_comp(comp) -> Compensator:
    if not isinstance(comp, Compensator):
        raise DesignError(f"must be a Compensator, got {type(comp).__name__}", key="comp")
    return comp


def _comp_freqresp(comp: Compensator, omega: np.ndarray) -> np.ndarray:
    """``Gc(j omega)`` for real ``omega`` from the factored form, in place (few temporaries)."""
    s = 1j * omega
    num = np.full(s.shape, comp.w_i, dtype=complex)
    for wz in comp.zeros_rad:
        num *= 1.0 + s * (1.0 / wz)
    den = s.copy()
    for wp in comp.poles_rad:
        den *= 1.0 + s * (1.0 / wp)
    with np.errstate(divide="ignore", invalid="ignore"):
        num /= den
    return num


class _LoopResponse:
    """``T(j w) = Gc P exp(-j w delay)`` of a plant batch, in the protocol of the margin search.

    Besides the call itself it offers ``pointwise`` (one loop per frequency), ``on_grid``
    (one loop per point of a shared grid) and, computed on first use, ``singularities``: the
    compensator's poles and zeros (shared), the plant's poles and zeros (per loop) and the
    delay, which let the margin search decide intervals without sampling them densely.
    """

    def __init__(self, plant: _ModalPlant, comp: Compensator, delay: float):
        self.plant, self.comp, self.delay = plant, comp, delay
        self._singularities = None
        self._grid = None

    def _gc(self, omega: np.ndarray) -> np.ndarray:
        gc = _comp_freqresp(self.comp, omega)
        if self.delay > 0:
            gc = gc * np.exp(-1j * omega * self.delay)
        return gc

    def __call__(self, omega) -> np.ndarray:
        omega = np.asarray(omega, dtype=float)
        return self.plant(omega, factor=self._gc(omega))

    def pointwise(self, loops, omega) -> np.ndarray:
        omega = np.asarray(omega, dtype=float)
        return self.plant.pointwise(loops, omega) * self._gc(omega)

    def on_grid(self, loops, index, omega_grid) -> np.ndarray:
        """Loop ``loops[i]`` at ``omega_grid[index[i]]``; ``Gc`` once per grid point."""
        cached = self._grid
        if cached is None or cached[0] is not omega_grid:
            cached = self._grid = (omega_grid, self._gc(np.asarray(omega_grid, dtype=float)))
        omega = cached[0].take(index)
        return self.plant.pointwise(loops, omega) * cached[1].take(index)

    @property
    def singularities(self) -> tuple[np.ndarray, np.ndarray, float]:
        if self._singularities is None:
            comp = self.comp
            shared = np.array(
                [0.0, *(-w for w in comp.zeros_rad), *(-w for w in comp.poles_rad)], dtype=complex
            )
            self._singularities = (shared, self.plant.singular_points(), self.delay)
        return self._singularities


def _loop_response(plant: _ModalPlant, comp: Compensator, delay: float) -> _LoopResponse:
    return _LoopResponse(plant, comp, delay)


def loop_freqresp(a, b, c, d, comp: Compensator, omega, *, delay_s: float = 0.0) -> np.ndarray:
    """Loop gain ``T(j w) = Gc(j w) P(j w) exp(-j w delay)`` for every plant in a batch.

    Parameters
    ----------
    a, b, c, d : array_like
        Plant batch ``P = Fm H |sign| Gvd`` (see :func:`plant_freqresp`).
    comp : Compensator
        The compensator ``Gc``.
    omega : array_like, shape (nw,) or (k, m)
        Angular frequencies. [rad/s]
    delay_s : float, optional
        Pure loop delay (digital loop viewed in continuous time), exact ``exp(-j w delay)``. [s]

    Returns
    -------
    ndarray of complex, shape (k, nw) or (k, m)

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.1 (loop gain).
    """
    comp = _check_comp(comp)
    return _loop_response(_ModalPlant(a, b, c, d), comp, _check_delay(delay_s))(omega)


def _pade_unit(order: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """State-space realisation of the Pade approximant of ``exp(-s)`` (unit delay)."""
    import control
    from scipy.signal import tf2ss

    num, den = control.pade(1.0, order)
    ad, bd, cd, dd = tf2ss(num, den)
    return ad, bd[:, 0], cd[0], float(dd[0, 0])


def closed_loop_statespace(
    a, b, c, d, comp: Compensator, *, delay_s: float = 0.0, pade_order: int = DEFAULT_PADE_ORDER
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """State-space batch of the unity negative-feedback loop, reference to plant output.

    Parameters
    ----------
    a, b, c, d : array_like
        Plant batch (see :func:`plant_freqresp`).
    comp : Compensator
        Compensator ``Gc``.
    delay_s : float, optional
        Loop delay, represented by a Pade approximant of order ``pade_order``. [s]
    pade_order : int, optional
        Order of the Pade approximant (>= 5; default 6). With ``w delay`` up to about 1 rad at
        the frequencies that matter (crossover), order 6 matches the delay's phase to far
        better than 0.01 deg there.

    Returns
    -------
    A : ndarray, shape (k, N, N)
    B : ndarray, shape (k, N)
    C : ndarray, shape (k, N)
    D : ndarray, shape (k,)
        ``y/r = T/(1 + T)`` where ``e = r - y`` drives ``Gc``. States: compensator, delay
        approximant, plant (``N = m + pade_order + n``; no delay states without delay).

    Raises
    ------
    DesignError
        ``pade_order < 5`` or an algebraic loop with ``1 + D = 0``.

    Notes
    -----
    Series connection ``Gc -> delay -> P`` and feedback ``A_cl = A - B C / (1 + D)`` [1]_.
    The Pade approximant of ``exp(-s)`` is realised once and scaled to the delay
    (``A = A_1/delay``, ``B = B_1/delay``), which keeps its coefficients well scaled [2]_.

    References
    ----------
    .. [1] T. Kailath, *Linear Systems*, Prentice-Hall, 1980, sec. 2.1.
    .. [2] G. H. Golub and C. F. Van Loan, *Matrix Computations*, 3rd ed., Johns Hopkins,
       1996, sec. 11.3 (Pade approximation).
    """
    comp = _check_comp(comp)
    delay = _check_delay(delay_s)
    a, b, c, d = _as_batch(a, b, c, d)
    k, n, _ = a.shape
    ac, bc, cc, dc = comp.statespace()
    m = ac.shape[0]
    bc = bc[:, 0]
    cc = cc[0]
    dcv = float(dc[0, 0])
    if delay > 0:
        if not (isinstance(pade_order, int | np.integer) and pade_order >= 5):
            raise DesignError(f"must be an integer >= 5, got {pade_order!r}", key="pade_order")
        ad, bd, cd, dd = _pade_unit(int(pade_order))
        ad = ad / delay
        bd = bd / delay
    else:
        ad, bd, cd, dd = np.zeros((0, 0)), np.zeros(0), np.zeros(0), 1.0
    q = ad.shape[0]
    big = m + q + n
    A = np.zeros((k, big, big))
    ic, idl, ip = slice(0, m), slice(m, m + q), slice(m + q, big)
    # open loop: xc' = ac xc + bc e ; u1 = cc xc + dc e
    # xd' = ad xd + bd u1 ; u2 = cd xd + dd u1 ; xp' = a xp + b u2 ; y = c xp + d u2
    A[:, ic, ic] = ac
    A[:, idl, ic] = np.outer(bd, cc)
    A[:, idl, idl] = ad
    A[:, ip, ic] = b[:, :, None] * (dd * cc)[None, None, :]
    A[:, ip, idl] = b[:, :, None] * cd[None, None, :]
    A[:, ip, ip] = a
    B = np.zeros((k, big))
    B[:, ic] = bc
    B[:, idl] = bd * dcv
    B[:, ip] = b * (dd * dcv)
    C = np.zeros((k, big))
    C[:, ic] = d[:, None] * (dd * cc)
    C[:, idl] = d[:, None] * cd
    C[:, ip] = c
    D = d * dd * dcv
    denom = 1.0 + D
    if np.any(np.abs(denom) < 1e-12):
        raise DesignError("the loop has 1 + T(inf) = 0 (algebraic loop)", key="d")
    A_cl = A - B[:, :, None] * C[:, None, :] / denom[:, None, None]
    return A_cl, B / denom[:, None], C / denom[:, None], D / denom


def closed_loop_poles(
    a, b, c, d, comp: Compensator, *, delay_s: float = 0.0, pade_order: int = DEFAULT_PADE_ORDER
) -> np.ndarray:
    """Poles of the unity negative-feedback loop ``1/(1 + T)`` for every plant in a batch.

    Parameters
    ----------
    a, b, c, d : array_like
        Plant batch (see :func:`plant_freqresp`).
    comp : Compensator
        Compensator ``Gc``.
    delay_s : float, optional
        Loop delay, modelled by a Pade approximant (see :func:`closed_loop_statespace`). [s]
    pade_order : int, optional
        Pade order (>= 5).

    Returns
    -------
    ndarray of complex, shape (k, N)
        Closed-loop poles [rad/s], sorted by descending real part (the least stable first).

    References
    ----------
    .. [1] G. F. Franklin, J. D. Powell and A. Emami-Naeini, *Feedback Control of Dynamic
       Systems*, Pearson (closed-loop poles as eigenvalues of ``A - B K C``; recalled).
    """
    A_cl, _, _, _ = closed_loop_statespace(a, b, c, d, comp, delay_s=delay_s, pade_order=pade_order)
    poles = np.linalg.eigvals(A_cl)
    order = np.argsort(-poles.real, axis=1, kind="stable")
    return np.take_along_axis(poles, order, axis=1)


@dataclass(frozen=True)
class LoopAnalysis:
    """Margins and closed-loop verdict of one loop.

    Attributes
    ----------
    margins : LoopMargins
        Margins from the exact frequency response (delay included exactly).
    closed_loop_poles : tuple of complex
        Closed-loop poles, least stable first (delay as a Pade approximant). [rad/s]
    closed_loop_stable : bool
        True when every closed-loop pole has a negative real part. This, not the margins,
        decides stability.
    """

    margins: LoopMargins
    closed_loop_poles: tuple[complex, ...]
    closed_loop_stable: bool

    @property
    def crossover_hz(self) -> float:
        """Crossover of the margins. [Hz]"""
        return self.margins.crossover_hz

    @property
    def phase_margin_deg(self) -> float:
        """Phase margin. [deg]"""
        return self.margins.phase_margin_deg

    @property
    def gain_margin_db(self) -> float:
        """Gain margin. [dB]"""
        return self.margins.gain_margin_db


def _default_range(plant: _ModalPlant, comp: Compensator, delay: float) -> tuple[float, float]:
    scales = [comp.w_i, *comp.zeros_rad, *comp.poles_rad]
    lam = np.abs(plant.lam[np.isfinite(plant.lam)])
    scales.extend(lam[lam > 0].tolist())
    p0 = np.abs(plant.dc_gain())
    p0 = p0[np.isfinite(p0) & (p0 > 0)]
    if p0.size:
        scales.extend((comp.w_i * p0).tolist())
    lo = min(scales) / 1000.0 / (2.0 * math.pi)
    hi = max(scales) * 1000.0 / (2.0 * math.pi)
    if delay > 0:
        hi = max(min(hi, 10.0 / delay), 10.0 * lo)
    return lo, hi


def analyze_loops(
    a,
    b,
    c,
    d,
    comp: Compensator,
    *,
    f_min_hz: float | None = None,
    f_max_hz: float | None = None,
    delay_s: float = 0.0,
    points_per_decade: float = 200,
    pade_order: int = DEFAULT_PADE_ORDER,
) -> list[LoopAnalysis]:
    """Margins, closed-loop poles and stability verdict for every plant in a batch.

    Parameters
    ----------
    a, b, c, d : array_like
        Plant batch ``P = Fm H |sign| Gvd`` (see :func:`plant_freqresp`).
    comp : Compensator
        Compensator ``Gc``.
    f_min_hz, f_max_hz : float, optional
        Margin search range. Default: three decades beyond the lowest and highest of the
        plant's eigenvalue magnitudes, the compensator corners, ``w_i`` and ``w_i |P(0)|``;
        with a delay the top is capped at ``10/delay_s``. [Hz]
    delay_s : float, optional
        Loop delay: exact ``exp(-j w delay)`` in the margins, Pade approximant of order
        ``pade_order`` in the closed-loop poles. [s]
    points_per_decade : float, optional
        Bracketing grid density of :func:`loopwright.margins.find_margins_batch`.
    pade_order : int, optional
        Pade order for the delay (>= 5).

    Returns
    -------
    list of LoopAnalysis
        One per plant, in order.

    References
    ----------
    .. [1] H. Nyquist, "Regeneration theory", Bell System Technical Journal 11, pp. 126-147,
       1932 (why margins alone do not decide stability of an open-loop unstable plant).
    """
    comp = _check_comp(comp)
    delay = _check_delay(delay_s)
    plant = _ModalPlant(a, b, c, d)
    lo, hi = f_min_hz, f_max_hz
    if lo is None or hi is None:
        default_lo, default_hi = _default_range(plant, comp, delay)
        lo = default_lo if lo is None else lo
        hi = default_hi if hi is None else hi
    margins = find_margins_batch(
        _loop_response(plant, comp, delay), lo, hi, points_per_decade=points_per_decade
    )
    poles = closed_loop_poles(
        plant.a, plant.b, plant.c, plant.d, comp, delay_s=delay, pade_order=pade_order
    )
    stable = np.all(poles.real < 0.0, axis=1)
    return _frozen_instances(
        LoopAnalysis, margins, list(map(tuple, poles.tolist())), stable.tolist()
    )


@dataclass(frozen=True)
class ClosedLoopResponses:
    """Closed-loop frequency responses of a batch of loops.

    Attributes
    ----------
    omega : ndarray, shape (nw,)
        Angular frequencies. [rad/s]
    loop_gain : ndarray of complex, shape (k, nw)
        ``T(j w)``. [-]
    complementary : ndarray of complex, shape (k, nw)
        ``T/(1 + T)``: sensed output per reference at the sensed node. [-]
    sensitivity : ndarray of complex, shape (k, nw)
        ``1/(1 + T)``. [-]
    reference_to_output : ndarray of complex or None
        ``(1/H) T/(1 + T)`` when a sensing gain ``H`` was given. [V/V]
    output_impedance_open : ndarray of complex or None
        ``Zout(j w)`` of the power stage. [ohm]
    output_impedance_closed : ndarray of complex or None
        ``Zout/(1 + T)``. [ohm]
    line_to_output_open : ndarray of complex or None
        ``Gvg(j w)``. [V/V]
    line_to_output_closed : ndarray of complex or None
        ``Gvg/(1 + T)``. [V/V]
    """

    omega: np.ndarray
    loop_gain: np.ndarray
    complementary: np.ndarray
    sensitivity: np.ndarray
    reference_to_output: np.ndarray | None = None
    output_impedance_open: np.ndarray | None = None
    output_impedance_closed: np.ndarray | None = None
    line_to_output_open: np.ndarray | None = None
    line_to_output_closed: np.ndarray | None = None


def closed_loop_responses(
    a,
    b,
    c,
    d,
    comp: Compensator,
    omega,
    *,
    delay_s: float = 0.0,
    sensing_gain: float | None = None,
    output_impedance: tuple | None = None,
    line_to_output: tuple | None = None,
) -> ClosedLoopResponses:
    """Closed-loop frequency responses: tracking, sensitivity, output impedance, line rejection.

    Parameters
    ----------
    a, b, c, d : array_like
        Plant batch (see :func:`plant_freqresp`).
    comp : Compensator
        Compensator ``Gc``.
    omega : array_like, shape (nw,)
        Angular frequencies. [rad/s]
    delay_s : float, optional
        Loop delay (exact in the frequency domain). [s]
    sensing_gain : float, optional
        Divider ratio ``H`` for the reference-to-output response ``(1/H) T/(1 + T)``. [-]
    output_impedance : tuple (a, b, c, d), optional
        State-space batch of the open-loop output impedance ``Zout`` (current injected into
        the output node -> output voltage), same ``k``. [ohm]
    line_to_output : tuple (a, b, c, d), optional
        State-space batch of ``Gvg``. [V/V]

    Returns
    -------
    ClosedLoopResponses

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.2 (closed-loop transfer functions).
    """
    comp = _check_comp(comp)
    delay = _check_delay(delay_s)
    omega = np.asarray(omega, dtype=float)
    if omega.ndim != 1:
        raise DesignError(f"must be 1-D, got shape {omega.shape}", key="omega")
    plant = _ModalPlant(a, b, c, d)
    t = _loop_response(plant, comp, delay)(omega)
    with np.errstate(all="ignore"):
        sens = 1.0 / (1.0 + t)
    comp_t = t * sens
    ref = None
    if sensing_gain is not None:
        h = float(sensing_gain)
        if not (math.isfinite(h) and h > 0):
            raise DesignError(f"must be finite and > 0, got {sensing_gain!r}", key="sensing_gain")
        ref = comp_t / h
    extras = {}
    for key, model in (("output_impedance", output_impedance), ("line_to_output", line_to_output)):
        if model is None:
            extras[key] = (None, None)
            continue
        resp = _ModalPlant(*model)(omega)
        if resp.shape != t.shape:
            raise DesignError(
                f"must have {plant.k} models like the plant, got {resp.shape[0]}", key=key
            )
        extras[key] = (resp, resp * sens)
    return ClosedLoopResponses(
        omega=omega,
        loop_gain=t,
        complementary=comp_t,
        sensitivity=sens,
        reference_to_output=ref,
        output_impedance_open=extras["output_impedance"][0],
        output_impedance_closed=extras["output_impedance"][1],
        line_to_output_open=extras["line_to_output"][0],
        line_to_output_closed=extras["line_to_output"][1],
    )


# ----------------------------------------------------------------------------------------------
# second-order relations


def q_from_phase_margin(phase_margin_deg):
    """Closed-loop Q of the second-order-like loop ``T = (w0/s)/(1 + s/w2)`` from its PM.

    ``Q = sqrt(cos PM) / sin PM``.

    Parameters
    ----------
    phase_margin_deg : float or array_like
        Phase margin in (0, 90] deg (the range this loop model can have). [deg]

    Returns
    -------
    float or ndarray
        Closed-loop Q. [-]

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.4.2, "Phase margin vs. closed-loop Q".

    Examples
    --------
    >>> round(float(q_from_phase_margin(60.0)), 6)
    0.816497
    """
    pm = np.asarray(phase_margin_deg, dtype=float)
    if np.any(~((pm > 0) & (pm <= 90))):
        raise DesignError(
            f"must be in (0, 90] deg, got {phase_margin_deg!r}", key="phase_margin_deg"
        )
    r = np.radians(pm)
    out = np.sqrt(np.cos(r)) / np.sin(r)
    return float(out) if out.ndim == 0 else out


def phase_margin_from_q(q):
    """Inverse of :func:`q_from_phase_margin`: ``PM = atan(sqrt((1 + sqrt(1 + 4Q^4))/(2Q^4)))``.

    Parameters
    ----------
    q : float or array_like
        Closed-loop Q (> 0). [-]

    Returns
    -------
    float or ndarray
        Phase margin. [deg]

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.4.2.
    """
    qa = np.asarray(q, dtype=float)
    if np.any(~(qa > 0) | ~np.isfinite(qa)):
        raise DesignError(f"must be finite and > 0, got {q!r}", key="q")
    q4 = qa**4
    out = np.degrees(np.arctan(np.sqrt((1.0 + np.sqrt(1.0 + 4.0 * q4)) / (2.0 * q4))))
    return float(out) if out.ndim == 0 else out


@dataclass(frozen=True)
class SecondOrderEstimate:
    """Second-order estimate of the closed loop from the phase margin.

    Attributes
    ----------
    q : float
        Closed-loop Q. [-]
    zeta : float
        Damping ratio ``1/(2Q)``. [-]
    overshoot : float
        Step overshoot ``exp(-pi zeta / sqrt(1 - zeta^2))`` (0 for ``zeta >= 1``), as a
        fraction. [-]
    resonant_peak_db : float
        ``Mr = 1/(2 zeta sqrt(1 - zeta^2))`` for ``zeta < 1/sqrt 2``, else 0 dB. [dB]
    """

    q: float
    zeta: float
    overshoot: float
    resonant_peak_db: float


def second_order_estimate(phase_margin_deg: float) -> SecondOrderEstimate:
    """Closed-loop Q, damping, overshoot and resonant peak from the phase margin.

    Parameters
    ----------
    phase_margin_deg : float
        Phase margin in (0, 90]. [deg]

    Returns
    -------
    SecondOrderEstimate

    Notes
    -----
    Valid for loops that behave like ``T = (w0/s)/(1 + s/w2)`` near crossover; compensator
    zeros that appear in the closed loop make the real overshoot larger [3]_.

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.4.2.
    .. [2] G. F. Franklin, J. D. Powell and A. Emami-Naeini, *Feedback Control of Dynamic
       Systems*, Pearson (second-order step response and resonant peak; recalled).
    .. [3] M. M. Peretz and S. Ben-Yaakov, "Revisiting the closed loop response of PWM
       converters controlled by voltage feedback", IEEE APEC.
    """
    q = float(q_from_phase_margin(phase_margin_deg))
    zeta = 1.0 / (2.0 * q)
    overshoot = math.exp(-math.pi * zeta / math.sqrt(1.0 - zeta**2)) if zeta < 1.0 else 0.0
    if zeta < 1.0 / math.sqrt(2.0):
        peak = 20.0 * math.log10(1.0 / (2.0 * zeta * math.sqrt(1.0 - zeta**2)))
    else:
        peak = 0.0
    return SecondOrderEstimate(q, zeta, overshoot, peak)
