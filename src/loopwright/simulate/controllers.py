"""Controllers the switching simulator can close the loop with.

Two kinds plug in:

* :class:`AnalogController`: a continuous compensator ``Gc(s)`` in state-space form (sensed
  error in volts -> modulator control voltage), solved exactly together with the power stage,
  followed by a trailing-edge PWM comparator with ramp ``1/Fm``;
* :class:`DigitalController`: a per-cycle difference equation (sensed error in volts -> duty),
  sampled once per switching period with a computation delay, in float64, float32 or
  bit-exact fixed point, with optional ADC and DPWM quantisation and duty limits.

Both carry the divider ``H`` and the reference ``v_ref``: the error is
``e = v_ref - H v_sense`` with ``v_sense`` the sensed output: ``v_out`` (plus the injected signal
when the loop gain is measured) for the buck and the boost, ``-v_out`` for the inverting
buck-boost, whose error amplifier senses the inverted output (an inverted divider or a
difference amplifier). The simulator takes that sign from the topology
(:func:`loopwright.simulate._circuit.sense_sign`), as the design flow builds the inverting
stage's loop from ``-Gvd``; ``H``, ``v_ref`` and the compensator are the same either way.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import scipy.linalg
import scipy.signal

from ..errors import DesignError

__all__ = [
    "AnalogController",
    "DigitalController",
    "ControllerModel",
]


def _finite_positive(value: Any, key: str, *, upper: float | None = None) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError) as err:
        raise DesignError(f"must be a number, got {value!r}", key=key) from err
    if not (math.isfinite(v) and v > 0 and (upper is None or v < upper)):
        rng = f"(0, {upper:g})" if upper is not None else "(0, inf)"
        raise DesignError(f"must be in {rng}, got {value!r}", key=key)
    return v


def _duty_pair(lo: Any, hi: Any) -> tuple[float, float]:
    try:
        lo_f, hi_f = float(lo), float(hi)
    except (TypeError, ValueError) as err:
        raise DesignError(
            f"duty limits must be numbers, got {lo!r}, {hi!r}", key="duty_max"
        ) from err
    if not (0.0 <= lo_f < hi_f <= 1.0):
        raise DesignError(
            f"need 0 <= duty_min < duty_max <= 1, got {lo_f:g} and {hi_f:g}", key="duty_max"
        )
    return lo_f, hi_f


@dataclass(frozen=True, eq=False)
class AnalogController:
    """Continuous compensator with a trailing-edge PWM modulator.

    Attributes
    ----------
    a, b, c, d : numpy.ndarray
        State space of ``Gc(s)`` from the sensed error ``e = v_ref - H v_sense`` [V] (``v_sense``
        is ``v_out``, or ``-v_out`` for the inverting stage) to the control voltage [V]; shapes
        (m, m), (m, 1), (1, m), (1, 1). ``m = 0`` is a pure gain.
    modulator_gain : float
        ``Fm = 1/ramp``: duty per volt of control voltage. [1/V]
    sense_gain : float
        Divider ``H``. [-]
    v_ref : float
        Reference. [V]
    duty_max : float
        Largest duty the PWM delivers (clock-derived limit). [-]
    pwm : {"natural", "sampled"}
        ``"natural"``: the switch turns off at the first instant the control voltage meets the
        ramp ``t/(Fm Ts)`` (exact trailing-edge intersection on the exact solution);
        ``"sampled"``: the duty is ``Fm`` times the control voltage at the start of the period,
        held for the period (uniformly sampled modulator).
    rail_clamp : bool
        Emulate the error amplifier's output rails at 0 V and ``1/Fm``: at the start of a
        period where the control voltage lies beyond a rail, the integrator state is moved
        along the integrator's mode so that it sits on the rail (anti-windup while the duty is
        saturated, e.g. during soft start). Inactive in regulation.

    References
    ----------
    .. [1] R. W. Erickson and D. Maksimovic, *Fundamentals of Power Electronics*, 2nd ed.,
       Kluwer, 2001, sec. 7.3 (pulse-width modulator gain ``1/VM``).
    """

    a: np.ndarray
    b: np.ndarray
    c: np.ndarray
    d: np.ndarray
    modulator_gain: float
    sense_gain: float
    v_ref: float
    duty_max: float = 0.95
    pwm: Literal["natural", "sampled"] = "natural"
    rail_clamp: bool = True

    def __post_init__(self) -> None:
        a = np.atleast_2d(np.asarray(self.a, dtype=float))
        m = 0 if a.size == 0 else a.shape[0]
        a = a.reshape(m, m)
        b = np.asarray(self.b, dtype=float).reshape(m, 1)
        c = np.asarray(self.c, dtype=float).reshape(1, m)
        d = np.asarray(self.d, dtype=float).reshape(1, 1)
        for name, arr in (("a", a), ("b", b), ("c", c), ("d", d)):
            if not np.all(np.isfinite(arr)):
                raise DesignError("controller matrices must be finite", key=f"controller.{name}")
        if m:
            a, b, c = _balance(a, b, c)
        for name, arr in (("a", a), ("b", b), ("c", c), ("d", d)):
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)
        object.__setattr__(
            self, "modulator_gain", _finite_positive(self.modulator_gain, "modulator.ramp")
        )
        object.__setattr__(self, "sense_gain", _finite_positive(self.sense_gain, "feedback.vref"))
        object.__setattr__(self, "v_ref", _finite_positive(self.v_ref, "feedback.vref"))
        _duty_pair(0.0, self.duty_max)
        if self.pwm not in ("natural", "sampled"):
            raise DesignError(f"must be 'natural' or 'sampled', got {self.pwm!r}", key="pwm")

    @classmethod
    def from_transfer_function(
        cls, num: Any, den: Any, *, modulator_gain: float, sense_gain: float, v_ref: float, **kw
    ) -> AnalogController:
        """Build from ``Gc(s) = num(s)/den(s)`` (highest power first, proper).

        Raises
        ------
        DesignError
            Improper or non-finite coefficients.
        """
        num = np.trim_zeros(np.atleast_1d(np.asarray(num, dtype=float)), "f")
        den = np.trim_zeros(np.atleast_1d(np.asarray(den, dtype=float)), "f")
        if den.size == 0 or num.size > den.size:
            raise DesignError(
                f"Gc(s) must be proper (deg num {num.size - 1} <= deg den {den.size - 1})",
                key="compensator.num",
            )
        a, b, c, d = scipy.signal.tf2ss(num, den)
        return cls(a, b, c, d, modulator_gain, sense_gain, v_ref, **kw)

    @classmethod
    def from_compensator(
        cls, compensator: Any, *, modulator_gain: float, sense_gain: float, v_ref: float, **kw
    ) -> AnalogController:
        """Build from an object with ``statespace() -> (A, B, C, D)`` (or ``num``/``den``)."""
        if hasattr(compensator, "statespace"):
            a, b, c, d = compensator.statespace()
            return cls(a, b, c, d, modulator_gain, sense_gain, v_ref, **kw)
        return cls.from_transfer_function(
            compensator.num,
            compensator.den,
            modulator_gain=modulator_gain,
            sense_gain=sense_gain,
            v_ref=v_ref,
            **kw,
        )

    @property
    def order(self) -> int:
        """Number of controller states."""
        return int(self.a.shape[0])

    def freqresp(self, omega: Any) -> np.ndarray:
        """``Gc(j omega)`` [V/V] at angular frequencies ``omega`` [rad/s]."""
        s = 1j * np.atleast_1d(np.asarray(omega, dtype=float))
        m = self.order
        out = np.empty(s.shape, dtype=complex)
        for i, si in enumerate(s):
            if m:
                out[i] = (self.c @ np.linalg.solve(si * np.eye(m) - self.a, self.b))[0, 0]
            else:
                out[i] = 0.0
            out[i] += self.d[0, 0]
        return out

    def integrator_mode(self) -> np.ndarray | None:
        """Right eigenvector of ``a`` for the eigenvalue at 0 (None without an integrator)."""
        if self.order == 0:
            return None
        w, v = np.linalg.eig(self.a)
        i = int(np.argmin(np.abs(w)))
        scale = max(1.0, float(np.max(np.abs(w))))
        if abs(w[i]) > 1e-9 * scale:
            return None
        vec = np.real(v[:, i])
        gain = float((self.c @ vec)[0])
        if gain == 0.0:
            return None
        return vec / gain  # moves the output by one volt


def _balance(a: np.ndarray, b: np.ndarray, c: np.ndarray):
    """Diagonal similarity ``T^-1 a T, T^-1 b, c T`` that balances ``[[a, b], [c, 0]]``.

    The transfer function is unchanged; the entries become comparable in size, which keeps the
    matrix exponential's norm (and so its table) small. Powers of two only: exact.
    """
    m = a.shape[0]
    big = np.zeros((m + 1, m + 1))
    big[:m, :m] = a
    big[:m, m:] = b
    big[m:, :m] = c
    _, (scale, _) = scipy.linalg.matrix_balance(big, permute=False, separate=True)
    t = scale[:m] / scale[m]
    return a * (1.0 / t)[:, None] * t[None, :], b / t[:, None], c * t[None, :]


class _FloatStep:
    """Direct-form-I difference equation in float64 or float32 with output clamp."""

    def __init__(self, b: np.ndarray, a: np.ndarray, lo: float, hi: float, dtype: Any) -> None:
        self.t = np.dtype(dtype).type
        t = self.t
        n = max(len(a), len(b)) - 1
        self.b = [t(v) for v in b] + [t(0)] * (n + 1 - len(b))
        self.a = [t(v) for v in a] + [t(0)] * (n + 1 - len(a))
        self.n = n
        self.lo, self.hi = t(lo), t(hi)
        self.eh = [t(0)] * (n + 1)
        self.uh = [t(0)] * max(n, 1)

    def __call__(self, e: float) -> float:
        t = self.t
        self.eh = [t(e), *self.eh[:-1]]
        acc = t(0)
        for i in range(self.n + 1):
            acc = t(acc + t(self.b[i] * self.eh[i]))
        for i in range(1, self.n + 1):
            acc = t(acc - t(self.a[i] * self.uh[i - 1]))
        if acc > self.hi:
            acc = self.hi
        elif acc < self.lo:
            acc = self.lo
        if self.n:
            self.uh = [acc, *self.uh[:-1]]
        return float(acc)


class _FixedStep:
    """Bit-exact integer difference equation (direct form I, round half up, anti-windup).

    Same arithmetic as :func:`loopwright.discrete.run_fixed_point`, one sample per call.
    """

    def __init__(self, fx: Any) -> None:
        self.b = [int(v) for v in fx.b_int]
        self.a = [int(v) for v in fx.a_int]
        n = max(len(self.a), len(self.b)) - 1
        self.b += [0] * (n + 1 - len(self.b))
        self.a += [0] * (n + 1 - len(self.a))
        self.n = n
        self.shift = int(fx.shift)
        self.h = int(fx.history_frac_bits)
        self.s = int(fx.signal_frac_bits)
        self.lim = None if fx.input_limit is None else int(fx.input_limit)
        self.lo = None if fx.u_min_int is None else int(fx.u_min_int)
        self.hi = None if fx.u_max_int is None else int(fx.u_max_int)
        self.eh = [0] * (n + 1)
        self.uh = [0] * max(n, 1)

    @staticmethod
    def _rs(x: int, shift: int) -> int:
        return int(x) if shift <= 0 else (int(x) + (1 << (shift - 1))) >> shift

    def __call__(self, e: float) -> float:
        ek = math.floor(e * 2.0**self.s + 0.5)
        if self.lim is not None:
            ek = max(-self.lim, min(self.lim, ek))
        self.eh = [ek, *self.eh[:-1]]
        acc_b = sum(bi * ei for bi, ei in zip(self.b, self.eh, strict=True))
        acc_a = sum(ai * ui for ai, ui in zip(self.a[1:], self.uh, strict=False))
        uhk = self._rs(acc_b * (1 << self.h) - acc_a, self.shift)
        u = self._rs(uhk, self.h)
        if self.hi is not None and u > self.hi:
            u = self.hi
            uhk = u << self.h
        elif self.lo is not None and u < self.lo:
            u = self.lo
            uhk = u << self.h
        if self.n:
            self.uh = [uhk, *self.uh[:-1]]
        return u / 2.0**self.s


@dataclass(frozen=True, eq=False)
class DigitalController:
    """Per-cycle digital controller: sampled error -> duty, with delay and limits.

    The output is sampled once per switching period (sample rate = switching frequency).
    The duty computed from the sample taken at ``t_j - (delay_samples - 0.5) Ts`` is applied in
    period ``j`` (the 0.5 of ``delay_samples`` is the PWM hold, as in the design file's
    ``[digital] delay``); a whole computation delay of one sample means "sample at the start of
    a period, update at the start of the next".

    Attributes
    ----------
    b, a : numpy.ndarray
        Difference equation ``u[n] = sum b[k] e[n-k] - sum_{k>=1} a[k] u[n-k]`` (``a[0] = 1``),
        error [V] to duty [-]; it approximates ``Fm Gc(s)``.
    sense_gain : float
        Divider ``H``. [-]
    v_ref : float
        Reference. [V]
    delay_samples : float
        Total delay in samples including the 0.5-sample PWM hold, >= 0.5. [samples]
    duty_min, duty_max : float
        Output clamp (anti-windup: the clamped value is stored in the history). [-]
    arithmetic : {"float64", "float32", "fixed"}
        How the difference equation is computed; ``"fixed"`` needs ``fixed_point``.
    fixed_point : object, optional
        Integer coefficients and rules (``loopwright.discrete.FixedPointCoefficients``).
    adc_bits, adc_full_scale_v : int, float, optional
        ADC of the sensed voltage ``H v_sense`` (``v_sense = -v_out`` for the inverting stage):
        round to ``full_scale/2^bits``, clip to ``[0, full_scale]``. [bit], [V]
    pwm_counts : int, optional
        DPWM resolution: the duty is rounded to ``1/pwm_counts``.
    step_factory : callable, optional
        ``() -> step`` returning a fresh stateful ``step(error_volts) -> duty``; overrides
        the built-in difference equation (``b``/``a`` still give the model response).

    References
    ----------
    .. [1] L. Corradini, D. Maksimovic, P. Mattavelli, R. Zane, *Digital Control of
       High-Frequency Switched-Mode Power Converters*, Wiley-IEEE Press, 2015 (sampling,
       computation delay, DPWM).
    .. [2] A. V. Peterchev, S. R. Sanders, "Quantization resolution and limit cycling in
       digitally controlled PWM converters," IEEE Trans. Power Electron. 18(1):301-308, 2003.
    """

    b: np.ndarray
    a: np.ndarray
    sense_gain: float
    v_ref: float
    delay_samples: float = 1.5
    duty_min: float = 0.0
    duty_max: float = 0.95
    arithmetic: Literal["float64", "float32", "fixed"] = "float64"
    fixed_point: Any = None
    adc_bits: int | None = None
    adc_full_scale_v: float | None = None
    pwm_counts: int | None = None
    step_factory: Callable[[], Callable[[float], float]] | None = None

    def __post_init__(self) -> None:
        b = np.atleast_1d(np.asarray(self.b, dtype=float))
        a = np.atleast_1d(np.asarray(self.a, dtype=float))
        if a.ndim != 1 or a.size == 0 or a[0] == 0 or not np.all(np.isfinite(a)):
            raise DesignError("a must be finite with a[0] != 0", key="controller.a")
        if b.ndim != 1 or not np.all(np.isfinite(b)):
            raise DesignError("b must be a finite 1-D list", key="controller.b")
        b, a = b / a[0], a / a[0]
        for name, arr in (("b", b), ("a", a)):
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)
        object.__setattr__(self, "sense_gain", _finite_positive(self.sense_gain, "feedback.vref"))
        object.__setattr__(self, "v_ref", _finite_positive(self.v_ref, "feedback.vref"))
        delay = float(self.delay_samples)
        if not (0.5 <= delay <= 10.5) or not math.isfinite(delay):
            raise DesignError(
                f"must be in [0.5, 10.5] samples (0.5 is the PWM hold alone), got {delay:g}",
                key="digital.delay",
            )
        object.__setattr__(self, "delay_samples", delay)
        _duty_pair(self.duty_min, self.duty_max)
        if self.arithmetic not in ("float64", "float32", "fixed"):
            raise DesignError(
                f"must be float64, float32 or fixed, got {self.arithmetic!r}", key="digital.format"
            )
        if self.arithmetic == "fixed" and self.fixed_point is None:
            raise DesignError(
                "fixed arithmetic needs fixed_point coefficients", key="digital.format"
            )
        if (self.adc_bits is None) != (self.adc_full_scale_v is None):
            raise DesignError("give adc_bits and adc_full_scale together", key="digital.adc_bits")
        if self.adc_bits is not None and not (1 <= int(self.adc_bits) <= 32):
            raise DesignError(f"must be in [1, 32], got {self.adc_bits!r}", key="digital.adc_bits")
        if self.pwm_counts is not None and int(self.pwm_counts) < 2:
            raise DesignError(f"must be >= 2, got {self.pwm_counts!r}", key="digital.pwm_counts")

    @classmethod
    def from_design(
        cls, design: Any, *, v_ref: float, sense_gain: float | None = None, quantised: bool = True
    ) -> DigitalController:
        """Build from a :class:`loopwright.discrete.DigitalDesign` (its options and coefficients).

        With ``quantised`` and a Q15/Q31 format the bit-exact integer arithmetic is used; with
        float32 the float32 arithmetic; otherwise float64.
        """
        opt = design.options
        fx = design.fixed_point if quantised else None
        if fx is not None:
            arithmetic, b, a = "fixed", fx.b_q, fx.a_q
        elif quantised and opt.number_format == "float32":
            arithmetic, b, a = "float32", design.controller.b, design.controller.a
        else:
            arithmetic, b, a = "float64", design.controller.b, design.controller.a
        return cls(
            b=b,
            a=a,
            sense_gain=design.sense_gain if sense_gain is None else sense_gain,
            v_ref=v_ref,
            delay_samples=opt.delay_samples,
            duty_min=opt.duty_min,
            duty_max=opt.duty_max,
            arithmetic=arithmetic,
            fixed_point=fx,
            adc_bits=opt.adc_bits,
            adc_full_scale_v=opt.adc_full_scale_v,
            pwm_counts=opt.pwm_counts,
        )

    @property
    def computation_delay(self) -> float:
        """Sampling instant to duty update, ``delay_samples - 0.5``. [samples]"""
        return self.delay_samples - 0.5

    def new_step(self) -> Callable[[float], float]:
        """A fresh stateful ``step(error_volts) -> duty`` (zero history)."""
        if self.step_factory is not None:
            return self.step_factory()
        if self.arithmetic == "fixed":
            return _FixedStep(self.fixed_point)
        dtype = np.float32 if self.arithmetic == "float32" else np.float64
        return _FloatStep(self.b, self.a, self.duty_min, self.duty_max, dtype)

    def sense(self, v_sense: float) -> float:
        """Error fed to the difference equation for a sensed output ``v_sense`` [V].

        ``v_sense`` is the output voltage in the stage's own polarity (``-v_out`` for the
        inverting stage); the simulator applies that sign before calling.
        """
        x = self.sense_gain * v_sense
        if self.adc_bits is not None:
            lsb = float(self.adc_full_scale_v) / 2 ** int(self.adc_bits)
            x = min(max(math.floor(x / lsb + 0.5), 0), 2 ** int(self.adc_bits) - 1) * lsb
        return self.v_ref - x

    def actuate(self, u: float) -> float:
        """Duty delivered by the DPWM for a command ``u``: limits, then resolution."""
        u = min(max(u, self.duty_min), self.duty_max)
        if self.pwm_counts is not None:
            u = math.floor(u * int(self.pwm_counts) + 0.5) / int(self.pwm_counts)
        return u

    def duty_lsb(self) -> float:
        """Smallest duty step of the implementation (0 for float64 without DPWM)."""
        steps = [0.0]
        if self.pwm_counts is not None:
            steps.append(1.0 / int(self.pwm_counts))
        if self.arithmetic == "fixed":
            steps.append(2.0 ** -int(self.fixed_point.signal_frac_bits))
        if self.arithmetic == "float32":
            steps.append(2.0**-24)
        return max(steps)

    def freqresp(self, omega: Any, t_s: float) -> np.ndarray:
        """``Gc(e^{j omega t_s})`` of the difference equation [duty/V]."""
        x = np.exp(-1j * np.atleast_1d(np.asarray(omega, dtype=float)) * t_s)
        num = np.polynomial.polynomial.polyval(x, self.b)
        den = np.polynomial.polynomial.polyval(x, self.a)
        return num / den


ControllerModel = AnalogController | DigitalController
