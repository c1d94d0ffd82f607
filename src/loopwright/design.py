"""From a design file to a proven loop: synthesis, loop proof over corners, realisation.

The loop is voltage mode, ``T(s) = Gc(s) Fm Gvd(s) H`` with ``Fm = 1/ramp`` and
``H = vref/|vout|``. The pieces stay separate python-control systems (:meth:`LoopModel`), so a
digital or current-mode modulator can later replace ``Fm``. The inverting buck-boost has a
negative ``Gvd(0)``; its error amplifier senses the inverted output, so the loop is negative
feedback with ``|H|`` and the sign absorbed (``T`` is built from ``-Gvd``).

Stability is decided from the closed-loop poles at every corner; the margins come second.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from .compensators import Compensator
from .compensators.kfactor import (
    InfeasibleSynthesisError,
    max_k_factor_crossover_hz,
    synthesize_k_factor,
)
from .compensators.placement import crossover_ceiling, synthesize_resonance
from .errors import DesignError, DesignWarning
from .loop import LoopAnalysis, analyze_loops, plant_freqresp
from .plant import CornerPlant, PlantAnalysis, analyze_plant
from .quantities import format_eng
from .spec import DesignSpec

__all__ = ["LoopModel", "CornerResult", "DesignResult", "design", "loop_model", "PM_HEADROOM_DEG"]

#: Phase-margin headroom added in synthesis so a design that lands on its target does not fail
#: its own check on floating-point noise. [deg]
PM_HEADROOM_DEG = 0.5
#: Tolerance of the pass/fail comparison against the targets. [deg] / [dB]
CHECK_TOL = 1e-6
#: Re-synthesis rounds used to make the nominal design hold at every corner.
MAX_ROBUST_STEPS = 12
#: Highest phase margin the nominal synthesis may aim at while making corners hold. [deg]
MAX_DESIGN_PM_DEG = 120.0

KINDS = ("type1", "type2", "type3")


@dataclass(frozen=True)
class LoopModel:
    """The pieces of one corner's loop as python-control systems.

    Attributes
    ----------
    gvd : control.StateSpace
        Power stage, duty to output, sign-corrected (``-Gvd`` for the inverting stage).
    fm : float
        Modulator gain ``1/ramp``. [1/V]
    h : float
        Divider ratio ``vref/|vout|``.
    compensator : Compensator
    delay_s : float
        Loop delay (digital control), 0 for analog. [s]
    """

    gvd: object
    fm: float
    h: float
    compensator: Compensator
    delay_s: float = 0.0

    def loop_gain(self):
        """``T(s) = Gc Fm Gvd H`` as a python-control system (delay as order-6 Pade)."""
        import control

        t = self.compensator.to_control() * self.fm * self.gvd * self.h
        if self.delay_s > 0:
            num, den = control.pade(self.delay_s, 6)
            t = t * control.tf(num, den)
        return t

    def to_control(self):
        """Alias of :meth:`loop_gain`."""
        return self.loop_gain()


@dataclass(frozen=True)
class CornerResult:
    """Loop figures at one corner.

    Attributes
    ----------
    name : str
    v_in, i_out : float
        Line [V] and load [A].
    analysis : LoopAnalysis or None
        None where the CCM model does not hold (DCM corner).
    meets_targets : bool
    failures : tuple of str
        Which targets fail, by how much.
    analysis_rounded : LoopAnalysis or None
        The same loop with the standard-value parts.
    """

    name: str
    v_in: float
    i_out: float
    analysis: LoopAnalysis | None
    meets_targets: bool
    failures: tuple[str, ...] = ()
    analysis_rounded: LoopAnalysis | None = None
    meets_targets_rounded: bool | None = None
    sampled: dict | None = None

    def to_dict(self) -> dict:
        a = self.analysis
        d = {
            "name": self.name,
            "vin": self.v_in,
            "iout": self.i_out,
            "crossover_hz": a.crossover_hz if a else None,
            "phase_margin_deg": a.phase_margin_deg if a else None,
            "gain_margin_db": a.gain_margin_db if a else None,
            "delay_margin_s": a.margins.delay_margin_s if a else None,
            "closed_loop_stable": a.closed_loop_stable if a else None,
            "meets_targets": self.meets_targets,
            "failures": list(self.failures),
        }
        if a:
            d["gain_crossovers_hz"] = list(a.margins.gain_crossovers_hz)
            d["phase_crossovers_hz"] = list(a.margins.phase_crossovers_hz)
            d["gain_reduction_margin_db"] = a.margins.gain_reduction_margin_db
            d["conditionally_stable"] = a.margins.conditionally_stable
        if self.analysis_rounded is not None:
            r = self.analysis_rounded
            d["rounded"] = _loop_dict(r)
            d["meets_targets_rounded"] = self.meets_targets_rounded
        if self.sampled is not None:
            d["sampled"] = dict(self.sampled)
        return d


def _loop_dict(a: LoopAnalysis | None) -> dict | None:
    if a is None:
        return None
    m = a.margins
    return {
        "crossover_hz": m.crossover_hz,
        "phase_margin_deg": m.phase_margin_deg,
        "gain_margin_db": m.gain_margin_db,
        "delay_margin_s": m.delay_margin_s,
        "closed_loop_stable": a.closed_loop_stable,
        "gain_crossovers_hz": list(m.gain_crossovers_hz),
        "phase_crossovers_hz": list(m.phase_crossovers_hz),
        "phase_margins_deg": list(m.phase_margins_deg),
        "gain_reduction_margin_db": m.gain_reduction_margin_db,
        "conditionally_stable": m.conditionally_stable,
        "closed_loop_poles_hz": [
            [p.real / (2 * math.pi), p.imag / (2 * math.pi)] for p in a.closed_loop_poles
        ],
    }


@dataclass(frozen=True)
class DesignResult:
    """Everything ``loopwright design`` reports.

    Attributes
    ----------
    spec : DesignSpec
    plant : PlantAnalysis
    compensator : Compensator or None
        None when no compensator could be synthesised (see ``warnings``).
    f_c_hz : float
        Crossover the synthesis aimed at. [Hz]
    crossover_reason : str
        Why this crossover (given, or which limit set it).
    nominal : CornerResult
    corners : tuple of CornerResult
    realization : object or None
        :class:`loopwright.realization.Realization` when ``[realization]`` asks for parts.
    digital : object or None
        :class:`loopwright.discrete.DigitalDesign` when ``[digital]`` is present.
    meets_targets : bool
        Every corner (nominal included) closed-loop stable and within the targets.
    warnings : tuple of str
    """

    spec: DesignSpec
    plant: PlantAnalysis
    compensator: Compensator | None
    f_c_hz: float
    crossover_reason: str
    nominal: CornerResult
    corners: tuple[CornerResult, ...]
    realization: object | None = None
    compensator_rounded: Compensator | None = None
    digital: object | None = None
    meets_targets: bool = False
    warnings: tuple[str, ...] = ()
    tried: tuple[str, ...] = field(default=())

    @property
    def delay_s(self) -> float:
        d = self.spec.digital
        return d.delay_samples / d.sample_rate_hz if d else 0.0

    def loop_model(self, corner: str = "nominal") -> LoopModel:
        """The loop pieces at a named corner, as python-control systems."""
        for cp in (self.plant.nominal, *self.plant.corners):
            if cp.corner.name == corner and cp.model is not None:
                return loop_model(self.spec, cp, self.compensator, delay_s=self.delay_s)
        raise DesignError(f"no valid corner named {corner!r}", key="corner")

    def failing_corners(self) -> list[CornerResult]:
        return [c for c in (self.nominal, *self.corners) if not c.meets_targets]

    def to_dict(self) -> dict:
        comp = self.compensator
        out: dict = {
            "name": self.spec.name,
            "topology": self.spec.power_stage.topology,
            "targets": {
                "crossover_hz": self.f_c_hz,
                "crossover_reason": self.crossover_reason,
                "phase_margin_deg": self.spec.target.phase_margin_deg,
                "gain_margin_db": self.spec.target.gain_margin_db,
                "compensator": self.spec.target.compensator,
                "strategy": self.spec.target.strategy,
            },
            "compensator": None,
            "realization": None,
            "loop": _loop_dict(self.nominal.analysis),
            "loop_rounded": _loop_dict(self.nominal.analysis_rounded),
            "corners": [c.to_dict() for c in (self.nominal, *self.corners)],
            "meets_targets": self.meets_targets,
            "warnings": list(self.warnings),
        }
        if comp is not None:
            out["compensator"] = {
                "type": comp.kind,
                "strategy": comp.strategy,
                "zeros_hz": [-f for f in comp.zeros_hz],
                "poles_hz": [0.0] + [-f for f in comp.poles_hz],
                "k": comp.k,
                "w_i": comp.w_i,
                "num": list(map(float, comp.num)),
                "den": list(map(float, comp.den)),
                "zero_corners_hz": list(comp.zeros_hz),
                "pole_corners_hz": list(comp.poles_hz),
            }
        if self.realization is not None:
            r = self.realization
            out["realization"] = {
                "kind": r.network,
                "type": r.kind,
                "series": r.series_r,
                "capacitor_series": r.series_c,
                "sense_gain": r.h,
                "components": dict(r.components),
                "ideal_components": dict(r.ideal_components),
            }
        if self.digital is not None:
            from .export.json_export import digital_dict

            out["digital"] = digital_dict(self.digital)
        return out


# ----------------------------------------------------------------------------- helpers
def _plant_batch(spec: DesignSpec, cps: list[CornerPlant]):
    """Stacked ``P = Fm H sign Gvd`` of the given corners: ``a (k,n,n), b (k,n), c, d``."""
    g = spec.modulator_gain * spec.sense_gain
    sign = -1.0 if spec.power_stage.topology == "buck-boost" else 1.0
    a = np.stack([cp.model.a for cp in cps])
    b = np.stack([sign * g * cp.model.b[:, 0] for cp in cps])
    c = np.stack([cp.model.c[0] for cp in cps])
    d = np.array([sign * g * cp.model.d[0, 0] for cp in cps])
    return a, b, c, d


def loop_model(spec: DesignSpec, cp: CornerPlant, comp: Compensator, *, delay_s=0.0) -> LoopModel:
    """Loop pieces of one corner (see :class:`LoopModel`)."""
    sign = -1.0 if spec.power_stage.topology == "buck-boost" else 1.0
    return LoopModel(
        gvd=sign * cp.model.gvd(),
        fm=spec.modulator_gain,
        h=spec.sense_gain,
        compensator=comp,
        delay_s=delay_s,
    )


def _response_fn(spec, cp: CornerPlant, delay_s: float) -> Callable[[np.ndarray], np.ndarray]:
    a, b, c, d = _plant_batch(spec, [cp])

    def resp(omega):
        r = plant_freqresp(a, b, c, d, np.asarray(omega, dtype=float))[0]
        if delay_s:
            r = r * np.exp(-1j * np.asarray(omega) * delay_s)
        return r

    return resp


def _judge(spec: DesignSpec, a: LoopAnalysis) -> tuple[bool, list[str]]:
    """Pass/fail of one loop against the targets (closed-loop poles first)."""
    t = spec.target
    fails = []
    if not a.closed_loop_stable:
        rhp = [p for p in a.closed_loop_poles if p.real >= 0]
        fails.append(
            f"closed loop UNSTABLE: {len(rhp)} pole(s) in the right half plane"
            + (f" (e.g. {format_eng(abs(rhp[0]) / (2 * math.pi), 'Hz')})" if rhp else "")
        )
        return False, fails
    m = a.margins
    if not math.isfinite(m.phase_margin_deg):
        fails.append("no gain crossover found")
    elif m.phase_margin_deg < t.phase_margin_deg - CHECK_TOL:
        fails.append(
            f"phase margin {m.phase_margin_deg:.2f} deg < {t.phase_margin_deg:g} deg "
            f"(short by {t.phase_margin_deg - m.phase_margin_deg:.2f} deg)"
        )
    if m.gain_margin_db < t.gain_margin_db - CHECK_TOL:
        fails.append(
            f"gain margin {m.gain_margin_db:.2f} dB < {t.gain_margin_db:g} dB "
            f"(short by {t.gain_margin_db - m.gain_margin_db:.2f} dB)"
        )
    grm = m.gain_reduction_margin_db
    if grm is not None and grm < t.gain_margin_db - CHECK_TOL:
        fails.append(
            f"conditionally stable: a gain reduction of {grm:.2f} dB makes it unstable "
            f"(< {t.gain_margin_db:g} dB)"
        )
    return not fails, fails


def _choose_crossover(spec: DesignSpec, plant: PlantAnalysis, kind_hint: str, delay_s: float):
    """Crossover frequency and the reason for it."""
    t = spec.target
    ps = spec.power_stage
    f_rhp = plant.lowest_rhp_zero_hz()
    if t.crossover_hz is not None:
        notes = []
        if t.crossover_hz > ps.f_sw * t.max_crossover_fraction * 1.0000001:
            notes.append(
                f"crossover {format_eng(t.crossover_hz, 'Hz')} is above "
                f"{t.max_crossover_fraction:g} fsw: the averaged model loses accuracy"
            )
        if f_rhp and t.crossover_hz > f_rhp * t.rhp_zero_fraction:
            notes.append(
                f"crossover {format_eng(t.crossover_hz, 'Hz')} is above "
                f"{t.rhp_zero_fraction:.3g} x the lowest RHP zero ({format_eng(f_rhp, 'Hz')})"
            )
        return t.crossover_hz, "given in the design file", notes
    frac = t.max_crossover_fraction
    if delay_s > 0:
        # a sampled loop loses 360 fc Td degrees: cross at most at fs/20 (common practice)
        frac = min(frac, 0.05)
    ceiling = crossover_ceiling(
        ps.f_sw,
        f_rhp_hz=f_rhp,
        sw_divisor=1.0 / frac,
        rhp_divisor=1.0 / t.rhp_zero_fraction,
    )
    fc = ceiling.f_c_max_hz
    if ceiling.limited_by == "rhp-zero":
        reason = (
            f"{t.rhp_zero_fraction:.3g} x the lowest RHP zero over the corners "
            f"({format_eng(f_rhp, 'Hz')})"
        )
    else:
        reason = f"{frac:g} x fsw ({format_eng(ps.f_sw, 'Hz')})" + (
            " (sampled loop: the delay costs 360 fc Td degrees)" if delay_s > 0 else ""
        )
    # where the phase-margin target is reachable with the most capable type allowed
    kind = "type3" if kind_hint == "auto" else kind_hint
    worst = plant.valid_corners()
    f_reach = []
    for cp in worst:
        f_max = max_k_factor_crossover_hz(
            _response_fn(spec, cp, delay_s),
            t.phase_margin_deg + PM_HEADROOM_DEG,
            kind,
            ps.f_sw / 1e4,
            fc,
        )
        f_reach.append(0.0 if f_max is None else f_max)
    reach = min(f_reach) if f_reach else fc
    if reach < fc:
        fc = 0.97 * reach
        reason = (
            f"highest crossover at which a {kind} reaches {t.phase_margin_deg:g} deg at every "
            f"corner (below {reason})"
        )
    return fc, reason, []


def _passes(r: CornerResult) -> bool:
    """The corner meets the targets with ideal parts and, where realised, rounded parts."""
    return r.meets_targets and r.meets_targets_rounded is not False


def _score(results: list[CornerResult]) -> tuple:
    """Order candidate designs: more corners passing, then more stable, then higher worst PM."""
    passing = sum(_passes(r) for r in results)
    stable = sum(bool(r.analysis and r.analysis.closed_loop_stable) for r in results)
    pms = [
        r.analysis.phase_margin_deg
        for r in results
        if r.analysis is not None and math.isfinite(r.analysis.phase_margin_deg)
    ]
    return passing, stable, min(pms, default=-math.inf)


def _synthesize(
    spec, plant: PlantAnalysis, kind: str, fc: float, delay_s: float, pm_extra: float = 0.0
) -> Compensator:
    t = spec.target
    nominal = plant.nominal
    if nominal.model is None:
        raise DesignError(
            "the nominal point is in discontinuous conduction; the CCM loop design does not "
            "apply (raise the nominal load or use a synchronous rectifier)",
            key="power_stage.iout",
        )
    resp = _response_fn(spec, nominal, delay_s)
    p_fc = complex(resp(np.array([2 * math.pi * fc]))[0])
    if t.strategy == "resonance" and kind == "type3":
        f = nominal.model.features()
        return synthesize_resonance(
            p_fc,
            fc,
            f.f0_hz,
            spec.power_stage.f_sw,
            f_esr_hz=f.esr_zero_hz,
            f_rhp_hz=plant.lowest_rhp_zero_hz(),
        )
    # continuous plant phase at fc, unwrapped from low frequency
    f_grid = np.geomspace(fc / 1e4, fc, 2001)
    ph = np.degrees(np.unwrap(np.angle(resp(2 * math.pi * f_grid))))
    return synthesize_k_factor(
        p_fc,
        fc,
        t.phase_margin_deg + PM_HEADROOM_DEG + pm_extra,
        kind,
        plant_phase_deg=float(ph[-1]),
        plant_response=resp,
    )


def _analyze(spec, cps: list[CornerPlant], comp: Compensator, delay_s: float):
    a, b, c, d = _plant_batch(spec, cps)
    f_sw = spec.power_stage.f_sw
    return analyze_loops(a, b, c, d, comp, delay_s=delay_s, f_min_hz=f_sw * 1e-5, f_max_hz=f_sw * 2)


def _corner_results(spec, plant, comp, delay_s, comp_rounded=None) -> list[CornerResult]:
    allc = [plant.nominal, *plant.corners]
    valid = [cp for cp in allc if cp.model is not None]
    analyses = dict(
        zip((id(cp) for cp in valid), _analyze(spec, valid, comp, delay_s), strict=True)
    )
    rounded = {}
    if comp_rounded is not None:
        rounded = dict(
            zip((id(cp) for cp in valid), _analyze(spec, valid, comp_rounded, delay_s), strict=True)
        )
    out = []
    for cp in allc:
        a = analyses.get(id(cp))
        if a is None:
            out.append(
                CornerResult(
                    cp.corner.name,
                    cp.corner.v_in,
                    cp.corner.i_out,
                    None,
                    False,
                    ("discontinuous conduction: not proven (CCM model does not hold)",),
                )
            )
            continue
        ok, fails = _judge(spec, a)
        ar = rounded.get(id(cp))
        okr = _judge(spec, ar)[0] if ar is not None else None
        out.append(
            CornerResult(
                cp.corner.name, cp.corner.v_in, cp.corner.i_out, a, ok, tuple(fails), ar, okr
            )
        )
    return out


# ----------------------------------------------------------------------------- entry point
def design(spec: DesignSpec, *, progress: Callable[[str], None] | None = None) -> DesignResult:
    """Synthesise, prove and realise the loop of a design.

    Parameters
    ----------
    spec : DesignSpec
        Validated design file (:func:`loopwright.spec.load_design`).
    progress : callable, optional
        Called with a short text at each stage.

    Returns
    -------
    DesignResult
        Never raises for an infeasible target: the result says which target fails, by how
        much, and what would work (``warnings``, per-corner ``failures``).

    References
    ----------
    .. [1] H. D. Venable, "The K factor: a new mathematical tool for stability analysis and
       synthesis," Proc. Powercon 10, 1983.
    .. [2] R. W. Erickson and D. Maksimovic, Fundamentals of Power Electronics, 2nd ed.,
       Kluwer, 2001, ch. 9.
    """
    say = progress or (lambda s: None)
    notes: list[str] = []
    say("averaging the power stage at every corner")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        plant = analyze_plant(spec)
    notes.extend(plant.warnings)
    t = spec.target
    d = spec.digital
    delay_s = d.delay_samples / d.sample_rate_hz if d else 0.0
    fc, reason, fc_notes = _choose_crossover(spec, plant, t.compensator, delay_s)
    notes.extend(fc_notes)
    kinds = KINDS if t.compensator == "auto" else (t.compensator,)
    chosen: tuple | None = None
    tried: list[str] = []
    first_fail: tuple | None = None
    fc0 = fc
    realizing = spec.realization is not None and spec.realization.kind != "none"
    # voltage mode: do not push the crossover down onto the LC resonance (common practice)
    f0s = [cp.model.features().f0_hz or 0.0 for cp in plant.valid_corners()]
    f_floor = 2.0 * max(f0s, default=0.0)
    for kind in kinds:
        pm_extra, fc_k = 0.0, fc0
        cand = best = None
        for _ in range(MAX_ROBUST_STEPS):
            say(f"synthesising {kind} at {format_eng(fc_k, 'Hz')}")
            try:
                with warnings.catch_warnings(record=True) as wrec:
                    warnings.simplefilter("always")
                    comp = _synthesize(spec, plant, kind, fc_k, delay_s, pm_extra)
            except InfeasibleSynthesisError as err:
                if t.crossover_hz is None and fc_k > fc0 / 20:
                    fc_k *= 0.8  # the corners need more phase than this type gives here
                    continue
                tried.append(f"{kind}: {err}")
                break
            say(f"proving {kind} at {len(plant.corners) + 1} corners")
            comp_r = None
            if realizing:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    comp_r = _realize(spec, comp)[1]
            results = _corner_results(spec, plant, comp, delay_s, comp_r)
            cand = (comp, results, [str(w.message) for w in wrec], fc_k, pm_extra)
            if best is None or _score(results) > _score(best[1]):
                best = cand
            if all(_passes(r) for r in results):
                break
            # robustness: aim the nominal design higher by the worst corner's shortfall, and
            # (crossover "auto") lower the crossover when a gain margin is short
            loops = [a for r in results for a in (r.analysis, r.analysis_rounded) if a is not None]
            short_pm = max(
                (
                    t.phase_margin_deg - a.phase_margin_deg
                    for a in loops
                    if a.closed_loop_stable and math.isfinite(a.phase_margin_deg)
                ),
                default=0.0,
            )
            short_gm = any(a.gain_margin_db < t.gain_margin_db for a in loops)
            unstable = any(not a.closed_loop_stable for a in loops)
            if short_pm > 0:
                pm_extra += short_pm + PM_HEADROOM_DEG
            capped = t.phase_margin_deg + PM_HEADROOM_DEG + pm_extra > MAX_DESIGN_PM_DEG
            if capped:
                pm_extra = MAX_DESIGN_PM_DEG - t.phase_margin_deg - PM_HEADROOM_DEG
            if (short_gm or unstable or capped or short_pm <= 0) and t.crossover_hz is None:
                fc_k *= 0.85
                if fc_k < f_floor:
                    break  # below this the loop would cross near the LC resonance
            elif short_pm <= 0:
                break
        if best is None:
            continue
        cand = best
        ok = all(_passes(r) for r in cand[1])
        tried.append(
            f"{kind}: "
            + ("meets every corner" if ok else "fails at some corner")
            + (
                f" (synthesised for {t.phase_margin_deg + PM_HEADROOM_DEG + cand[4]:.1f} deg at "
                f"nominal, crossover {format_eng(cand[3], 'Hz')})"
            )
        )
        if ok:
            chosen = cand
            break
        if first_fail is None or kind == kinds[-1]:
            first_fail = cand
    if chosen is None and first_fail is not None:
        chosen = first_fail
    if chosen is None:
        notes.extend(tried)
        nominal = CornerResult(
            "nominal", spec.power_stage.v_in, spec.power_stage.i_out, None, False, tuple(tried)
        )
        return DesignResult(
            spec,
            plant,
            None,
            fc,
            reason,
            nominal,
            (),
            meets_targets=False,
            warnings=tuple(notes),
            tried=tuple(tried),
        )
    comp, results, syn_notes, fc_used, _ = chosen
    if fc_used != fc:
        reason = (
            f"{reason}; lowered to {format_eng(fc_used, 'Hz')} so every corner keeps its margins"
        )
        fc = fc_used
    notes.extend(syn_notes)
    if len(kinds) > 1 or not all(r.meets_targets for r in results):
        notes.extend(x for x in tried if "meets" not in x)
    realization = comp_rounded = None
    rs = spec.realization
    if rs is not None and rs.kind != "none":
        say("realising the compensator in standard parts")
        realization, comp_rounded, rnotes = _realize(spec, comp)
        notes.extend(rnotes)
        results = _corner_results(spec, plant, comp, delay_s, comp_rounded)
        for r in results:
            if r.meets_targets_rounded is False and r.meets_targets:
                notes.append(
                    f"{r.name}: meets the targets with ideal parts but not with rounded parts"
                )
    digital = None
    if d is not None:
        say("discretising the controller")
        digital, dnotes = _digital(spec, plant, comp, fc)
        notes.extend(dnotes)
        say(f"proving the sampled loop at {len(results)} corners")
        results = _sampled_corners(spec, plant, digital, results)
    meets = all(r.meets_targets for r in results)
    for r in results:
        if r.analysis is not None and r.analysis.margins.conditionally_stable:
            grm = r.analysis.margins.gain_reduction_margin_db
            notes.append(
                f"{r.name}: conditionally stable (phase crosses -180 deg below crossover where "
                f"|T| > 1; gain-reduction margin {grm:.1f} dB)"
            )
    return DesignResult(
        spec=spec,
        plant=plant,
        compensator=comp,
        f_c_hz=fc,
        crossover_reason=reason,
        nominal=results[0],
        corners=tuple(results[1:]),
        realization=realization,
        compensator_rounded=comp_rounded,
        digital=digital,
        meets_targets=meets,
        warnings=tuple(dict.fromkeys(notes)),
        tried=tuple(tried),
    )


def _realize(spec: DesignSpec, comp: Compensator):
    from . import realization as rz

    rs = spec.realization
    notes: list[str] = []
    with warnings.catch_warnings(record=True) as wrec:
        warnings.simplefilter("always")
        ideal = rz.realize(comp, spec.sense_gain, network=rs.kind, r1=rs.r1, gm=rs.gm)
        real = ideal.rounded(series_r=rs.series, series_c=rs.capacitor_series)
    notes.extend(str(w.message) for w in wrec if issubclass(w.category, DesignWarning))
    return real, real.compensator(), notes


def _digital(spec: DesignSpec, plant: PlantAnalysis, comp: Compensator, fc: float):
    from .discrete import DigitalOptions, design_digital

    d = spec.digital
    cp = plant.nominal
    sign = -1.0 if spec.power_stage.topology == "buck-boost" else 1.0
    a, b, c, dd = cp.model.path("v_out", "d", sign=sign)
    opts = DigitalOptions(
        sample_rate_hz=d.sample_rate_hz,
        method=d.method,
        number_format=d.number_format,
        **d.hardware(),
    )
    with warnings.catch_warnings(record=True) as wrec:
        warnings.simplefilter("always")
        dig = design_digital(
            comp.num,
            comp.den,
            (a, b.reshape(-1, 1), c.reshape(1, -1), np.array([[dd]])),
            modulator_gain=spec.modulator_gain,
            sense_gain=spec.sense_gain,
            options=opts,
            f_c_hz=fc,
        )
    return dig, [str(w.message) for w in wrec]


def _sampled_corners(spec: DesignSpec, plant: PlantAnalysis, dig, results):
    """Prove the sampled loop (quantised coefficients, ZOH plant, computation delay) at every
    corner: stability from the closed-loop poles of the z-domain loop, then the margins."""
    from dataclasses import replace

    from .discrete import SampledLoop, sample_plant
    from .margins import find_margins

    d = spec.digital
    fs = d.sample_rate_hz
    t_s = 1.0 / fs
    sign = -1.0 if spec.power_stage.topology == "buck-boost" else 1.0
    ctl = dig.quantisation.controller
    by_name = {cp.corner.name: cp for cp in (plant.nominal, *plant.corners)}
    t = spec.target
    out = []
    for r in results:
        cp = by_name.get(r.name)
        if cp is None or cp.model is None:
            out.append(r)
            continue
        a, b, c, dd = cp.model.path("v_out", "d", sign=sign)
        pz = sample_plant(
            (a, b.reshape(-1, 1), c.reshape(1, -1), np.array([[dd]])),
            t_s,
            dig.options.computation_delay_samples,
        )
        loop = SampledLoop(ctl, pz, spec.sense_gain)
        stable = bool(loop.closed_loop_stable())
        m = find_margins(loop.freqresp, 1e-4 * min(dig.f_c_hz, fs), 0.4999 * fs)
        fails = []
        if not stable:
            fails.append(
                "sampled loop UNSTABLE (z-domain closed-loop poles outside the unit circle)"
            )
        else:
            if not m.phase_margin_deg >= t.phase_margin_deg - CHECK_TOL:
                fails.append(
                    f"sampled loop phase margin {m.phase_margin_deg:.2f} deg < "
                    f"{t.phase_margin_deg:g} deg"
                )
            if not m.gain_margin_db >= t.gain_margin_db - CHECK_TOL:
                fails.append(
                    f"sampled loop gain margin {m.gain_margin_db:.2f} dB < {t.gain_margin_db:g} dB"
                )
        sampled = {
            "crossover_hz": m.crossover_hz,
            "phase_margin_deg": m.phase_margin_deg,
            "gain_margin_db": m.gain_margin_db,
            "closed_loop_stable": stable,
            "meets_targets": not fails,
        }
        out.append(
            replace(
                r,
                sampled=sampled,
                meets_targets=r.meets_targets and not fails,
                failures=tuple(r.failures) + tuple(fails),
            )
        )
    return out
