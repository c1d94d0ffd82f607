"""The compensator object shared by every synthesis strategy.

A compensator of type I, II or III is an integrator with real left-half-plane zeros and poles:

    Gc(s) = w_i * prod(1 + s/wz) / (s * prod(1 + s/wp))

taken from the sensed error (after the output divider) to the modulator input, the inverting
sign excluded (loop gain ``T = Gc * Fm * Gvd * H``, closed loop ``1/(1 + T)``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

from loopwright.errors import DesignError

__all__ = ["Compensator", "CompensatorKind", "ZERO_POLE_COUNT"]

CompensatorKind = Literal["type1", "type2", "type3"]

#: Number of (zeros, poles) besides the integrator for each kind.
ZERO_POLE_COUNT: dict[str, tuple[int, int]] = {
    "type1": (0, 0),
    "type2": (1, 1),
    "type3": (2, 2),
}


def _positive_tuple(values, key: str) -> tuple[float, ...]:
    try:
        out = tuple(float(v) for v in values)
    except TypeError as err:
        raise DesignError(
            f"must be a sequence of frequencies in rad/s, got {values!r}", key=key
        ) from err
    for v in out:
        if not (math.isfinite(v) and v > 0):
            raise DesignError(
                f"corner frequencies must be finite and > 0 rad/s, got {v!r}", key=key
            )
    return out


@dataclass(frozen=True)
class Compensator:
    """Integrating compensator ``Gc(s) = w_i prod(1 + s/wz) / (s prod(1 + s/wp))``.

    Attributes
    ----------
    kind : {"type1", "type2", "type3"}
        Type I: integrator only; type II: one zero and one pole; type III: two of each.
    w_i : float
        Integrator gain: ``|Gc(j w)| ~ w_i / w`` well below the zeros. [rad/s]
    zeros_rad : tuple of float
        Left-half-plane zero corners ``wz`` (zero at ``s = -wz``), positive. [rad/s]
    poles_rad : tuple of float
        Left-half-plane pole corners ``wp`` (pole at ``s = -wp``), positive. [rad/s]
    strategy : str
        How the corners were chosen: ``"k-factor"``, ``"resonance"``, ``"manual"``, ... .
    k : float or None
        Venable's K factor when the K-factor strategy was used.

    Notes
    -----
    ``Gc`` is the transfer function from the sensed error (after the divider ``H``) to the
    modulator input; the inverting amplifier's sign is not part of it. The op-amp network that
    realises it from ``vo`` realises ``H Gc`` (see :mod:`loopwright.realization`).

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis", Proc. Powercon 10, San Diego, 1983.
    .. [2] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 9.5.

    Examples
    --------
    >>> gc = Compensator("type2", w_i=1000.0, zeros_rad=(2000.0,), poles_rad=(50000.0,))
    >>> [round(float(v), 6) for v in gc.den]
    [1.0, 50000.0, 0.0]
    >>> round(float(abs(gc.freqresp(2000.0))), 6)
    0.706542
    """

    kind: CompensatorKind
    w_i: float
    zeros_rad: tuple[float, ...] = ()
    poles_rad: tuple[float, ...] = ()
    strategy: str = "k-factor"
    k: float | None = None

    def __post_init__(self) -> None:
        if self.kind not in ZERO_POLE_COUNT:
            raise DesignError(
                f"must be one of {sorted(ZERO_POLE_COUNT)}, got {self.kind!r}", key="kind"
            )
        w_i = float(self.w_i)
        if not (math.isfinite(w_i) and w_i > 0):
            raise DesignError(f"must be finite and > 0 rad/s, got {self.w_i!r}", key="w_i")
        zeros = _positive_tuple(self.zeros_rad, "zeros_rad")
        poles = _positive_tuple(self.poles_rad, "poles_rad")
        nz, npl = ZERO_POLE_COUNT[self.kind]
        if len(zeros) != nz or len(poles) != npl:
            raise DesignError(
                f"{self.kind} needs {nz} zero(s) and {npl} pole(s) besides the integrator, "
                f"got {len(zeros)} and {len(poles)}",
                key="zeros_rad" if len(zeros) != nz else "poles_rad",
            )
        if self.k is not None and not (math.isfinite(self.k) and self.k > 0):
            raise DesignError(f"must be finite and > 0 when given, got {self.k!r}", key="k")
        object.__setattr__(self, "w_i", w_i)
        object.__setattr__(self, "zeros_rad", zeros)
        object.__setattr__(self, "poles_rad", poles)

    # -- views ---------------------------------------------------------------------------------
    @property
    def zeros_hz(self) -> tuple[float, ...]:
        """Zero corner frequencies ``wz / (2 pi)``. [Hz]"""
        return tuple(w / (2.0 * math.pi) for w in self.zeros_rad)

    @property
    def poles_hz(self) -> tuple[float, ...]:
        """Pole corner frequencies ``wp / (2 pi)``, the origin pole excluded. [Hz]"""
        return tuple(w / (2.0 * math.pi) for w in self.poles_rad)

    @property
    def order(self) -> int:
        """Number of poles, the integrator included."""
        return 1 + len(self.poles_rad)

    @property
    def num(self) -> np.ndarray:
        """Numerator coefficients, highest power first, for the monic denominator :attr:`den`."""
        poly = np.array([self.w_i * math.prod(self.poles_rad) / math.prod(self.zeros_rad)])
        for wz in self.zeros_rad:
            poly = np.polymul(poly, [1.0, wz])
        return poly

    @property
    def den(self) -> np.ndarray:
        """Monic denominator ``s prod(s + wp)``, highest power first."""
        poly = np.array([1.0, 0.0])
        for wp in self.poles_rad:
            poly = np.polymul(poly, [1.0, wp])
        return poly

    # -- evaluation ----------------------------------------------------------------------------
    def freqresp(self, omega):
        """Complex response ``Gc(j omega)``.

        Parameters
        ----------
        omega : float or array_like
            Angular frequency, any shape. [rad/s]

        Returns
        -------
        complex or ndarray of complex
            ``Gc(j omega)``, same shape as ``omega``, from the factored form (no polynomial
            cancellation).
        """
        s = 1j * np.asarray(omega, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = self.w_i / s
            for wz in self.zeros_rad:
                out = out * (1.0 + s / wz)
            for wp in self.poles_rad:
                out = out / (1.0 + s / wp)
        return out[()] if np.ndim(out) == 0 else out

    def statespace(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Minimal state-space realisation as a cascade: integrator, then lead/lag sections.

        Returns
        -------
        A : ndarray, shape (m, m)
        B : ndarray, shape (m, 1)
        C : ndarray, shape (1, m)
        D : ndarray, shape (1, 1)
            ``Gc(s) = C (sI - A)^-1 B + D`` with ``m = order``; ``D = 0``. States: the
            integrator output divided by ``w_i``, then one state per pole section
            ``(1 + s/wz)/(1 + s/wp) = wp/wz + (1 - wp/wz) wp/(s + wp)``. Sections whose zero
            equals their pole (to 1e-12) are dropped, so the realisation stays minimal. A
            type III's second zero without a partner pole never occurs (equal counts).
        """
        sections = [
            (wz, wp)
            for wz, wp in zip(sorted(self.zeros_rad), sorted(self.poles_rad), strict=True)
            if abs(wz - wp) > 1e-12 * max(wz, wp)
        ]
        m = 1 + len(sections)
        a = np.zeros((m, m))
        b = np.zeros((m, 1))
        c = np.zeros((1, m))
        b[0, 0] = 1.0
        # signal entering section i is y_prev = c_prev x + d_prev u (d_prev = 0 throughout)
        c_prev = np.zeros(m)
        c_prev[0] = self.w_i
        for i, (wz, wp) in enumerate(sections, start=1):
            a[i, i] = -wp
            a[i, :] += wp * c_prev
            c_new = (wp / wz) * c_prev
            c_new[i] += 1.0 - wp / wz
            c_prev = c_new
        c[0, :] = c_prev
        return a, b, c, np.zeros((1, 1))

    def to_control(self):
        """``control.TransferFunction`` of ``Gc(s)`` (num/den as in :attr:`num`, :attr:`den`)."""
        import control

        return control.tf(self.num, self.den)

    def with_gain(self, w_i: float) -> Compensator:
        """Same corners with another integrator gain."""
        return Compensator(self.kind, w_i, self.zeros_rad, self.poles_rad, self.strategy, self.k)
