"""Venable's K-factor synthesis of type I, II and III compensators.

Given the plant ``P(j wc)`` at the chosen crossover (modulator gain x power stage x sensing,
with any delay), the K factor places the compensator's zeros and poles geometrically symmetric
about ``fc`` so that the loop has ``|T(j wc)| = 1`` and exactly the requested phase margin.

Practical limits on the boost (this module's choice, documented in :data:`BOOST_LIMIT_DEG`):
the boost of type II tends to 90 deg and that of type III to 180 deg only as ``K`` grows
without bound, spreading the zeros and poles over an ever wider band. The synthesis refuses
boosts above 80 deg for type II (``K <= tan 85 deg = 11.4``, pole/zero ratio 131) and above
160 deg for type III (``K <= tan^2 85 deg = 131``, poles/zeros 11.4x above/below fc). Type I
provides no boost: it meets a phase-margin target only if the plant alone leaves enough phase.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from loopwright.compensators.base import ZERO_POLE_COUNT, Compensator, CompensatorKind
from loopwright.errors import DesignError

__all__ = [
    "BOOST_LIMIT_DEG",
    "InfeasibleSynthesisError",
    "KFactorDesign",
    "SynthesisIssue",
    "boost_from_k",
    "check_k_factor",
    "k_factor",
    "k_factor_design",
    "max_k_factor_crossover_hz",
    "plant_phase_deg",
    "required_boost_deg",
    "synthesize_k_factor",
]

#: Largest phase boost [deg] the K-factor synthesis accepts per compensator type.
BOOST_LIMIT_DEG: dict[str, float] = {"type1": 0.0, "type2": 80.0, "type3": 160.0}

_TYPE_NAME = {"type1": "type I", "type2": "type II", "type3": "type III"}
_BOOST_EPS_DEG = 1e-9


@dataclass(frozen=True)
class SynthesisIssue:
    """Why a requested synthesis cannot be done, and what would work.

    Attributes
    ----------
    kind : str
        Requested compensator type.
    f_c_hz : float
        Requested crossover. [Hz]
    boost_needed_deg : float
        Phase boost the target requires, ``PM - phase(P) - 90``. [deg]
    boost_limit_deg : float
        Largest boost this type is allowed to give (:data:`BOOST_LIMIT_DEG`). [deg]
    message : str
        One-sentence explanation with the suggested remedy.
    suggested_kind : str or None
        A compensator type that can meet the target at ``f_c_hz``, if any.
    max_crossover_hz : float or None
        Highest crossover at which the requested type still meets the phase margin (only
        when the plant response was supplied and such a frequency exists). [Hz]
    """

    kind: str
    f_c_hz: float
    boost_needed_deg: float
    boost_limit_deg: float
    message: str
    suggested_kind: str | None = None
    max_crossover_hz: float | None = None


class InfeasibleSynthesisError(DesignError):
    """The requested compensator cannot meet the target; ``.issue`` holds the details."""

    def __init__(self, issue: SynthesisIssue):
        self.issue = issue
        super().__init__(issue.message, key="compensator")


@dataclass(frozen=True)
class KFactorDesign:
    """Result of a K-factor synthesis.

    Attributes
    ----------
    compensator : Compensator
        The synthesised ``Gc(s)`` (``strategy="k-factor"``).
    k : float
        Venable's K factor (1 for type I).
    boost_deg : float
        Phase boost of the compensator over a pure integrator at fc. [deg]
    gain : float
        Required compensator gain at fc, ``G = 1/|P(j wc)|``. [-]
    plant_magnitude : float
        ``|P(j wc)|``. [-]
    plant_phase_deg : float
        Phase of ``P(j wc)`` used (unwrapped lag). [deg]
    f_c_hz : float
        Crossover. [Hz]
    phase_margin_deg : float
        Phase margin the loop has at fc with this compensator (the target, except for type I,
        where it is ``90 + plant_phase_deg``). [deg]
    """

    compensator: Compensator
    k: float
    boost_deg: float
    gain: float
    plant_magnitude: float
    plant_phase_deg: float
    f_c_hz: float
    phase_margin_deg: float


def _check_kind(kind: str) -> None:
    if kind not in ZERO_POLE_COUNT:
        raise DesignError(f"must be one of {sorted(ZERO_POLE_COUNT)}, got {kind!r}", key="kind")


def _finite(value: float, key: str, low: float | None = None, high: float | None = None):
    try:
        v = float(value)
    except (TypeError, ValueError) as err:
        raise DesignError(f"must be a number, got {value!r}", key=key) from err
    if not math.isfinite(v) or (low is not None and v <= low) or (high is not None and v >= high):
        lo = "-inf" if low is None else f"{low:g}"
        hi = "inf" if high is None else f"{high:g}"
        raise DesignError(f"must be finite and in ({lo}, {hi}), got {value!r}", key=key)
    return v


def _fmt_hz(f: float) -> str:
    for scale, unit in ((1e6, "MHz"), (1e3, "kHz"), (1.0, "Hz")):
        if abs(f) >= scale:
            return f"{f / scale:.3g} {unit}"
    return f"{f:.3g} Hz"


def k_factor(boost_deg: float, kind: CompensatorKind) -> float:
    """Venable's K factor for a phase boost.

    Parameters
    ----------
    boost_deg : float
        Phase boost over the integrator's -90 deg at crossover. [deg]
    kind : {"type1", "type2", "type3"}
        Compensator type.

    Returns
    -------
    float
        ``K``: 1 for type I (which has no boost); ``tan(B/2 + 45 deg)`` for type II;
        ``tan(B/4 + 45 deg)^2`` for type III.

    Raises
    ------
    DesignError
        Boost outside what the type can give at all (type I: 0; type II: (-90, 90) deg;
        type III: (-180, 180) deg).

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis", Proc. Powercon 10, San Diego, 1983 (formulas recalled, not re-read).

    Examples
    --------
    >>> round(k_factor(37.9113, "type2"), 5)
    2.04628
    """
    _check_kind(kind)
    b = _finite(boost_deg, "boost_deg")
    if kind == "type1":
        if abs(b) > _BOOST_EPS_DEG:
            raise DesignError(f"type I gives no boost (must be 0 deg), got {b!r}", key="boost_deg")
        return 1.0
    if kind == "type2":
        if not -90.0 < b < 90.0:
            raise DesignError(f"must be in (-90, 90) deg for type II, got {b!r}", key="boost_deg")
        return math.tan(math.radians(b / 2.0 + 45.0))
    if not -180.0 < b < 180.0:
        raise DesignError(f"must be in (-180, 180) deg for type III, got {b!r}", key="boost_deg")
    return math.tan(math.radians(b / 4.0 + 45.0)) ** 2


def boost_from_k(k: float, kind: CompensatorKind) -> float:
    """Phase boost [deg] of a K-factor compensator: the inverse of :func:`k_factor`.

    Type I: 0; type II: ``2 atan K - 90``; type III: ``4 atan sqrt(K) - 180``.

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis", Proc. Powercon 10, San Diego, 1983 (formulas recalled, not re-read).
    """
    _check_kind(kind)
    kv = _finite(k, "k", low=0.0)
    if kind == "type1":
        return 0.0
    if kind == "type2":
        return math.degrees(2.0 * math.atan(kv)) - 90.0
    return math.degrees(4.0 * math.atan(math.sqrt(kv))) - 180.0


def plant_phase_deg(plant_at_fc: complex) -> float:
    """Phase of a plant value read as a lag: in (-360, 0] deg.

    A plant at crossover lags (low-pass LC, delay, right-half-plane zero), so the wrapped angle
    ``+173 deg`` is read as ``-187 deg``. Pass the unwrapped phase explicitly where a plant
    leads.

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis", Proc. Powercon 10, San Diego, 1983 (step 2 of the procedure: the plant
       phase is taken unwrapped; recalled, not re-read).
    """
    ph = math.degrees(np.angle(complex(plant_at_fc)))
    return ph - 360.0 if ph > 0.0 else ph


def required_boost_deg(
    plant_at_fc: complex, phase_margin_deg: float, *, plant_phase_deg: float | None = None
) -> float:
    """Phase boost the compensator must add at fc: ``B = PM - phase(P) - 90`` [deg].

    Parameters
    ----------
    plant_at_fc : complex
        ``P(j wc)`` (modulator, power stage, sensing, delay).
    phase_margin_deg : float
        Target phase margin. [deg]
    plant_phase_deg : float, optional
        Unwrapped plant phase at fc; default: the angle of ``plant_at_fc`` read as a lag
        (see :func:`plant_phase_deg`). [deg]

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis", Proc. Powercon 10, San Diego, 1983 (procedure recalled, not re-read).
    """
    pm = _finite(phase_margin_deg, "phase_margin_deg", low=0.0, high=180.0)
    phi = _plant_phase(plant_at_fc, plant_phase_deg)
    return pm - phi - 90.0


def _plant_phase(plant_at_fc: complex, plant_phase: float | None) -> float:
    p = complex(plant_at_fc)
    if not (math.isfinite(p.real) and math.isfinite(p.imag)) or p == 0:
        raise DesignError(f"must be finite and non-zero, got {plant_at_fc!r}", key="plant_at_fc")
    if plant_phase is None:
        return plant_phase_deg(p)
    phi = _finite(plant_phase, "plant_phase_deg")
    wrapped = math.degrees(np.angle(p))
    if abs(math.remainder(phi - wrapped, 360.0)) > 1e-6:
        raise DesignError(
            f"{phi!r} deg does not match the angle of plant_at_fc ({wrapped:.6g} deg mod 360)",
            key="plant_phase_deg",
        )
    return phi


def check_k_factor(
    plant_at_fc: complex,
    f_c_hz: float,
    phase_margin_deg: float,
    kind: CompensatorKind,
    *,
    plant_phase_deg: float | None = None,
    plant_response: Callable[[np.ndarray], np.ndarray] | None = None,
    f_min_hz: float | None = None,
) -> SynthesisIssue | None:
    """Whether a K-factor synthesis can meet the target; ``None`` when it can.

    Parameters
    ----------
    plant_at_fc, f_c_hz, phase_margin_deg, kind, plant_phase_deg
        As in :func:`k_factor_design`.
    plant_response : callable, optional
        ``P(j omega)`` for a 1-D ``omega`` [rad/s]; when given, an infeasible request also
        reports the highest crossover the type can reach (:func:`max_k_factor_crossover_hz`).
    f_min_hz : float, optional
        Lower end of that search (default ``f_c_hz / 1000``). [Hz]

    Returns
    -------
    SynthesisIssue or None

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis", Proc. Powercon 10, San Diego, 1983 (procedure recalled, not re-read).
    """
    _check_kind(kind)
    fc = _finite(f_c_hz, "f_c_hz", low=0.0)
    pm = _finite(phase_margin_deg, "phase_margin_deg", low=0.0, high=180.0)
    boost = required_boost_deg(plant_at_fc, pm, plant_phase_deg=plant_phase_deg)
    limit = BOOST_LIMIT_DEG[kind]
    name = _TYPE_NAME[kind]
    if kind == "type1":
        if boost <= _BOOST_EPS_DEG:
            return None
    elif 0.0 < boost <= limit:
        return None

    if kind != "type1" and boost <= 0.0:
        achieved = pm - boost
        msg = (
            f"{name} needs a positive phase boost, but the target needs {boost:.4g} deg at "
            f"{_fmt_hz(fc)}: use type I (phase margin {achieved:.4g} deg there) or a higher "
            f"crossover"
        )
        return SynthesisIssue(kind, fc, boost, limit, msg, "type1", None)

    better = next(
        (
            k
            for k in ("type2", "type3")
            if BOOST_LIMIT_DEG[k] > limit and 0 < boost <= BOOST_LIMIT_DEG[k]
        ),
        None,
    )
    f_max = None
    if plant_response is not None:
        lo = fc / 1000.0 if f_min_hz is None else _finite(f_min_hz, "f_min_hz", low=0.0)
        f_max = max_k_factor_crossover_hz(plant_response, pm, kind, lo, fc)
    gives = "no boost" if kind == "type1" else f"at most {limit:g} deg of boost"
    remedies = []
    if better is not None:
        remedies.append(f"use {_TYPE_NAME[better]}")
    if f_max is not None:
        remedies.append(f"a crossover below {_fmt_hz(f_max)}")
    elif plant_response is None:
        remedies.append("a lower crossover")
    else:
        remedies.append("a lower phase-margin target (no crossover in range works)")
    msg = f"{name} gives {gives} (needs {boost:.4g} deg at {_fmt_hz(fc)}); " + " or ".join(remedies)
    return SynthesisIssue(kind, fc, boost, limit, msg, better, f_max)


def k_factor_design(
    plant_at_fc: complex,
    f_c_hz: float,
    phase_margin_deg: float,
    kind: CompensatorKind,
    *,
    plant_phase_deg: float | None = None,
    plant_response: Callable[[np.ndarray], np.ndarray] | None = None,
) -> KFactorDesign:
    """K-factor synthesis with its intermediate figures.

    Parameters
    ----------
    plant_at_fc : complex
        ``P(j wc) = Fm Gvd(j wc) H`` including any delay (sign-corrected, so the loop closes
        as ``1/(1 + T)``). [-]
    f_c_hz : float
        Crossover frequency. [Hz]
    phase_margin_deg : float
        Target phase margin, in (0, 180). [deg]
    kind : {"type1", "type2", "type3"}
        Compensator type.
    plant_phase_deg : float, optional
        Unwrapped phase of ``plant_at_fc``; default reads its angle as a lag in (-360, 0].
    plant_response : callable, optional
        ``P(j omega)`` [rad/s -> complex], used only to state the highest feasible crossover
        when the request is infeasible.

    Returns
    -------
    KFactorDesign

    Raises
    ------
    InfeasibleSynthesisError
        The type cannot give the boost (``.issue`` says why and what would work).
    DesignError
        Invalid inputs.

    Notes
    -----
    Procedure [1]_ (METHODS sec. 4.1): ``G = 1/|P|``; ``B = PM - phase(P) - 90``; type II
    ``K = tan(B/2 + 45)``, zero at ``fc/K``, pole at ``K fc``; type III ``K = tan(B/4 + 45)^2``,
    double zero at ``fc/sqrt K``, double pole at ``fc sqrt K``; type I: ``K = 1``. The
    integrator gain is set from the exact compensator shape so that ``|Gc P| = 1`` at fc:
    ``w_i = wc G / |shape(j wc)|`` (equal to ``wc G / K`` for types II and III).

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis", Proc. Powercon 10, San Diego, 1983 (recalled, not re-read).
    """
    _check_kind(kind)
    fc = _finite(f_c_hz, "f_c_hz", low=0.0)
    pm = _finite(phase_margin_deg, "phase_margin_deg", low=0.0, high=180.0)
    phi = _plant_phase(plant_at_fc, plant_phase_deg)
    issue = check_k_factor(
        plant_at_fc, fc, pm, kind, plant_phase_deg=phi, plant_response=plant_response
    )
    if issue is not None:
        raise InfeasibleSynthesisError(issue)
    boost = pm - phi - 90.0
    wc = 2.0 * math.pi * fc
    mag = abs(complex(plant_at_fc))
    if kind == "type1":
        k = 1.0
        zeros: tuple[float, ...] = ()
        poles: tuple[float, ...] = ()
        boost = 0.0
    elif kind == "type2":
        k = k_factor(boost, kind)
        zeros, poles = (wc / k,), (wc * k,)
    else:
        k = k_factor(boost, kind)
        r = math.sqrt(k)
        zeros, poles = (wc / r, wc / r), (wc * r, wc * r)
    shape = Compensator(kind, 1.0, zeros, poles, strategy="k-factor", k=k).freqresp(wc)
    w_i = 1.0 / (mag * abs(shape))
    comp = Compensator(kind, w_i, zeros, poles, strategy="k-factor", k=k)
    achieved = pm if kind != "type1" else 90.0 + phi
    return KFactorDesign(comp, k, boost, 1.0 / mag, mag, phi, fc, achieved)


def synthesize_k_factor(
    plant_at_fc: complex,
    f_c_hz: float,
    phase_margin_deg: float,
    kind: CompensatorKind,
    *,
    plant_phase_deg: float | None = None,
    plant_response: Callable[[np.ndarray], np.ndarray] | None = None,
) -> Compensator:
    """Compensator with ``|T(j wc)| = 1`` and exactly the target phase margin (K factor).

    Parameters are those of :func:`k_factor_design`, which this wraps.

    Returns
    -------
    Compensator
        ``strategy="k-factor"``, ``k`` set.

    Raises
    ------
    InfeasibleSynthesisError
        E.g. "type II gives at most 80 deg of boost (needs 123.3 deg at 25 kHz); use type III
        or a crossover below 7.2 kHz".

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis", Proc. Powercon 10, San Diego, 1983 (recalled, not re-read).

    Examples
    --------
    >>> gc = synthesize_k_factor(0.133546 * np.exp(-1j * np.radians(67.9113)), 20e3, 60.0,
    ...                          "type2")
    >>> round(gc.k, 5), round(gc.zeros_hz[0], 1), round(gc.poles_hz[0], 1)
    (2.04628, 9773.8, 40925.6)
    """
    return k_factor_design(
        plant_at_fc,
        f_c_hz,
        phase_margin_deg,
        kind,
        plant_phase_deg=plant_phase_deg,
        plant_response=plant_response,
    ).compensator


def max_k_factor_crossover_hz(
    plant_response: Callable[[np.ndarray], np.ndarray],
    phase_margin_deg: float,
    kind: CompensatorKind,
    f_min_hz: float,
    f_max_hz: float,
    *,
    points_per_decade: float = 200,
) -> float | None:
    """Highest crossover in ``[f_min_hz, f_max_hz]`` at which a type still meets the PM.

    Parameters
    ----------
    plant_response : callable
        ``P(j omega)`` for a 1-D ``omega`` [rad/s], complex.
    phase_margin_deg : float
        Target phase margin. [deg]
    kind : {"type1", "type2", "type3"}
        Compensator type; its boost limit is :data:`BOOST_LIMIT_DEG`.
    f_min_hz, f_max_hz : float
        Search range. [Hz]
    points_per_decade : float, optional
        Grid density for bracketing; the boundary is refined on the exact response.

    Returns
    -------
    float or None
        The frequency where the required boost ``PM - phase(P) - 90`` rises through the limit
        (``f_max_hz`` if the limit holds up to the end of the range; ``None`` if it holds
        nowhere). [Hz]

    Notes
    -----
    The plant phase is unwrapped continuously from ``f_min_hz`` (where it is taken in
    (-180, 180]) along the grid and, inside the final bracket, onto the branch nearest the
    bracket's lower end. The root of ``B(f) - limit`` is refined with Brent's method.

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis", Proc. Powercon 10, San Diego, 1983 (recalled, not re-read).
    .. [2] R. P. Brent, *Algorithms for Minimization without Derivatives*, Prentice-Hall,
       1973, ch. 4.
    """
    from scipy.optimize import brentq

    _check_kind(kind)
    pm = _finite(phase_margin_deg, "phase_margin_deg", low=0.0, high=180.0)
    lo = _finite(f_min_hz, "f_min_hz", low=0.0)
    hi = _finite(f_max_hz, "f_max_hz", low=lo)
    if not (math.isfinite(points_per_decade) and points_per_decade >= 10):
        raise DesignError(f"must be >= 10, got {points_per_decade!r}", key="points_per_decade")
    limit = BOOST_LIMIT_DEG[kind]
    n = max(3, int(math.ceil(math.log10(hi / lo) * points_per_decade)) + 1)
    f = np.geomspace(lo, hi, n)
    with np.errstate(all="ignore"):
        p = np.asarray(plant_response(2.0 * math.pi * f), dtype=complex)
    phase = np.degrees(np.unwrap(np.angle(p)))
    excess = pm - phase - 90.0 - limit  # <= 0 where the type still meets the target
    ok = np.nonzero(excess <= 0.0)[0]
    if ok.size == 0:
        return None
    i = int(ok[-1])
    if i == n - 1:
        return float(hi)
    ref = phase[i]

    def g(logf: float) -> float:
        value = complex(
            np.asarray(plant_response(np.array([2.0 * math.pi * math.exp(logf)]))).ravel()[0]
        )
        ph = math.degrees(np.angle(value))
        ph += 360.0 * round((ref - ph) / 360.0)
        return pm - ph - 90.0 - limit

    root = brentq(g, math.log(f[i]), math.log(f[i + 1]), xtol=1e-14, rtol=1e-14)
    return float(math.exp(root))
