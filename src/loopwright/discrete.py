"""Digital controller: discretisation, sampled loop with delay, fixed point, limit cycles.

The flow is

1. :func:`discretize` turns an s-domain compensator ``num(s)/den(s)`` into a
   :class:`DiscreteController` (Tustin with prewarping, zero-order hold, or matched pole-zero);
2. :func:`sample_plant` gives the exact sampled-data model of the power stage (zero-order hold
   of the duty command plus the computation delay, integer or fractional);
3. :class:`SampledLoop` evaluates ``T(z) = Gc(z) H Pd(z)`` and its closed-loop poles;
4. :func:`quantise` rounds the coefficients to float32, Q15 or Q31 (integrator kept exact),
   and :func:`run_fixed_point` / :func:`run_float` are bit-exact models of the firmware
   difference equation (direct form I, anti-windup by clamping);
5. :func:`limit_cycle_check` evaluates the quantisation conditions of Peterchev and Sanders;
6. :func:`design_digital` bundles it all for one design and is what the CLI calls.

Sign and signal conventions: the controller maps the sensed error ``e`` [V] (after the divider
``H``) to the duty command ``u`` (0..1); the exported coefficients approximate ``Fm * Gc(s)``.
The difference equation (direct form I) is

    u[k] = sum_{i>=0} b[i] e[k-i] - sum_{i>=1} a[i] u[k-i],    a[0] = 1.

References
----------
.. [1] G. F. Franklin, J. D. Powell, M. L. Workman, *Digital Control of Dynamic Systems*,
   3rd ed., Addison-Wesley, 1998, ch. 6 (Tustin with prewarping, ZOH, matched pole-zero).
.. [2] K. J. Astrom, B. Wittenmark, *Computer-Controlled Systems*, 3rd ed., Prentice Hall,
   1997 (sampled-data systems with fractional delay; integrator windup).
.. [3] L. Corradini, D. Maksimovic, P. Mattavelli, R. Zane, *Digital Control of High-Frequency
   Switched-Mode Power Converters*, Wiley-IEEE Press, 2015 (z-domain loop gain, delays).
.. [4] A. V. Peterchev, S. R. Sanders, "Quantization resolution and limit cycling in digitally
   controlled PWM converters," IEEE Trans. Power Electron., 18(1):301-308, 2003.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

import control
import numpy as np
import scipy.linalg
from numpy.polynomial import polynomial as _npoly

from loopwright.errors import DesignError, DesignWarning, ModelValidityWarning
from loopwright.margins import find_margins

__all__ = [
    "DIGITAL_OPTION_KEYS",
    "DigitalDesign",
    "DigitalOptions",
    "DiscreteController",
    "FixedPointCoefficients",
    "LimitCycleCheck",
    "LoopFigures",
    "QuantisationReport",
    "SampledLoop",
    "SampledPlant",
    "design_digital",
    "discretize",
    "fixed_point_coefficients",
    "limit_cycle_check",
    "quantise",
    "round_shift",
    "run_fixed_point",
    "run_float",
    "sample_plant",
]

Method = Literal["tustin", "zoh", "matched"]
NumberFormat = Literal["float32", "q15", "q31"]
InfiniteZeros = Literal["minus-one", "drop-one"]

_METHODS = ("tustin", "zoh", "matched")
_FORMATS = ("float32", "q15", "q31")
_INFINITE_ZEROS = ("minus-one", "drop-one")
_WORD_BITS = {"q15": 16, "q31": 32}
_INT64_MAX = 2**63 - 1

#: Design-file key (table ``[digital]``) of each :class:`DigitalOptions` field, used in
#: :class:`~loopwright.errors.DesignError` messages.
DIGITAL_OPTION_KEYS: dict[str, str] = {
    "sample_rate_hz": "digital.sample_rate",
    "delay_samples": "digital.delay",
    "method": "digital.method",
    "number_format": "digital.format",
    "prewarp_hz": "digital.prewarp",
    "matched_infinite_zeros": "digital.matched_infinite_zeros",
    "adc_bits": "digital.adc_bits",
    "adc_full_scale_v": "digital.adc_full_scale",
    "pwm_counts": "digital.pwm_counts",
    "pwm_clock_hz": "digital.pwm_clock",
    "duty_min": "digital.duty_min",
    "duty_max": "digital.duty_max",
    "crossover_fraction_limit": "digital.crossover_fraction_limit",
}


# ----------------------------------------------------------------------------------------------
# input checks
# ----------------------------------------------------------------------------------------------
def _poly(values: Any, key: str) -> np.ndarray:
    """A real 1-D polynomial (highest power first), leading zeros removed."""
    try:
        arr = np.atleast_1d(np.asarray(values, dtype=float))
    except (TypeError, ValueError) as err:
        raise DesignError(f"must be a sequence of real numbers, got {values!r}", key=key) from err
    if arr.ndim != 1 or arr.size == 0:
        raise DesignError(f"must be a non-empty 1-D coefficient list, got {values!r}", key=key)
    if not np.all(np.isfinite(arr)):
        raise DesignError(f"coefficients must be finite, got {arr.tolist()}", key=key)
    nz = np.flatnonzero(arr)
    if nz.size == 0:
        raise DesignError("polynomial is identically zero", key=key)
    return arr[nz[0] :].copy()


def _positive(value: Any, key: str, *, upper: float | None = None) -> float:
    if isinstance(value, bool):
        raise DesignError(f"must be a number, got {value!r}", key=key)
    try:
        v = float(value)
    except (TypeError, ValueError) as err:
        raise DesignError(f"must be a number, got {value!r}", key=key) from err
    if not math.isfinite(v) or v <= 0.0 or (upper is not None and v >= upper):
        rng = f"(0, {upper:g})" if upper is not None else "(0, inf)"
        raise DesignError(f"must be in {rng}, got {value!r}", key=key)
    return v


def _choice(value: Any, allowed: Sequence[str], key: str) -> str:
    if value not in allowed:
        raise DesignError(f"must be one of {', '.join(allowed)}; got {value!r}", key=key)
    return str(value)


def _freeze(arr: np.ndarray) -> np.ndarray:
    out = np.array(arr, copy=True)
    out.setflags(write=False)
    return out


# ----------------------------------------------------------------------------------------------
# discrete controller
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class DiscreteController:
    """A discrete transfer function in powers of ``z^-1``.

    ``Gc(z) = (b[0] + b[1] z^-1 + ... + b[n] z^-n) / (1 + a[1] z^-1 + ... + a[n] z^-n)``.

    Attributes
    ----------
    b : numpy.ndarray
        Numerator coefficients in powers of ``z^-1`` (read-only). Same length as ``a``.
    a : numpy.ndarray
        Denominator coefficients in powers of ``z^-1``, ``a[0] = 1`` (read-only).
    t_s : float
        Sample period. [s]
    method : str
        How it was obtained: ``"tustin"``, ``"zoh"``, ``"matched"`` (or ``"quantised"``).
    prewarp_hz : float or None
        Tustin prewarp frequency, or the gain-match frequency of the matched method. [Hz]
    has_integrator : bool
        The continuous compensator had a pole at ``s = 0`` (mapped to ``z = 1``).
    """

    b: np.ndarray
    a: np.ndarray
    t_s: float
    method: str
    prewarp_hz: float | None = None
    has_integrator: bool = False

    def __post_init__(self) -> None:
        b = np.asarray(self.b, dtype=float)
        a = np.asarray(self.a, dtype=float)
        if a.ndim != 1 or b.ndim != 1 or a.size == 0 or a[0] == 0.0:
            raise DesignError("a must be a 1-D list with a[0] != 0", key="a")
        n = max(a.size, b.size)
        b = np.concatenate([b, np.zeros(n - b.size)]) / a[0]
        a = np.concatenate([a, np.zeros(n - a.size)]) / a[0]
        object.__setattr__(self, "b", _freeze(b))
        object.__setattr__(self, "a", _freeze(a))
        object.__setattr__(self, "t_s", _positive(self.t_s, "t_s"))

    @property
    def order(self) -> int:
        """Number of delayed samples in the difference equation."""
        return int(self.a.size - 1)

    @property
    def sample_rate_hz(self) -> float:
        """Sample rate ``1/t_s``. [Hz]"""
        return 1.0 / self.t_s

    @property
    def poles(self) -> np.ndarray:
        """Poles in the z-plane."""
        return np.roots(self.a)

    @property
    def zeros(self) -> np.ndarray:
        """Finite zeros in the z-plane (a zero ``b[0]`` removes one, leaving a pure delay)."""
        return np.roots(self.b)

    @property
    def integral_gain(self) -> float:
        """Accumulator gain ``r`` with ``Gc(z) ~ r / (1 - z^-1)`` near ``z = 1`` (NaN if none).

        ``r = b(1) / a1(1)`` where ``a(z^-1) = (1 - z^-1) a1(z^-1)``: the change of the output
        per sample for a unit constant input, once the integrator dominates.
        """
        if not self.has_integrator:
            return float("nan")
        a1 = np.cumsum(self.a)[:-1]
        return float(np.sum(self.b) / np.sum(a1))

    def freqresp(self, omega: Any) -> np.ndarray:
        """Frequency response ``Gc(e^{j omega t_s})``.

        Parameters
        ----------
        omega : array_like
            Angular frequency. [rad/s]

        Returns
        -------
        numpy.ndarray
            Complex response (``inf`` at ``z = 1`` when there is an integrator).
        """
        x = np.exp(-1j * np.asarray(omega, dtype=float) * self.t_s)
        with np.errstate(divide="ignore", invalid="ignore"):
            return _npoly.polyval(x, self.b) / _npoly.polyval(x, self.a)

    def to_control(self) -> control.TransferFunction:
        """The same controller as a discrete ``control.TransferFunction`` (``dt = t_s``)."""
        # equal lengths: the z^-1 coefficients are the descending powers of z
        return control.tf(self.b.tolist(), self.a.tolist(), self.t_s)


def _tustin(num: np.ndarray, den: np.ndarray, c: float) -> tuple[np.ndarray, np.ndarray]:
    """Substitute ``s = c (1 - x)/(1 + x)``, ``x = z^-1``; returns ascending powers of ``x``."""
    n = den.size - 1
    one_minus = np.array([1.0, -1.0])
    one_plus = np.array([1.0, 1.0])

    def expand(p: np.ndarray) -> np.ndarray:
        out = np.zeros(n + 1)
        for i, coef in enumerate(p[::-1]):  # coef of s^i
            if coef == 0.0:
                continue
            basis = _npoly.polymul(_npoly.polypow(one_minus, i), _npoly.polypow(one_plus, n - i))
            term = basis * (coef * c**i)
            out[: term.size] += term
        return out

    return expand(num), expand(den)


def _canonical_ss(
    num: np.ndarray, den: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Controllable canonical form of a proper ``num/den`` (equal lengths, descending powers)."""
    den = np.asarray(den, dtype=float)
    num = np.asarray(num, dtype=float)
    num = np.concatenate([np.zeros(den.size - num.size), num]) / den[0]
    den = den / den[0]
    n = den.size - 1
    d0 = num[0]
    a = np.zeros((n, n))
    a[0, :] = -den[1:]
    a[1:, :-1] = np.eye(n - 1)
    b = np.zeros((n, 1))
    b[0, 0] = 1.0
    c = (num[1:] - d0 * den[1:]).reshape(1, n)
    return a, b, c, np.array([[d0]])


def _ss_zoh(a: np.ndarray, b: np.ndarray, t: float) -> tuple[np.ndarray, np.ndarray]:
    """``Phi = e^{A t}`` and ``Gamma = int_0^t e^{A tau} dtau B`` by one matrix exponential."""
    n = a.shape[0]
    m = b.shape[1]
    big = np.zeros((n + m, n + m))
    big[:n, :n] = a * t
    big[:n, n:] = b * t
    e = scipy.linalg.expm(big)
    return e[:n, :n], e[:n, n:]


def discretize(
    num: Any,
    den: Any,
    t_s: float,
    method: Method = "tustin",
    prewarp_hz: float | None = None,
    matched_infinite_zeros: InfiniteZeros = "minus-one",
) -> DiscreteController:
    """Discrete equivalent of an s-domain compensator ``num(s)/den(s)``.

    Parameters
    ----------
    num, den : array_like
        Compensator numerator and denominator, highest power of ``s`` first. Must be proper.
    t_s : float
        Sample period. [s]
    method : {"tustin", "zoh", "matched"}
        ``"tustin"``: bilinear, prewarped at ``prewarp_hz`` when given (exact magnitude and
        phase there). ``"zoh"``: step-invariant equivalent. ``"matched"``: matched pole-zero with
        the gain matched at ``prewarp_hz`` (required when the compensator has an integrator,
        otherwise DC is matched when ``prewarp_hz`` is None).
    prewarp_hz : float, optional
        Prewarp (Tustin) or gain-match (matched) frequency, in (0, 1/(2 t_s)). [Hz]
    matched_infinite_zeros : {"minus-one", "drop-one"}
        Matched method: map every zero at ``s = infinity`` to ``z = -1``, or all but one (the
        remaining one becomes a pure one-sample delay, ``b[0] = 0``).

    Returns
    -------
    DiscreteController
        Coefficients in powers of ``z^-1`` with ``a[0] = 1``.

    Raises
    ------
    loopwright.errors.DesignError
        Improper or non-finite polynomials, bad ``t_s``, ``method`` or ``prewarp_hz``, or a
        matched design of an integrating compensator without ``prewarp_hz``.

    Notes
    -----
    Tustin ([1]_ sec. 6.3): ``s <- K (z - 1)/(z + 1)`` with ``K = 2/t_s``, or with prewarping
    ``K = wp / tan(wp t_s / 2)``; the substitution is carried out on the polynomials in
    ``z^-1`` directly, so ``s = 0`` maps to ``z = 1`` exactly.
    ZOH: controllable-form state space, ``Phi = e^{A t_s}``, ``Gamma = int e^{A t} dt B``, and
    ``num(z) = det(zI - Phi + Gamma C) + (D - 1) det(zI - Phi)``.
    Matched pole-zero ([1]_ sec. 6.3.3): each finite pole/zero ``p`` goes to ``e^{p t_s}``;
    zeros at infinity go to ``z = -1`` (all, or all but one); the real gain ``k`` makes
    ``|Gd(e^{j wp t_s})| = |Gc(j wp)|`` with the sign that keeps the two phases closest. A
    general matched routine that matches the DC gain cannot be used for a compensator with an
    integrator (its DC gain is infinite); this is why the method is implemented here.

    References
    ----------
    .. [1] G. F. Franklin, J. D. Powell, M. L. Workman, *Digital Control of Dynamic Systems*,
       3rd ed., Addison-Wesley, 1998, ch. 6.
    .. [2] A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing* (bilinear
       transform and frequency warping).

    Examples
    --------
    >>> c = discretize([1.0], [1.0, 0.0], 1e-3)     # integrator 1/s, plain Tustin
    >>> [round(float(x), 6) for x in c.b], [round(float(x), 6) for x in c.a]
    ([0.0005, 0.0005], [1.0, -1.0])
    """
    numa = _poly(num, "num")
    dena = _poly(den, "den")
    if numa.size > dena.size:
        raise DesignError(
            f"compensator must be proper: degree of num ({numa.size - 1}) exceeds degree of "
            f"den ({dena.size - 1})",
            key="num",
        )
    t_s = _positive(t_s, "t_s")
    method = _choice(method, _METHODS, "method")  # type: ignore[assignment]
    matched_infinite_zeros = _choice(  # type: ignore[assignment]
        matched_infinite_zeros, _INFINITE_ZEROS, "matched_infinite_zeros"
    )
    f_nyq = 0.5 / t_s
    if prewarp_hz is not None:
        prewarp_hz = _positive(prewarp_hz, "prewarp_hz", upper=f_nyq)
    has_integrator = bool(dena[-1] == 0.0)
    n = dena.size - 1
    numf = np.concatenate([np.zeros(n + 1 - numa.size), numa])

    if method == "tustin":
        if prewarp_hz is None:
            k = 2.0 / t_s
        else:
            wp = 2.0 * math.pi * prewarp_hz
            k = wp / math.tan(wp * t_s / 2.0)
        b, a = _tustin(numf, dena, k)
    elif method == "zoh":
        if n == 0:
            b, a = np.array([numf[0] / dena[0]]), np.array([1.0])
        else:
            am, bm, cm, dm = _canonical_ss(numf, dena)
            phi, gam = _ss_zoh(am, bm, t_s)
            a = np.real(np.poly(phi))
            b = np.real(np.poly(phi - gam @ cm)) + (float(dm[0, 0]) - 1.0) * a
    else:
        b, a = _matched(numa, dena, t_s, prewarp_hz, matched_infinite_zeros, has_integrator)
    if method == "zoh":
        prewarp_hz = None
    return DiscreteController(b, a, t_s, method, prewarp_hz, has_integrator)


def _matched(
    numa: np.ndarray,
    dena: np.ndarray,
    t_s: float,
    prewarp_hz: float | None,
    infinite_zeros: str,
    has_integrator: bool,
) -> tuple[np.ndarray, np.ndarray]:
    zeros = np.roots(numa)
    poles = np.roots(dena)
    if np.any(poles.real * t_s > 700) or np.any(zeros.real * t_s > 700):
        raise DesignError("a pole or zero is too far in the right half plane", key="den")
    r = poles.size - zeros.size
    n_minus_one = r if infinite_zeros == "minus-one" else max(r - 1, 0)
    zd = np.concatenate([np.exp(zeros * t_s), -np.ones(n_minus_one)])
    pd = np.exp(poles * t_s)
    bz = np.real(np.poly(zd)) if zd.size else np.array([1.0])
    az = np.real(np.poly(pd))
    if prewarp_hz is None:
        if has_integrator or np.any(numa[-1:] == 0.0):
            raise DesignError(
                "matched pole-zero needs a gain-match frequency (prewarp_hz) when the "
                "compensator has a pole or zero at s = 0: its DC gain is not finite",
                key="prewarp_hz",
            )
        gc = numa[-1] / dena[-1]
        gd = np.polyval(bz, 1.0) / np.polyval(az, 1.0)
        k = gc / gd
    else:
        w = 2.0 * math.pi * prewarp_hz
        gc = np.polyval(numa, 1j * w) / np.polyval(dena, 1j * w)
        z = np.exp(1j * w * t_s)
        gd = np.polyval(bz, z) / np.polyval(az, z)
        ratio = gc / gd
        k = abs(ratio) * (1.0 if ratio.real >= 0.0 else -1.0)
    b = np.concatenate([np.zeros(az.size - bz.size), bz * k])
    return b, az


# ----------------------------------------------------------------------------------------------
# sampled plant and loop
# ----------------------------------------------------------------------------------------------
def _abcd(plant: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    if all(hasattr(plant, k) for k in ("A", "B", "C", "D")):
        mats = (plant.A, plant.B, plant.C, plant.D)
    else:
        try:
            mats = tuple(plant)
        except TypeError as err:
            raise DesignError("must be (A, B, C, D) or a state-space object", key="plant") from err
        if len(mats) != 4:
            raise DesignError(f"must hold 4 matrices (A, B, C, D), got {len(mats)}", key="plant")
    try:
        a, b, c, d = (np.atleast_2d(np.asarray(m, dtype=float)) for m in mats)
    except (TypeError, ValueError) as err:
        raise DesignError("matrices must be real numeric arrays", key="plant") from err
    n = a.shape[0]
    if a.shape != (n, n) or b.shape != (n, 1) or c.shape != (1, n) or d.shape != (1, 1):
        raise DesignError(
            "must be a single-input single-output model: A (n x n), B (n x 1), C (1 x n), "
            f"D (1 x 1); got {a.shape}, {b.shape}, {c.shape}, {d.shape}",
            key="plant",
        )
    if not all(np.all(np.isfinite(m)) for m in (a, b, c, d)):
        raise DesignError("matrices must be finite", key="plant")
    return a, b, c, d


def _ss_freqresp(
    a: np.ndarray, b: np.ndarray, c: np.ndarray, d: np.ndarray, s: np.ndarray
) -> np.ndarray:
    """``C (sI - A)^-1 B + D`` for a SISO model at the points ``s``."""
    s = np.asarray(s, dtype=complex)
    n = a.shape[0]
    mats = s.reshape(-1, 1, 1) * np.eye(n) - a
    rhs = np.broadcast_to(b.astype(complex), (s.size, n, 1))
    with np.errstate(divide="ignore", invalid="ignore"):
        x = np.linalg.solve(mats, rhs)
    return ((c @ x)[:, 0, 0] + d[0, 0]).reshape(s.shape)


@dataclass(frozen=True, eq=False)
class SampledPlant:
    """Exact sampled-data model of a plant driven through a zero-order hold and a delay.

    The duty command ``u[k]`` computed from the sample at ``k t_s`` takes effect at
    ``(k + m + delta) t_s`` (``m`` whole samples, fraction ``0 <= delta < 1``) and is held
    until the next command. Over one period the plant state obeys

        x[k+1] = Phi x[k] + Gamma0 u[k-m] + Gamma1 u[k-m-1],

    with ``Gamma0 = int_0^{(1-delta) t_s} e^{A t} dt B`` (new command, end of the period) and
    ``Gamma1 = e^{A (1-delta) t_s} int_0^{delta t_s} e^{A t} dt B`` (old command, start of the
    period); ``y[k] = C x[k] + D u_active(k t_s)``.

    Attributes
    ----------
    phi, gamma0, gamma1, c, d : numpy.ndarray
        Matrices of the model above.
    t_s : float
        Sample period. [s]
    computation_delay_samples : float
        ``m + delta``, the delay from sampling to the duty update, in samples.
    """

    phi: np.ndarray
    gamma0: np.ndarray
    gamma1: np.ndarray
    c: np.ndarray
    d: np.ndarray
    t_s: float
    computation_delay_samples: float

    @property
    def whole_samples(self) -> int:
        """Whole samples ``m`` of the computation delay."""
        return int(math.floor(self.computation_delay_samples + 1e-12))

    @property
    def fraction(self) -> float:
        """Fractional part ``delta`` of the computation delay."""
        f = self.computation_delay_samples - self.whole_samples
        return 0.0 if f < 1e-12 else f

    @property
    def poles(self) -> np.ndarray:
        """Eigenvalues of ``Phi`` (``e^{p t_s}`` of the continuous poles ``p``)."""
        return np.linalg.eigvals(self.phi)

    def freqresp(self, omega: Any) -> np.ndarray:
        """``Pd(e^{j omega t_s})`` including the delay.

        Parameters
        ----------
        omega : array_like
            Angular frequency. [rad/s]
        """
        omega = np.asarray(omega, dtype=float)
        z = np.exp(1j * omega * self.t_s)
        m, frac = self.whole_samples, self.fraction
        zi = 1.0 / z
        x0 = _ss_freqresp(self.phi, self.gamma0, self.c, np.zeros((1, 1)), z)
        x1 = _ss_freqresp(self.phi, self.gamma1, self.c, np.zeros((1, 1)), z)
        dterm = self.d[0, 0] * (zi if frac > 0.0 else 1.0)
        return (x0 + x1 * zi + dterm) * zi**m

    def state_space(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Discrete ``(A, B, C, D)`` with the delay line as extra states (past commands)."""
        n = self.phi.shape[0]
        m, frac = self.whole_samples, self.fraction
        lags = m + (1 if frac > 0.0 else 0)  # delay-line length
        big_a = np.zeros((n + lags, n + lags))
        big_b = np.zeros((n + lags, 1))
        big_c = np.zeros((1, n + lags))
        big_d = np.zeros((1, 1))
        big_a[:n, :n] = self.phi
        big_c[0, :n] = self.c[0]
        if lags:
            big_b[n, 0] = 1.0
            for i in range(1, lags):
                big_a[n + i, n + i - 1] = 1.0

        def add_input(lag: int, gamma: np.ndarray, dval: float) -> None:
            if lag == 0:
                big_b[:n] += gamma
                big_d[0, 0] += dval
            else:
                big_a[:n, n + lag - 1] += gamma[:, 0]
                big_c[0, n + lag - 1] += dval

        dd = float(self.d[0, 0])
        add_input(m, self.gamma0, 0.0 if frac > 0.0 else dd)
        if frac > 0.0:
            add_input(m + 1, self.gamma1, dd)
        return big_a, big_b, big_c, big_d

    def to_control(self) -> control.StateSpace:
        """The sampled plant with its delay as a discrete ``control.StateSpace``."""
        return control.ss(*self.state_space(), self.t_s)


def sample_plant(plant: Any, t_s: float, computation_delay_samples: float) -> SampledPlant:
    """Sampled-data model of a continuous plant behind a ZOH and a computation delay.

    Parameters
    ----------
    plant : tuple of array_like or state-space object
        ``(A, B, C, D)`` of the SISO continuous plant (duty to sensed quantity), or any object
        with ``A, B, C, D`` attributes (``control.StateSpace``).
    t_s : float
        Sample (and duty update) period. [s]
    computation_delay_samples : float
        Delay from the sampling instant to the duty update, >= 0, integer or fractional.
        [samples]

    Returns
    -------
    SampledPlant

    Raises
    ------
    loopwright.errors.DesignError
        Not SISO, non-finite matrices, bad ``t_s`` or a negative delay.

    Notes
    -----
    Integer delays give ``Pd(z) = z^-m (1 - z^-1) Z{P(s)/s}`` ([1]_, eq. of the ZOH
    equivalent). A fractional part ``delta`` is handled exactly by splitting the hold interval
    at the update instant, which is the delayed-input (modified z-transform) model of [2]_
    (sec. 2.3 "systems with time delay"): one extra state holds the previous command.

    References
    ----------
    .. [1] G. F. Franklin, J. D. Powell, M. L. Workman, *Digital Control of Dynamic Systems*,
       3rd ed., 1998, ch. 6 (ZOH equivalent).
    .. [2] K. J. Astrom, B. Wittenmark, *Computer-Controlled Systems*, 3rd ed., 1997, ch. 2
       (sampling of systems with time delay).
    """
    a, b, c, d = _abcd(plant)
    t_s = _positive(t_s, "t_s")
    try:
        delay = float(computation_delay_samples)
    except (TypeError, ValueError) as err:
        raise DesignError(
            f"must be a number, got {computation_delay_samples!r}", key="computation_delay"
        ) from err
    if not math.isfinite(delay) or delay < 0.0:
        raise DesignError(
            f"must be >= 0 samples, got {computation_delay_samples!r}", key="computation_delay"
        )
    m = int(math.floor(delay + 1e-12))
    frac = delay - m
    if frac < 1e-12:
        frac = 0.0
    phi, gamma0 = _ss_zoh(a, b, (1.0 - frac) * t_s)
    if frac > 0.0:
        phi_a, gam_a = _ss_zoh(a, b, frac * t_s)
        gamma1 = phi @ gam_a  # e^{A(1-delta)Ts} int_0^{delta Ts} e^{At} dt B
        phi = phi @ phi_a
    else:
        gamma1 = np.zeros_like(gamma0)
    return SampledPlant(
        _freeze(phi), _freeze(gamma0), _freeze(gamma1), _freeze(c), _freeze(d), t_s, m + frac
    )


@dataclass(frozen=True, eq=False)
class SampledLoop:
    """Sampled loop gain ``T(z) = Gc(z) * sense_gain * Pd(z)``.

    Attributes
    ----------
    controller : DiscreteController
        Error [V] to duty.
    plant : SampledPlant
        Duty to output voltage, ZOH and computation delay included.
    sense_gain : float
        Divider ``H`` from the output to the sensed node. [-]
    """

    controller: DiscreteController
    plant: SampledPlant
    sense_gain: float = 1.0

    def freqresp(self, omega: Any) -> np.ndarray:
        """``T(e^{j omega t_s})``; omega in rad/s."""
        return self.controller.freqresp(omega) * self.sense_gain * self.plant.freqresp(omega)

    def state_space(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Discrete ``(A, B, C, D)`` of the open loop (controller in series with the plant)."""
        ctl = self.controller
        if ctl.order == 0:
            ac = np.zeros((0, 0))
            bc = np.zeros((0, 1))
            cc = np.zeros((1, 0))
            dc = np.array([[ctl.b[0]]])
        else:
            ac, bc, cc, dc = _canonical_ss(ctl.b, ctl.a)
        ap, bp, cp, dp = self.plant.state_space()
        nc, npl = ac.shape[0], ap.shape[0]
        a = np.zeros((nc + npl, nc + npl))
        a[:nc, :nc] = ac
        a[nc:, :nc] = bp @ cc
        a[nc:, nc:] = ap
        b = np.vstack([bc, bp @ dc])
        c = np.hstack([dp @ cc, cp]) * self.sense_gain
        d = dp @ dc * self.sense_gain
        return a, b, c, d

    def closed_loop_poles(self) -> np.ndarray:
        """Poles of ``T/(1 + T)`` (negative unity feedback) in the z-plane."""
        a, b, c, d = self.state_space()
        den = 1.0 + d[0, 0]
        if den == 0.0:
            raise DesignError("algebraic loop: T(z) has direct feedthrough -1", key="plant")
        return np.linalg.eigvals(a - b @ c / den)

    def closed_loop_stable(self) -> bool:
        """All closed-loop poles strictly inside the unit circle."""
        return bool(np.all(np.abs(self.closed_loop_poles()) < 1.0 - 1e-12))

    def to_control(self) -> control.StateSpace:
        """The open loop as a discrete ``control.StateSpace``."""
        return control.ss(*self.state_space(), self.controller.t_s)


# ----------------------------------------------------------------------------------------------
# loop figures
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class LoopFigures:
    """Headline figures of one loop gain.

    Attributes
    ----------
    crossover_hz : float
        Gain crossover (NaN if none in the band). [Hz]
    phase_margin_deg : float
        Phase margin at the crossover. [deg]
    gain_margin_db : float
        Gain margin (inf if the phase never reaches -180 deg in the band). [dB]
    closed_loop_stable : bool or None
        From the closed-loop poles (sampled loop); None where not evaluated (the continuous
        model with a pure delay).
    f_max_hz : float
        Upper end of the band searched. [Hz]
    """

    crossover_hz: float
    phase_margin_deg: float
    gain_margin_db: float
    closed_loop_stable: bool | None
    f_max_hz: float


def _figures(
    response: Callable[[np.ndarray], np.ndarray],
    f_min_hz: float,
    f_max_hz: float,
    stable: bool | None,
) -> LoopFigures:
    m = find_margins(response, f_min_hz, f_max_hz)
    return LoopFigures(
        crossover_hz=float(m.crossover_hz),
        phase_margin_deg=float(m.phase_margin_deg),
        gain_margin_db=float(m.gain_margin_db),
        closed_loop_stable=stable,
        f_max_hz=float(f_max_hz),
    )


# ----------------------------------------------------------------------------------------------
# fixed point
# ----------------------------------------------------------------------------------------------
def round_shift(x: int, shift: int) -> int:
    """Arithmetic right shift with round half up: ``floor((x + 2^(shift-1)) / 2^shift)``.

    Parameters
    ----------
    x : int
        Value to shift (any sign).
    shift : int
        Number of bits, >= 0 (0 returns ``x``).

    References
    ----------
    .. [1] A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing* (rounding in
       fixed-point arithmetic).

    Examples
    --------
    >>> round_shift(5, 1), round_shift(-5, 1), round_shift(-6, 2)
    (3, -2, -1)
    """
    if shift <= 0:
        return int(x)
    return (int(x) + (1 << (shift - 1))) >> shift


@dataclass(frozen=True)
class FixedPointCoefficients:
    """Integer coefficients and integer arithmetic rules of the fixed-point controller.

    Signals are integers: ``e_int = e / 2^-signal_frac_bits`` (error in volts) and
    ``u_int = u / 2^-signal_frac_bits`` (duty), i.e. both are Q(``signal_frac_bits``) numbers.
    Coefficients are ``b_int[k] = round(b[k] 2^shift)``, likewise ``a_int`` (``a_int[0] =
    2^shift``). One step of the difference equation, in exact integer arithmetic that fits an
    int64 accumulator:

        acc   = 2^h sum_{i>=0} b_int[i] e_int[k-i] - sum_{i>=1} a_int[i] uh[k-i]
        uh[k] = floor((acc + 2^(shift-1)) / 2^shift)          (history, h fractional bits)
        u[k]  = floor((uh[k] + 2^(h-1)) / 2^h), then clamped to [u_min_int, u_max_int];
                when clamped, uh[k] = u[k] 2^h (anti-windup: the clamped value is stored).

    The input is first saturated to ``[-input_limit, input_limit]``, which keeps every
    accumulator value below 2^63 in magnitude.

    Attributes
    ----------
    number_format : {"q15", "q31"}
    word_bits : int
        Coefficient word length (16 or 32). [bit]
    guard_bits : int
        ``g``; coefficients are Q(word_bits - 1 - g). [bit]
    shift : int
        ``word_bits - 1 - g``. [bit]
    b_int, a_int : tuple of int
        Integer coefficients (``a_int`` sums to zero for an integrating controller).
    integrator_adjusted : bool
        The last denominator coefficient was changed from plain rounding to keep the sum zero.
    signal_frac_bits : int
        Fractional bits of ``e_int`` and ``u_int``. [bit]
    history_frac_bits : int
        ``h``, extra fractional bits kept in the output history. [bit]
    input_limit : int
        Saturation of ``|e_int|``.
    u_min_int, u_max_int : int
        Output (duty) limits in signal units: ``ceil(duty_min 2^s)`` and
        ``floor(duty_max 2^s)``, the latter at most the largest word value (a duty of exactly
        1 is not representable and becomes ``1 - 2^-s``).
    """

    number_format: str
    word_bits: int
    guard_bits: int
    shift: int
    b_int: tuple[int, ...]
    a_int: tuple[int, ...]
    integrator_adjusted: bool
    signal_frac_bits: int
    history_frac_bits: int
    input_limit: int
    u_min_int: int
    u_max_int: int

    @property
    def b_q(self) -> np.ndarray:
        """Quantised numerator as real numbers ``b_int / 2^shift``."""
        return np.asarray(self.b_int, dtype=float) / 2.0**self.shift

    @property
    def a_q(self) -> np.ndarray:
        """Quantised denominator as real numbers ``a_int / 2^shift``."""
        return np.asarray(self.a_int, dtype=float) / 2.0**self.shift


def _round_coefficients(
    b: np.ndarray, a: np.ndarray, shift: int, integrator: bool
) -> tuple[list[int], list[int], bool]:
    scale = 2.0**shift
    b_int = [int(round(float(v) * scale)) for v in b]
    a_int = [int(round(float(v) * scale)) for v in a]
    adjusted = False
    if integrator and len(a_int) > 1 and sum(a_int) != 0:
        a_int[-1] = -sum(a_int[:-1])
        adjusted = True
    return b_int, a_int, adjusted


def fixed_point_coefficients(
    controller: DiscreteController,
    number_format: Literal["q15", "q31"],
    *,
    duty_min: float = 0.0,
    duty_max: float = 0.95,
) -> FixedPointCoefficients:
    """Q15 or Q31 coefficients with guard bits, exact integrator and overflow-safe limits.

    Parameters
    ----------
    controller : DiscreteController
        Error [V] to duty controller.
    number_format : {"q15", "q31"}
        Coefficient word: int16 or int32.
    duty_min, duty_max : float
        Output limits (anti-windup clamp), ``0 <= duty_min < duty_max <= 1``. [-]

    Returns
    -------
    FixedPointCoefficients

    Raises
    ------
    loopwright.errors.DesignError
        Unknown format, bad duty limits, or coefficients too large for the word.

    Notes
    -----
    Guard bits ([1]_; METHODS 7.5): ``g = ceil(log2(max |c|))`` over all coefficients
    (``a[0] = 1`` included), increased by one while a rounded coefficient does not fit the
    signed word (a value rounding to ``2^(W-1)``). Coefficients ``round(c 2^(W-1-g))``. With an
    integrator, the integer denominator is forced to sum to zero by setting the last
    coefficient to minus the sum of the others (plain rounding can leave a non-zero sum, which
    moves the pole off ``z = 1`` and leaves a steady-state error).

    Signal scaling: Q15 uses Q15 signals with ``h = shift`` history fractional bits (the
    integrator never stalls on small errors); Q31 uses Q31 signals with ``h = 0`` (one LSB is
    already 4.7e-10 of full scale). For Q31 a guard bit is added while the history term could
    reach 2^62; the input saturation limit then keeps the whole accumulator below 2^63.

    References
    ----------
    .. [1] A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing* (coefficient
       quantisation, scaling of fixed-point filters).
    """
    fmt = _choice(number_format, ("q15", "q31"), "number_format")
    duty_min, duty_max = _duty_limits(duty_min, duty_max)
    w = _WORD_BITS[fmt]
    s_bits = w - 1
    lo, hi = -(2 ** (w - 1)), 2 ** (w - 1) - 1
    b = np.asarray(controller.b, dtype=float)
    a = np.asarray(controller.a, dtype=float)
    cmax = float(np.max(np.abs(np.concatenate([b, a]))))
    g = max(0, math.ceil(math.log2(cmax)))
    u_min_int = math.ceil(duty_min * 2**s_bits)
    u_max_int = math.floor(duty_max * 2**s_bits)
    if u_max_int > hi:
        u_max_int = hi
    while True:
        shift = w - 1 - g
        if shift < 1:
            raise DesignError(
                f"coefficients too large for {fmt} (max |c| = {cmax:.6g})", key="number_format"
            )
        b_int, a_int, adjusted = _round_coefficients(b, a, shift, controller.has_integrator)
        fits = all(lo <= v <= hi for v in (*b_int, *a_int))
        h = shift if fmt == "q15" else 0
        uh_max = max(abs(u_min_int), abs(u_max_int)) << h
        sum_a = sum(abs(v) for v in a_int[1:])
        sum_b = sum(abs(v) for v in b_int)
        bound_a = sum_a * uh_max + (1 << (shift - 1))
        if fits and bound_a < 2**62:
            room = _INT64_MAX - bound_a
            e_lim = min(hi, room // max(sum_b << h, 1))
            if e_lim >= 2 ** (w - 2):
                break
        g += 1
    return FixedPointCoefficients(
        number_format=fmt,
        word_bits=w,
        guard_bits=g,
        shift=shift,
        b_int=tuple(b_int),
        a_int=tuple(a_int),
        integrator_adjusted=adjusted,
        signal_frac_bits=s_bits,
        history_frac_bits=h,
        input_limit=int(e_lim),
        u_min_int=int(u_min_int),
        u_max_int=int(u_max_int),
    )


def run_fixed_point(
    b_int: Sequence[int],
    a_int: Sequence[int],
    shift: int,
    e_int: Sequence[int],
    *,
    history_frac_bits: int = 0,
    u_min_int: int | None = None,
    u_max_int: int | None = None,
    input_limit: int | None = None,
    u_initial: int = 0,
) -> np.ndarray:
    """Bit-exact model of the fixed-point difference equation (direct form I).

    Parameters
    ----------
    b_int, a_int : sequence of int
        Integer coefficients (``a_int[0]`` is implied to be ``2^shift`` and not used).
    shift : int
        Fractional bits of the coefficients. [bit]
    e_int : sequence of int
        Input samples (integer signal units), zero initial state.
    history_frac_bits : int
        ``h``: fractional bits kept in the stored outputs (0 = integer history). [bit]
    u_min_int, u_max_int : int, optional
        Output clamp; the clamped value is stored in the history (anti-windup).
    input_limit : int, optional
        Symmetric input saturation.
    u_initial : int
        Initial output history (every stored output equals ``u_initial``, inputs zero): the
        state after the generated C ``reset`` function; 0 is the ``init`` state.

    Returns
    -------
    numpy.ndarray of int64
        Output samples ``u[k]``.

    Raises
    ------
    OverflowError
        If an accumulator value would not fit a signed 64-bit integer (the C code would
        overflow); cannot happen with :func:`fixed_point_coefficients` limits.

    Notes
    -----
    ``acc = 2^h sum b_int[i] e[k-i] - sum_{i>=1} a_int[i] uh[k-i]``; ``uh[k] =
    floor((acc + 2^(shift-1)) / 2^shift)``; ``u[k] = floor((uh[k] + 2^(h-1)) / 2^h)``, clamped;
    when clamped ``uh[k] = u[k] 2^h``. Rounding is round-half-up (floor after adding half an
    LSB), the same for negative values. With ``h = 0`` this is the integer-history form of
    METHODS 7.7; with ``h = shift`` it is its "Q14 output history" form (one rounding per step;
    the two-rounding form printed there differs only on exact ties of the history sum).

    References
    ----------
    .. [1] A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing* (direct form I).
    .. [2] K. J. Astrom, B. Wittenmark, *Computer-Controlled Systems*, 3rd ed., 1997
       (anti-windup by limiting the stored controller output).

    Examples
    --------
    >>> run_fixed_point([16384, 16384], [16384, -16384], 14, [1, 1, 1]).tolist()
    [1, 3, 5]
    """
    b = [int(v) for v in b_int]
    a = [int(v) for v in a_int]
    n = max(len(a), len(b)) - 1
    b += [0] * (n + 1 - len(b))
    a += [0] * (n + 1 - len(a))
    h = int(history_frac_bits)
    if h < 0 or h > shift:
        raise DesignError(f"must be in [0, shift={shift}], got {h}", key="history_frac_bits")
    eh = [0] * (n + 1)
    uh = [int(u_initial) * (1 << h)] * max(n, 1)
    out = np.empty(len(e_int), dtype=np.int64)
    for k, ek in enumerate(e_int):
        ek = int(ek)
        if input_limit is not None:
            ek = max(-int(input_limit), min(int(input_limit), ek))
        eh = [ek, *eh[:-1]]
        acc_b = sum(bi * ei for bi, ei in zip(b, eh, strict=True))
        acc_a = sum(ai * ui for ai, ui in zip(a[1:], uh, strict=False))
        worst = sum(abs(bi * ei) for bi, ei in zip(b, eh, strict=True)) * (1 << h)
        worst += sum(abs(ai * ui) for ai, ui in zip(a[1:], uh, strict=False))
        if worst + (1 << max(shift - 1, 0)) > _INT64_MAX:
            raise OverflowError(f"accumulator may exceed int64 at sample {k}")
        acc = acc_b * (1 << h) - acc_a
        uhk = round_shift(acc, shift)
        u = round_shift(uhk, h)
        if u_max_int is not None and u > u_max_int:
            u = int(u_max_int)
            uhk = u * (1 << h)
        elif u_min_int is not None and u < u_min_int:
            u = int(u_min_int)
            uhk = u * (1 << h)
        if n:
            uh = [uhk, *uh[:-1]]
        out[k] = u
    return out


def run_float(
    b: Sequence[float],
    a: Sequence[float],
    e: Sequence[float],
    *,
    u_min: float | None = None,
    u_max: float | None = None,
    dtype: Any = np.float32,
    u_initial: float = 0.0,
) -> np.ndarray:
    """Model of the floating-point difference equation, operation by operation.

    Parameters
    ----------
    b, a : sequence of float
        Coefficients in powers of ``z^-1`` (``a[0] = 1``, not used).
    e : sequence of float
        Input samples, zero initial state.
    u_min, u_max : float, optional
        Output clamp; the clamped value is stored in the history (anti-windup).
    dtype : numpy floating type
        ``numpy.float32`` reproduces the generated C ``float`` code (each product and each
        sum rounded to float32, in the order ``acc = 0; acc += b[i] e[k-i]`` for ``i = 0..n``,
        then ``acc -= a[i] u[k-i]`` for ``i = 1..n``); ``numpy.float64`` gives the double
        precision reference.
    u_initial : float
        Initial output history (inputs zero), as after the generated C ``reset`` function.

    Returns
    -------
    numpy.ndarray
        Output samples (of ``dtype``).

    References
    ----------
    .. [1] A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing* (direct form I).
    """
    t = np.dtype(dtype).type
    bb = [t(v) for v in b]
    aa = [t(v) for v in a]
    n = max(len(aa), len(bb)) - 1
    bb += [t(0)] * (n + 1 - len(bb))
    aa += [t(0)] * (n + 1 - len(aa))
    lo = None if u_min is None else t(u_min)
    hi = None if u_max is None else t(u_max)
    eh = [t(0)] * (n + 1)
    uh = [t(u_initial)] * max(n, 1)
    out = np.empty(len(e), dtype=t)
    for k, ek in enumerate(e):
        eh = [t(ek), *eh[:-1]]
        acc = t(0)
        for i in range(n + 1):
            acc = t(acc + t(bb[i] * eh[i]))
        for i in range(1, n + 1):
            acc = t(acc - t(aa[i] * uh[i - 1]))
        if hi is not None and acc > hi:
            acc = hi
        elif lo is not None and acc < lo:
            acc = lo
        if n:
            uh = [acc, *uh[:-1]]
        out[k] = acc
    return out


def _duty_limits(duty_min: Any, duty_max: Any) -> tuple[float, float]:
    vals = []
    for name, v in (("duty_min", duty_min), ("duty_max", duty_max)):
        key = DIGITAL_OPTION_KEYS[name]
        if isinstance(v, bool):
            raise DesignError(f"must be a number in [0, 1], got {v!r}", key=key)
        try:
            fv = float(v)
        except (TypeError, ValueError) as err:
            raise DesignError(f"must be a number in [0, 1], got {v!r}", key=key) from err
        if not (0.0 <= fv <= 1.0):
            raise DesignError(f"must be in [0, 1], got {v!r}", key=key)
        vals.append(fv)
    if not vals[0] < vals[1]:
        raise DesignError(
            f"must exceed duty_min ({vals[0]:g}), got {vals[1]:g}",
            key=DIGITAL_OPTION_KEYS["duty_max"],
        )
    return vals[0], vals[1]


# ----------------------------------------------------------------------------------------------
# quantisation report
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class QuantisationReport:
    """Effect of rounding the coefficients to the number format.

    Attributes
    ----------
    number_format : {"float32", "q15", "q31"}
    controller : DiscreteController
        The controller with the quantised coefficients (as real numbers).
    fixed_point : FixedPointCoefficients or None
        Integer coefficients and arithmetic rules (None for float32).
    poles, poles_quantised, zeros, zeros_quantised : numpy.ndarray
        z-plane roots before and after rounding, paired by nearest distance.
    max_pole_shift, max_zero_shift : float
        Largest distance a pole or zero moved in the z-plane. [-]
    max_gain_error_db, max_phase_error_deg : float
        Largest deviation of ``Gc_q/Gc`` over the band ``f_band_hz``. [dB], [deg]
    f_band_hz : tuple of float
        Band of the error figures, 4e-4 fs to 0.496 fs, 2000 log-spaced points. [Hz]
    integrator_exact : bool or None
        The quantised denominator still has an exact root at ``z = 1`` (None: no integrator).
    integral_action_lost : bool
        The quantised numerator has an exact root at ``z = 1`` as well (its coefficients sum
        to zero), cancelling the integrator of an integrating controller.
    unstable_poles : tuple of complex
        Quantised poles on or outside the unit circle, other than an exact integrator.
    """

    number_format: str
    controller: DiscreteController
    fixed_point: FixedPointCoefficients | None
    poles: np.ndarray
    poles_quantised: np.ndarray
    zeros: np.ndarray
    zeros_quantised: np.ndarray
    max_pole_shift: float
    max_zero_shift: float
    max_gain_error_db: float
    max_phase_error_deg: float
    f_band_hz: tuple[float, float]
    integrator_exact: bool | None
    integral_action_lost: bool
    unstable_poles: tuple[complex, ...]


def _pair(before: np.ndarray, after: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    from scipy.optimize import linear_sum_assignment

    if before.size == 0 or after.size == 0:
        return before, after, float("nan") if before.size != after.size else 0.0
    dist = np.abs(before[:, None] - after[None, :])
    rows, cols = linear_sum_assignment(dist)
    return before[rows], after[cols], float(np.max(dist[rows, cols]))


def quantise(
    controller: DiscreteController,
    number_format: NumberFormat,
    *,
    duty_min: float = 0.0,
    duty_max: float = 0.95,
) -> QuantisationReport:
    """Round a controller's coefficients to float32, Q15 or Q31 and report what moved.

    Parameters
    ----------
    controller : DiscreteController
        Controller with double-precision coefficients.
    number_format : {"float32", "q15", "q31"}
        Target number format.
    duty_min, duty_max : float
        Output limits passed to :func:`fixed_point_coefficients`. [-]

    Returns
    -------
    QuantisationReport

    Raises
    ------
    loopwright.errors.DesignError
        Unknown format or bad limits.

    Notes
    -----
    Pole and zero displacements pair each original root with a quantised one so that the sum
    of distances is least. Near-coincident roots (a double pole) are sensitive to rounding:
    they may split, which shows as a displacement much larger than the coefficient step.

    References
    ----------
    .. [1] A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing* (sensitivity of
       direct-form pole locations to coefficient quantisation).
    """
    fmt = _choice(number_format, _FORMATS, "number_format")
    if fmt == "float32":
        fx = None
        b_q = np.asarray(controller.b, dtype=np.float32).astype(float)
        a_q = np.asarray(controller.a, dtype=np.float32).astype(float)
        if controller.has_integrator and a_q.size > 1 and math.fsum(a_q.tolist()) != 0.0:
            # keep the integrator exact when the needed last coefficient is a float32 number
            last = float(np.float32(-math.fsum(a_q[:-1].tolist())))
            if math.fsum([*a_q[:-1].tolist(), last]) == 0.0:
                a_q[-1] = last
    else:
        fx = fixed_point_coefficients(controller, fmt, duty_min=duty_min, duty_max=duty_max)  # type: ignore[arg-type]
        b_q, a_q = fx.b_q, fx.a_q
    q = DiscreteController(
        b_q, a_q, controller.t_s, "quantised", controller.prewarp_hz, controller.has_integrator
    )
    poles, poles_q, dp = _pair(controller.poles, q.poles)
    zeros, zeros_q, dz = _pair(controller.zeros, q.zeros)
    fs = controller.sample_rate_hz
    band = (4e-4 * fs, 0.496 * fs)
    w = 2 * np.pi * np.logspace(np.log10(band[0]), np.log10(band[1]), 2000)
    ratio = q.freqresp(w) / controller.freqresp(w)
    gain_err = float(np.max(np.abs(20 * np.log10(np.abs(ratio)))))
    phase_err = float(np.max(np.abs(np.degrees(np.angle(ratio)))))
    integrator_exact: bool | None = None
    rest = a_q
    if controller.has_integrator:
        if fx is not None:
            integrator_exact = sum(fx.a_int) == 0
        else:
            integrator_exact = math.fsum(a_q.tolist()) == 0.0
        if integrator_exact:
            rest = np.cumsum(a_q)[:-1]  # a(x) / (1 - x), exact root removed
    rest_poles = np.roots(rest) if rest.size > 1 else np.array([])
    unstable = tuple(complex(p) for p in rest_poles if abs(p) >= 1.0 - 1e-12)
    return QuantisationReport(
        number_format=fmt,
        controller=q,
        fixed_point=fx,
        poles=_freeze(poles),
        poles_quantised=_freeze(poles_q),
        zeros=_freeze(zeros),
        zeros_quantised=_freeze(zeros_q),
        max_pole_shift=dp,
        max_zero_shift=dz,
        max_gain_error_db=gain_err,
        max_phase_error_deg=phase_err,
        f_band_hz=band,
        integrator_exact=integrator_exact,
        integral_action_lost=bool(
            controller.has_integrator
            and (sum(fx.b_int) == 0 if fx is not None else math.fsum(b_q.tolist()) == 0.0)
        ),
        unstable_poles=unstable,
    )


# ----------------------------------------------------------------------------------------------
# limit cycles (Peterchev & Sanders)
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class LimitCycleCheck:
    """Quantisation-resolution conditions against steady-state limit cycles.

    Attributes
    ----------
    plant_dc_gain_v : float
        ``|dVo/dD|``, output change per unit duty (buck: ``Vg``). [V]
    adc_lsb_v : float
        ADC step at its input (the sensed node): full scale / 2^bits. [V]
    adc_lsb_output_v : float
        ADC step referred to the output, ``adc_lsb_v / H``. [V]
    dpwm_counts : float
        DPWM steps per switching period. [-]
    dpwm_bits : float
        ``log2(dpwm_counts)``. [bit]
    dpwm_lsb_duty : float
        ``1 / dpwm_counts``. [-]
    dpwm_lsb_output_v : float
        Output change of one DPWM step, ``|dVo/dD| / dpwm_counts``. [V]
    counts_needed : float
        DPWM counts at which one DPWM step equals one ADC step at the output; strictly more
        are needed. [-]
    bits_needed : int
        Smallest DPWM resolution with more than ``counts_needed`` steps. [bit]
    clock_needed_hz : float
        Counter clock giving ``counts_needed`` steps per period (effective clock for dither
        or high-resolution PWM). [Hz]
    dpwm_finer_than_adc : bool
        Condition 1: ``dpwm_lsb_output_v < adc_lsb_output_v``.
    integral_action : bool or None
        Condition 2: the controller integrates (None if no controller was given).
    integral_gain_lsb : float
        Integral gain in normalised LSB units: DPWM steps per sample caused by one ADC step
        of error (NaN without integral action or controller). [-]
    small_integral_gain : bool or None
        Condition 3: ``integral_gain_lsb <= 1``.
    """

    plant_dc_gain_v: float
    adc_lsb_v: float
    adc_lsb_output_v: float
    dpwm_counts: float
    dpwm_bits: float
    dpwm_lsb_duty: float
    dpwm_lsb_output_v: float
    counts_needed: float
    bits_needed: int
    clock_needed_hz: float
    dpwm_finer_than_adc: bool
    integral_action: bool | None
    integral_gain_lsb: float
    small_integral_gain: bool | None


def limit_cycle_check(
    plant_dc_gain_v: float,
    sense_gain: float,
    adc_bits: int,
    adc_full_scale_v: float,
    *,
    switching_frequency_hz: float,
    pwm_counts: float | None = None,
    pwm_clock_hz: float | None = None,
    controller: DiscreteController | None = None,
) -> LimitCycleCheck:
    """Resolution conditions for the absence of limit cycles (Peterchev and Sanders 2003).

    Parameters
    ----------
    plant_dc_gain_v : float
        ``|dVo/dD|`` at the operating point (buck: the input voltage). [V]
    sense_gain : float
        Divider ``H`` between the output and the ADC. [-]
    adc_bits : int
        ADC resolution. [bit]
    adc_full_scale_v : float
        ADC input full scale. [V]
    switching_frequency_hz : float
        Switching (= duty update) frequency. [Hz]
    pwm_counts : float, optional
        DPWM steps per period; or give ``pwm_clock_hz`` instead.
    pwm_clock_hz : float, optional
        DPWM counter clock; ``pwm_counts = pwm_clock_hz / switching_frequency_hz``. [Hz]
    controller : DiscreteController, optional
        Error [V] to duty controller, for conditions 2 and 3.

    Returns
    -------
    LimitCycleCheck

    Raises
    ------
    loopwright.errors.DesignError
        Non-positive or missing resolutions.

    Notes
    -----
    Condition 1 ([1]_, confirmed in [2]_): the output step of one DPWM LSB must be smaller than
    one ADC LSB referred to the output, ``|dVo/dD| 2^-N_dpwm < q_adc / H``. Condition 2: integral
    action. Condition 3 (from memory): integral gain at most 1 in normalised LSB units, taken
    here as ``r q_adc N_dpwm`` with ``r`` the controller's accumulator gain
    (:attr:`DiscreteController.integral_gain`, duty per volt per sample).

    References
    ----------
    .. [1] A. V. Peterchev, S. R. Sanders, "Quantization resolution and limit cycling in
       digitally controlled PWM converters," IEEE Trans. Power Electron., 18(1):301-308, 2003.
    .. [2] H. Peng, A. Prodic, E. Alarcon, D. Maksimovic, "Modeling of quantization effects in
       digitally controlled DC-DC converters," IEEE Trans. Power Electron., 22(1):208-215,
       2007.

    Examples
    --------
    >>> r = limit_cycle_check(36.0, 0.1, 12, 3.3, switching_frequency_hz=250e3,
    ...                       pwm_clock_hz=100e6)
    >>> round(r.adc_lsb_output_v * 1e3, 4), r.dpwm_counts, r.bits_needed
    (8.0566, 400.0, 13)
    """
    gain = _positive(abs(plant_dc_gain_v), "plant_dc_gain_v")
    h = _positive(sense_gain, "sense_gain")
    if isinstance(adc_bits, bool) or not isinstance(adc_bits, int | np.integer):
        raise DesignError(
            f"must be an integer in [1, 32], got {adc_bits!r}", key="digital.adc_bits"
        )
    if not 1 <= int(adc_bits) <= 32:
        raise DesignError(f"must be in [1, 32], got {adc_bits!r}", key="digital.adc_bits")
    fs_v = _positive(adc_full_scale_v, "digital.adc_full_scale")
    fsw = _positive(switching_frequency_hz, "digital.sample_rate")
    if (pwm_counts is None) == (pwm_clock_hz is None):
        raise DesignError(
            "give exactly one of pwm_counts and pwm_clock", key=DIGITAL_OPTION_KEYS["pwm_counts"]
        )
    if pwm_counts is not None:
        counts = _positive(pwm_counts, DIGITAL_OPTION_KEYS["pwm_counts"])
    else:
        counts = _positive(pwm_clock_hz, DIGITAL_OPTION_KEYS["pwm_clock_hz"]) / fsw
    q_adc = fs_v / 2 ** int(adc_bits)
    q_out = q_adc / h
    dpwm_out = gain / counts
    needed = gain / q_out
    bits_needed = int(math.floor(math.log2(needed))) + 1
    integral: bool | None = None
    ki = float("nan")
    small: bool | None = None
    if controller is not None:
        integral = bool(controller.has_integrator)
        if integral:
            ki = abs(controller.integral_gain) * q_adc * counts
            small = ki <= 1.0
    return LimitCycleCheck(
        plant_dc_gain_v=gain,
        adc_lsb_v=q_adc,
        adc_lsb_output_v=q_out,
        dpwm_counts=counts,
        dpwm_bits=math.log2(counts),
        dpwm_lsb_duty=1.0 / counts,
        dpwm_lsb_output_v=dpwm_out,
        counts_needed=needed,
        bits_needed=bits_needed,
        clock_needed_hz=needed * fsw,
        dpwm_finer_than_adc=dpwm_out < q_out,
        integral_action=integral,
        integral_gain_lsb=ki,
        small_integral_gain=small,
    )


# ----------------------------------------------------------------------------------------------
# options and the one-call design
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class DigitalOptions:
    """Options of the digital controller (the ``[digital]`` table of a design file).

    Attributes
    ----------
    sample_rate_hz : float
        Sample and duty-update rate (one per switching period in common practice). [Hz]
    delay_samples : float
        Total loop delay in samples: computation delay + 0.5 for the PWM hold, >= 0.5 and
        <= 20 (1.5 = sample at the start of a period, update at the next). [samples]
    method : {"tustin", "zoh", "matched"}
        Discretisation; Tustin and matched use ``prewarp_hz`` (default: the crossover).
    number_format : {"float32", "q15", "q31"}
        Firmware number format.
    prewarp_hz : float, optional
        Prewarp / gain-match frequency; None = the design crossover. [Hz]
    matched_infinite_zeros : {"minus-one", "drop-one"}
        Matched method variant (see :func:`discretize`).
    adc_bits : int, optional
        ADC resolution, for the limit-cycle check (with ``adc_full_scale_v``). [bit]
    adc_full_scale_v : float, optional
        ADC full scale. [V]
    pwm_counts : int, optional
        DPWM steps per period (or ``pwm_clock_hz``). [-]
    pwm_clock_hz : float, optional
        DPWM counter clock; counts = clock / sample rate. [Hz]
    duty_min, duty_max : float
        Duty limits of the anti-windup clamp, 0 <= duty_min < duty_max <= 1. [-]
    crossover_fraction_limit : float
        Warn when the crossover exceeds this fraction of the sample rate (fs/10, common
        practice), in (0, 0.5). [-]

    Raises
    ------
    loopwright.errors.DesignError
        Naming the ``digital.<field>`` key (see :data:`DIGITAL_OPTION_KEYS`).
    """

    sample_rate_hz: float
    delay_samples: float = 1.5
    method: Method = "tustin"
    number_format: NumberFormat = "q15"
    prewarp_hz: float | None = None
    matched_infinite_zeros: InfiniteZeros = "minus-one"
    adc_bits: int | None = None
    adc_full_scale_v: float | None = None
    pwm_counts: int | None = None
    pwm_clock_hz: float | None = None
    duty_min: float = 0.0
    duty_max: float = 0.95
    crossover_fraction_limit: float = 0.1

    def __post_init__(self) -> None:
        k = DIGITAL_OPTION_KEYS
        fs = _positive(self.sample_rate_hz, k["sample_rate_hz"])
        object.__setattr__(self, "sample_rate_hz", fs)
        delay = self.delay_samples
        if isinstance(delay, bool) or not isinstance(delay, int | float | np.number):
            raise DesignError(
                f"must be a number in [0.5, 20], got {delay!r}", key=k["delay_samples"]
            )
        if not (0.5 <= float(delay) <= 20.0):
            raise DesignError(
                f"must be in [0.5, 20] samples (computation delay + 0.5 for the PWM hold), "
                f"got {delay!r}",
                key=k["delay_samples"],
            )
        object.__setattr__(self, "delay_samples", float(delay))
        _choice(self.method, _METHODS, k["method"])
        _choice(self.number_format, _FORMATS, k["number_format"])
        _choice(self.matched_infinite_zeros, _INFINITE_ZEROS, k["matched_infinite_zeros"])
        if self.prewarp_hz is not None:
            object.__setattr__(
                self, "prewarp_hz", _positive(self.prewarp_hz, k["prewarp_hz"], upper=fs / 2)
            )
        if (self.adc_bits is None) != (self.adc_full_scale_v is None):
            raise DesignError(
                "adc_bits and adc_full_scale must be given together", key=k["adc_bits"]
            )
        if self.adc_bits is not None:
            b = self.adc_bits
            if isinstance(b, bool) or not isinstance(b, int | np.integer) or not 1 <= b <= 32:
                raise DesignError(f"must be an integer in [1, 32], got {b!r}", key=k["adc_bits"])
            object.__setattr__(
                self, "adc_full_scale_v", _positive(self.adc_full_scale_v, k["adc_full_scale_v"])
            )
        if self.pwm_counts is not None and self.pwm_clock_hz is not None:
            raise DesignError("give pwm_counts or pwm_clock, not both", key=k["pwm_counts"])
        if self.pwm_counts is not None:
            c = self.pwm_counts
            if isinstance(c, bool) or not isinstance(c, int | np.integer) or c < 2:
                raise DesignError(f"must be an integer >= 2, got {c!r}", key=k["pwm_counts"])
        if self.pwm_clock_hz is not None:
            clk = _positive(self.pwm_clock_hz, k["pwm_clock_hz"])
            if clk < 2 * fs:
                raise DesignError(
                    f"must be at least twice the sample rate ({2 * fs:g} Hz), got {clk:g}",
                    key=k["pwm_clock_hz"],
                )
            object.__setattr__(self, "pwm_clock_hz", clk)
        lo, hi = _duty_limits(self.duty_min, self.duty_max)
        object.__setattr__(self, "duty_min", lo)
        object.__setattr__(self, "duty_max", hi)
        frac = _positive(self.crossover_fraction_limit, k["crossover_fraction_limit"], upper=0.5)
        object.__setattr__(self, "crossover_fraction_limit", frac)

    @property
    def t_s(self) -> float:
        """Sample period. [s]"""
        return 1.0 / self.sample_rate_hz

    @property
    def computation_delay_samples(self) -> float:
        """``delay_samples - 0.5``: sampling to duty update. [samples]"""
        return self.delay_samples - 0.5


@dataclass(frozen=True, eq=False)
class DigitalDesign:
    """A discretised controller with its sampled-loop proof and fixed-point implementation.

    Attributes
    ----------
    options : DigitalOptions
    f_c_hz : float
        Crossover of the analog design (prewarp default). [Hz]
    modulator_gain, sense_gain : float
        ``Fm`` [1/V] and ``H`` [-] of the analog loop ``T = Gc Fm Gvd H``.
    controller : DiscreteController
        Error [V] to duty, approximating ``Fm Gc(s)``, double precision.
    loop : SampledLoop
        Exact sampled loop with ``controller``.
    loop_z : LoopFigures
        Figures of ``loop`` (band up to 0.4999 fs).
    loop_continuous_delay : LoopFigures
        Figures of ``Fm Gc(s) Gvd(s) H e^{-s delay t_s}`` over the same band.
    phase_lost_at_fc_deg : float
        ``angle(T(z)) - angle(T(s))`` at ``f_c_hz`` (sampling, hold and delay; negative). [deg]
    delay_phase_estimate_deg : float
        The common-practice estimate ``-360 f_c delay / fs``. [deg]
    quantisation : QuantisationReport
        Coefficient rounding to ``options.number_format``.
    loop_quantised : SampledLoop
        Sampled loop with the quantised coefficients.
    loop_z_quantised : LoopFigures
        Figures of ``loop_quantised``.
    limit_cycle : LimitCycleCheck or None
        When ADC and DPWM resolutions were given.
    warnings : tuple of str
        Every warning issued while designing.
    """

    options: DigitalOptions
    f_c_hz: float
    modulator_gain: float
    sense_gain: float
    controller: DiscreteController
    loop: SampledLoop
    loop_z: LoopFigures
    loop_continuous_delay: LoopFigures
    phase_lost_at_fc_deg: float
    delay_phase_estimate_deg: float
    quantisation: QuantisationReport
    loop_quantised: SampledLoop
    loop_z_quantised: LoopFigures
    limit_cycle: LimitCycleCheck | None
    warnings: tuple[str, ...] = field(default=())

    @property
    def fixed_point(self) -> FixedPointCoefficients | None:
        """Integer implementation (None for float32)."""
        return self.quantisation.fixed_point

    def loop_response(self, f_hz: Any, *, quantised: bool = False) -> np.ndarray:
        """Sampled loop gain ``T(e^{j 2 pi f t_s})`` at ``f_hz`` [Hz]."""
        lp = self.loop_quantised if quantised else self.loop
        return lp.freqresp(2 * np.pi * np.asarray(f_hz, dtype=float))


def design_digital(
    num: Any,
    den: Any,
    plant_abcd: Any,
    *,
    modulator_gain: float,
    sense_gain: float,
    options: DigitalOptions,
    f_c_hz: float,
) -> DigitalDesign:
    """Discretise an analog compensator and prove the sampled loop.

    Parameters
    ----------
    num, den : array_like
        Analog compensator ``Gc(s)`` (sensed error to modulator input), highest power first.
    plant_abcd : tuple or state-space object
        Control-to-output plant ``Gvd`` (duty to output voltage) as ``(A, B, C, D)`` or an
        object with those attributes.
    modulator_gain : float
        ``Fm = 1/ramp`` of the analog design; the digital controller outputs the duty, so it
        realises ``Fm Gc``. [1/V]
    sense_gain : float
        Divider ``H = vref/|vout|``. [-]
    options : DigitalOptions
        Sample rate, delay, method, number format, resolutions, duty limits.
    f_c_hz : float
        Crossover of the analog design, in (0, fs/2): prewarp frequency by default. [Hz]

    Returns
    -------
    DigitalDesign

    Raises
    ------
    loopwright.errors.DesignError
        Bad inputs, naming the field.

    Warns
    -----
    ModelValidityWarning
        Crossover above ``crossover_fraction_limit * fs``.
    DesignWarning
        Unstable sampled closed loop; quantised pole on/outside the unit circle; integrator
        not exact; margins moved by more than 1 deg / 1 dB by quantisation; a limit-cycle
        condition not met.

    Notes
    -----
    Sampled loop ([2]_; METHODS 7.3): ``T(z) = [Fm Gc](z) H z^-m Pd(z)`` where ``Pd`` is the
    exact ZOH model of ``Gvd`` with the computation delay ``delay - 0.5`` samples (the hold
    itself accounts for half a sample; fractional parts handled exactly, see
    :func:`sample_plant`). Stability is decided by the closed-loop poles of the sampled loop;
    margins are read on ``z = e^{j w t_s}`` between ``1e-4 min(fc, fs)`` and ``0.4999 fs``
    (just below Nyquist). The continuous figures use ``e^{-s delay t_s}`` over the same band.

    References
    ----------
    .. [1] G. F. Franklin, J. D. Powell, M. L. Workman, *Digital Control of Dynamic Systems*,
       3rd ed., 1998, ch. 6.
    .. [2] L. Corradini, D. Maksimovic, P. Mattavelli, R. Zane, *Digital Control of
       High-Frequency Switched-Mode Power Converters*, Wiley-IEEE Press, 2015.
    .. [3] A. V. Peterchev, S. R. Sanders, "Quantization resolution and limit cycling in
       digitally controlled PWM converters," IEEE Trans. Power Electron., 18(1):301-308, 2003.
    """
    if not isinstance(options, DigitalOptions):
        raise DesignError(f"must be DigitalOptions, got {type(options).__name__}", key="digital")
    fs = options.sample_rate_hz
    t_s = options.t_s
    fm = _positive(modulator_gain, "modulator.ramp")
    h = _positive(sense_gain, "feedback.vref")
    f_c = _positive(f_c_hz, "target.crossover", upper=fs / 2)
    numa = _poly(num, "compensator.num")
    dena = _poly(den, "compensator.den")
    if numa.size > dena.size:
        raise DesignError(
            f"compensator must be proper: degree of num ({numa.size - 1}) exceeds degree of "
            f"den ({dena.size - 1})",
            key="compensator.num",
        )
    a, b, c, d = _abcd(plant_abcd)
    issued: list[tuple[type[Warning], str]] = []

    prewarp = options.prewarp_hz if options.prewarp_hz is not None else f_c
    controller = discretize(
        numa * fm,
        dena,
        t_s,
        options.method,
        prewarp_hz=None if options.method == "zoh" else prewarp,
        matched_infinite_zeros=options.matched_infinite_zeros,
    )
    plant_z = sample_plant((a, b, c, d), t_s, options.computation_delay_samples)
    loop = SampledLoop(controller, plant_z, h)
    f_min = 1e-4 * min(f_c, fs)
    f_max = 0.4999 * fs
    stable = loop.closed_loop_stable()
    loop_z = _figures(loop.freqresp, f_min, f_max, stable)

    def analog(omega: np.ndarray) -> np.ndarray:
        s = 1j * np.asarray(omega, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            gc = np.polyval(numa, s) / np.polyval(dena, s)
        return fm * gc * h * _ss_freqresp(a, b, c, d, s)

    def continuous(omega: np.ndarray) -> np.ndarray:
        omega = np.asarray(omega, dtype=float)
        return analog(omega) * np.exp(-1j * omega * options.delay_samples * t_s)

    loop_c = _figures(continuous, f_min, f_max, None)
    wc = np.array([2 * np.pi * f_c])
    lost = float(np.degrees(np.angle(loop.freqresp(wc)[0] / analog(wc)[0])))
    estimate = -360.0 * f_c * options.delay_samples / fs

    quant = quantise(
        controller, options.number_format, duty_min=options.duty_min, duty_max=options.duty_max
    )
    loop_q = SampledLoop(quant.controller, plant_z, h)
    stable_q = loop_q.closed_loop_stable()
    loop_zq = _figures(loop_q.freqresp, f_min, f_max, stable_q)

    limit = None
    if options.adc_bits is not None and (
        options.pwm_counts is not None or options.pwm_clock_hz is not None
    ):
        try:
            dc_gain = float(d[0, 0] - (c @ np.linalg.solve(a, b))[0, 0])
        except np.linalg.LinAlgError as err:
            raise DesignError("plant has a pole at s = 0; no DC gain", key="plant") from err
        limit = limit_cycle_check(
            dc_gain,
            h,
            int(options.adc_bits),
            float(options.adc_full_scale_v),  # type: ignore[arg-type]
            switching_frequency_hz=fs,
            pwm_counts=options.pwm_counts,
            pwm_clock_hz=options.pwm_clock_hz,
            controller=controller,
        )

    # ---- warnings -----------------------------------------------------------------------
    frac = options.crossover_fraction_limit
    f_cross = max(f_c, loop_z.crossover_hz if math.isfinite(loop_z.crossover_hz) else 0.0)
    if f_cross > frac * fs:
        issued.append(
            (
                ModelValidityWarning,
                f"crossover {f_cross:.6g} Hz exceeds {frac:g} of the sample rate "
                f"({frac * fs:.6g} Hz): sampling effects dominate the loop (fs/10 is common "
                "practice)",
            )
        )
    if not stable:
        worst = float(np.max(np.abs(loop.closed_loop_poles())))
        issued.append(
            (
                DesignWarning,
                f"sampled closed loop is UNSTABLE (largest closed-loop pole |z| = {worst:.6g})",
            )
        )
    elif not stable_q:
        worst = float(np.max(np.abs(loop_q.closed_loop_poles())))
        issued.append(
            (
                DesignWarning,
                f"closed loop is not asymptotically stable with {quant.number_format} "
                f"coefficients (largest closed-loop pole |z| = {worst:.9g})",
            )
        )
    if controller.has_integrator and quant.integral_action_lost:
        issued.append(
            (
                DesignWarning,
                f"{quant.number_format} rounding puts a controller zero exactly on the "
                "integrator pole at z = 1: the integral action is lost (numerator coefficients "
                "sum to zero)",
            )
        )
    if quant.unstable_poles:
        mags = ", ".join(f"{abs(p):.9g}" for p in quant.unstable_poles)
        issued.append(
            (
                DesignWarning,
                f"{quant.number_format} rounding moves a controller pole onto or outside the "
                f"unit circle (|z| = {mags})",
            )
        )
    if controller.has_integrator and quant.integrator_exact is False:
        issued.append(
            (
                DesignWarning,
                f"{quant.number_format} coefficients do not keep the integrator pole exactly at "
                "z = 1 (denominator coefficients do not sum to zero)",
            )
        )
    d_pm = loop_zq.phase_margin_deg - loop_z.phase_margin_deg
    d_gm = loop_zq.gain_margin_db - loop_z.gain_margin_db
    if abs(d_pm) > 1.0 or (math.isfinite(d_gm) and abs(d_gm) > 1.0):
        issued.append(
            (
                DesignWarning,
                f"{quant.number_format} coefficients change the phase margin by {d_pm:+.3g} deg "
                f"and the gain margin by {d_gm:+.3g} dB",
            )
        )
    if limit is not None:
        if not limit.dpwm_finer_than_adc:
            issued.append(
                (
                    DesignWarning,
                    f"limit cycles expected: one DPWM step moves the output by "
                    f"{limit.dpwm_lsb_output_v * 1e3:.4g} mV, more than one ADC step at the "
                    f"output ({limit.adc_lsb_output_v * 1e3:.4g} mV); at least "
                    f"{limit.bits_needed} bits of effective DPWM resolution are needed "
                    f"(> {limit.counts_needed:.5g} counts, dither or high-resolution PWM)",
                )
            )
        if limit.integral_action is False:
            issued.append(
                (DesignWarning, "no integral action: a zero-error steady state may not exist")
            )
        if limit.small_integral_gain is False:
            issued.append(
                (
                    DesignWarning,
                    f"integral gain {limit.integral_gain_lsb:.3g} DPWM steps per ADC step and "
                    "sample exceeds 1: limit cycles are likely",
                )
            )
    for category, message in issued:
        warnings.warn(message, category, stacklevel=2)
    return DigitalDesign(
        options=options,
        f_c_hz=f_c,
        modulator_gain=fm,
        sense_gain=h,
        controller=controller,
        loop=loop,
        loop_z=loop_z,
        loop_continuous_delay=loop_c,
        phase_lost_at_fc_deg=lost,
        delay_phase_estimate_deg=estimate,
        quantisation=quant,
        loop_quantised=loop_q,
        loop_z_quantised=loop_zq,
        limit_cycle=limit,
        warnings=tuple(m for _, m in issued),
    )
