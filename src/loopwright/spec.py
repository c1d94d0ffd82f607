"""Design files: TOML -> validated design objects and the corners to prove.

The schema is the public contract (``CONTRACT.md``). Every problem a user can make in a design
file -- a missing or unknown key, a wrong unit, a non-physical value, a conversion ratio the
topology cannot make -- raises :class:`~loopwright.errors.DesignError` naming the key (dotted,
e.g. ``power_stage.inductor.value``) and the allowed range.
"""

from __future__ import annotations

import itertools
import os
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path

from .errors import DesignError
from .quantities import format_eng, parse_quantity
from .topologies import TOPOLOGIES, PowerStageParameters

__all__ = [
    "PowerStage",
    "Target",
    "RealizationSpec",
    "DigitalSpec",
    "DesignSpec",
    "Corner",
    "load_design",
    "parse_design",
    "corners",
    "COMPENSATOR_KINDS",
    "STRATEGIES",
    "SERIES",
]

COMPENSATOR_KINDS = ("type1", "type2", "type3", "auto")
STRATEGIES = ("k-factor", "resonance")
SERIES = ("E6", "E12", "E24", "E48", "E96", "E192")
DIGITAL_METHODS = ("tustin", "zoh", "matched")
NUMBER_FORMATS = ("float32", "q15", "q31")


# ----------------------------------------------------------------------------- objects
@dataclass(frozen=True)
class PowerStage:
    """The power stage of a design, SI units.

    Attributes
    ----------
    topology : str
        ``buck``, ``boost`` or ``buck-boost`` (inverting).
    f_sw : float
        Switching frequency. [Hz]
    v_in : float
        Nominal line voltage. [V]
    v_in_range : tuple of float
        Line extremes (equal to ``(v_in, v_in)`` when not given). [V]
    v_out : float
        Output magnitude. [V]
    i_out : float
        Full-load current. [A]
    i_out_range : tuple of float
        Load extremes. [A]
    inductance, r_dcr, l_tolerance : float
        Inductor [H], winding resistance [ohm], relative tolerance.
    c_out, r_esr, c_tolerance : float
        Output capacitor [F], ESR [ohm], relative tolerance.
    r_on : float
        Main switch on-resistance. [ohm]
    rectifier : str
        ``synchronous`` or ``diode``.
    r_rect : float
        Rectifier on-resistance (synchronous) or series resistance (diode). [ohm]
    v_f : float
        Diode forward drop. [V]
    """

    topology: str
    f_sw: float
    v_in: float
    v_in_range: tuple[float, float]
    v_out: float
    i_out: float
    i_out_range: tuple[float, float]
    inductance: float
    r_dcr: float
    l_tolerance: float
    c_out: float
    r_esr: float
    c_tolerance: float
    r_on: float
    rectifier: str
    r_rect: float
    v_f: float

    def parameters(self, *, i_out: float, l_scale: float = 1.0, c_scale: float = 1.0):
        """:class:`PowerStageParameters` at a load current and component scale factors."""
        g = i_out / self.v_out if i_out > 0 else 0.0
        return PowerStageParameters(
            inductance=self.inductance * l_scale,
            c_out=self.c_out * c_scale,
            g_load=g,
            r_dcr=self.r_dcr,
            r_esr=self.r_esr,
            r_on=self.r_on,
            rectifier=self.rectifier,  # type: ignore[arg-type]
            r_rect=self.r_rect,
            v_f=self.v_f,
        )


@dataclass(frozen=True)
class Target:
    """Loop targets. ``crossover_hz`` is None for ``"auto"``."""

    crossover_hz: float | None
    phase_margin_deg: float
    gain_margin_db: float
    compensator: str
    strategy: str
    max_crossover_fraction: float
    rhp_zero_fraction: float


@dataclass(frozen=True)
class RealizationSpec:
    """How the compensator is built: op-amp, OTA or not at all."""

    kind: str
    series: str
    capacitor_series: str
    r1: float
    gm: float


@dataclass(frozen=True)
class DigitalSpec:
    """Digital controller options (``[digital]``), SI units."""

    sample_rate_hz: float
    delay_samples: float
    method: str
    number_format: str
    adc_bits: int | None = None
    adc_full_scale_v: float | None = None
    pwm_counts: int | None = None
    duty_min: float = 0.0
    duty_max: float = 0.95

    def hardware(self) -> dict:
        """Delay, duty limits and converter resolutions as keyword arguments (SI units)."""
        return {
            "delay_samples": self.delay_samples,
            "duty_min": self.duty_min,
            "duty_max": self.duty_max,
            "adc_bits": self.adc_bits,
            "adc_full_scale_v": self.adc_full_scale_v,
            "pwm_counts": self.pwm_counts,
        }


@dataclass(frozen=True)
class DesignSpec:
    """A whole design file, validated."""

    name: str
    power_stage: PowerStage
    ramp_v: float
    v_ref: float
    target: Target
    realization: RealizationSpec | None
    digital: DigitalSpec | None
    source_text: str = field(default="", repr=False, compare=False)
    source_path: str | None = None

    @property
    def sense_gain(self) -> float:
        """Divider ratio ``H = vref/|vout|``."""
        return self.v_ref / self.power_stage.v_out

    @property
    def modulator_gain(self) -> float:
        """PWM modulator gain ``Fm = 1/ramp`` [1/V]."""
        return 1.0 / self.ramp_v


@dataclass(frozen=True)
class Corner:
    """One operating corner: line, load and component scale factors, with a readable name."""

    name: str
    v_in: float
    i_out: float
    l_scale: float = 1.0
    c_scale: float = 1.0


# ----------------------------------------------------------------------------- reading
def load_design(path: str | os.PathLike) -> DesignSpec:
    """Read and validate a design file.

    Raises
    ------
    DesignError
        For a missing file, a directory, an empty file, bytes that are not UTF-8 TOML, or any
        schema problem; the message names the file or the key.
    """
    p = Path(path)
    where = str(path)
    if not p.exists():
        raise DesignError("no such file", key=where)
    if p.is_dir():
        raise DesignError("is a directory, expected a design file (.toml)", key=where)
    try:
        raw = p.read_bytes()
    except OSError as err:
        raise DesignError(f"cannot read: {err.strerror}", key=where) from err
    if not raw.strip():
        raise DesignError("the file is empty; start from `loopwright new buck`", key=where)
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as err:
        raise DesignError("is not a UTF-8 text file (TOML expected)", key=where) from err
    spec = parse_design(text, default_name=p.stem, where=where)
    return replace(spec, source_path=where)


def parse_design(text: str, *, default_name: str = "design", where: str = "design file"):
    """Validate the text of a design file; see :func:`load_design`."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise DesignError(f"not valid TOML: {err}", key=where) from err
    r = _Reader(data, "")
    name = r.text("name", default=default_name)
    if not name or any(c in name for c in "/\\\0") or name in (".", ".."):
        raise DesignError(
            f"{name!r} cannot name a folder; use letters, digits, - and _", key="name"
        )
    ps = _power_stage(r.table("power_stage", required=True))
    ramp = r.table("modulator", required=True).positive("ramp", "V", required=True, done=True)
    fb = r.table("feedback", required=True)
    vref = fb.positive("vref", "V", required=True, done=True)
    if vref >= ps.v_out:
        raise DesignError(
            f"{format_eng(vref, 'V')} must be below |vout| = {format_eng(ps.v_out, 'V')} "
            "(a resistive divider cannot gain)",
            key="feedback.vref",
        )
    target = _target(r.table("target", required=True), ps)
    real = r.table("realization", required=False)
    realization = _realization(real) if real is not None else None
    dig = r.table("digital", required=False)
    digital = _digital(dig, ps) if dig is not None else None
    r.finish()
    return DesignSpec(
        name=name,
        power_stage=ps,
        ramp_v=ramp,
        v_ref=vref,
        target=target,
        realization=realization,
        digital=digital,
        source_text=text,
    )


class _Reader:
    """Walks one TOML table, converting values and remembering which keys were used."""

    def __init__(self, data: dict, prefix: str):
        self.data = data
        self.prefix = prefix
        self.used: set[str] = set()

    def key(self, k: str) -> str:
        return f"{self.prefix}.{k}" if self.prefix else k

    def has(self, k: str) -> bool:
        return k in self.data

    def raw(self, k: str, required: bool = False):
        self.used.add(k)
        if k not in self.data:
            if required:
                import difflib

                near = difflib.get_close_matches(k, [str(x) for x in self.data], n=1)
                hint = f" (found {near[0]!r}: a typo?)" if near else ""
                raise DesignError(f"missing required key{hint}", key=self.key(k))
            return None
        return self.data[k]

    def table(self, k: str, required: bool) -> _Reader | None:
        v = self.raw(k, required)
        if v is None:
            return None
        if not isinstance(v, dict):
            raise DesignError(f"expected a table [{self.key(k)}], got a value", key=self.key(k))
        return _Reader(v, self.key(k))

    def text(self, k: str, default: str | None = None, choices=None, required=False) -> str:
        v = self.raw(k, required)
        if v is None:
            return default  # type: ignore[return-value]
        if not isinstance(v, str):
            raise DesignError(f"expected a string, got {v!r}", key=self.key(k))
        if choices is not None and v not in choices:
            raise DesignError(
                f"{v!r} is not one of {', '.join(repr(c) for c in choices)}", key=self.key(k)
            )
        return v

    def quantity(self, k, unit, *, required=False, default=None, done=False):
        v = self.raw(k, required)
        if done:
            self.finish()
        if v is None:
            return default
        return parse_quantity(v, unit, key=self.key(k))

    def positive(self, k, unit, *, required=False, default=None, done=False) -> float:
        v = self.quantity(k, unit, required=required, default=None, done=done)
        if v is None:
            return default
        if not v > 0:
            raise DesignError(
                f"must be > 0 {unit}, got {format_eng(v, unit)}".replace(" ,", ","),
                key=self.key(k),
            )
        return v

    def nonneg(self, k, unit, *, default=0.0) -> float:
        v = self.quantity(k, unit, default=None)
        if v is None:
            return default
        if v < 0:
            raise DesignError(f"must be >= 0 {unit}, got {format_eng(v, unit)}", key=self.key(k))
        return v

    def pair(self, k, unit) -> tuple[float, float] | None:
        v = self.raw(k)
        if v is None:
            return None
        if not isinstance(v, list) or len(v) != 2:
            raise DesignError(
                f"expected a list of two values [low, high], got {v!r}", key=self.key(k)
            )
        lo, hi = (parse_quantity(x, unit, key=f"{self.key(k)}[{i}]") for i, x in enumerate(v))
        if lo > hi:
            raise DesignError(
                f"low {format_eng(lo, unit)} is above high {format_eng(hi, unit)}",
                key=self.key(k),
            )
        return lo, hi

    def finish(self) -> None:
        unknown = sorted(set(self.data) - self.used)
        if unknown:
            allowed = ", ".join(sorted(self.used))
            raise DesignError(
                f"unknown key {unknown[0]!r} (allowed here: {allowed})", key=self.key(unknown[0])
            )


def _tolerance(r: _Reader, k: str = "tolerance") -> float:
    t = r.nonneg(k, "%", default=0.0)
    if t >= 1:
        raise DesignError(f"must be in [0 %, 100 %), got {100 * t:g} %", key=r.key(k))
    return t


def _power_stage(r: _Reader) -> PowerStage:
    topology = r.text("topology", required=True)
    if topology not in TOPOLOGIES:
        raise DesignError(
            f"unknown topology {topology!r}; allowed: {', '.join(TOPOLOGIES)}",
            key=r.key("topology"),
        )
    topo = TOPOLOGIES[topology]
    f_sw = r.positive("fsw", "Hz", required=True)
    v_in = r.positive("vin", "V", required=True)
    v_in_range = r.pair("vin_range", "V") or (v_in, v_in)
    if v_in_range[0] <= 0:
        raise DesignError("line voltages must be > 0 V", key=r.key("vin_range"))
    if not (v_in_range[0] <= v_in <= v_in_range[1]):
        raise DesignError(
            f"nominal vin {format_eng(v_in, 'V')} lies outside vin_range "
            f"[{format_eng(v_in_range[0], 'V')}, {format_eng(v_in_range[1], 'V')}]",
            key=r.key("vin_range"),
        )
    v_out_raw = r.quantity("vout", "V", required=True)
    if topo.inverting and v_out_raw < 0:
        v_out_raw = -v_out_raw  # the inverting stage may be written with its sign
    if not v_out_raw > 0:
        raise DesignError(f"must be > 0 V, got {format_eng(v_out_raw, 'V')}", key=r.key("vout"))
    v_out = v_out_raw
    # conversion ratio the topology can make, over the whole line range
    if not topo.steps_up and v_out >= v_in_range[0]:
        raise DesignError(
            f"a {topology} steps down: vout must be below the lowest vin "
            f"({format_eng(v_in_range[0], 'V')}), got {format_eng(v_out, 'V')}; allowed range "
            f"(0, {format_eng(v_in_range[0], 'V')})",
            key=r.key("vout"),
        )
    if not topo.steps_down and v_out <= v_in_range[1]:
        raise DesignError(
            f"a {topology} steps up: vout must be above the highest vin "
            f"({format_eng(v_in_range[1], 'V')}), got {format_eng(v_out, 'V')}",
            key=r.key("vout"),
        )
    has_i, has_r = r.has("iout"), r.has("rload")
    if has_i == has_r:
        raise DesignError(
            "give exactly one of iout (full-load current) or rload (load resistance)",
            key=r.key("iout"),
        )
    if has_i:
        i_out = r.positive("iout", "A")
        r.raw("rload")
    else:
        i_out = v_out / r.positive("rload", "ohm")
        r.raw("iout")
    i_out_range = r.pair("iout_range", "A") or (i_out, i_out)
    if i_out_range[0] < 0:
        raise DesignError("load currents must be >= 0 A", key=r.key("iout_range"))
    if not (i_out_range[0] <= i_out <= i_out_range[1] * (1 + 1e-12)):
        raise DesignError(
            f"full load {format_eng(i_out, 'A')} lies outside iout_range "
            f"[{format_eng(i_out_range[0], 'A')}, {format_eng(i_out_range[1], 'A')}]",
            key=r.key("iout_range"),
        )
    ind = r.table("inductor", required=True)
    inductance = ind.positive("value", "H", required=True)
    r_dcr = ind.nonneg("dcr", "ohm")
    l_tol = _tolerance(ind)
    ind.finish()
    cap = r.table("capacitor", required=True)
    c_out = cap.positive("value", "F", required=True)
    r_esr = cap.nonneg("esr", "ohm")
    c_tol = _tolerance(cap)
    cap.finish()
    sw = r.table("switch", required=False)
    r_on = 0.0
    if sw is not None:
        r_on = sw.nonneg("rds_on", "ohm")
        sw.finish()
    rect = r.table("rectifier", required=False)
    kind, r_rect, v_f = "synchronous", 0.0, 0.0
    if rect is not None:
        kind = rect.text("kind", default="synchronous", choices=("synchronous", "diode"))
        if kind == "synchronous":
            r_rect = rect.nonneg("rds_on", "ohm")
            for bad in ("vf", "rd"):
                if rect.has(bad):
                    raise DesignError(
                        f"only for kind = 'diode' (this rectifier is {kind!r})",
                        key=rect.key(bad),
                    )
        else:
            v_f = rect.nonneg("vf", "V")
            r_rect = rect.nonneg("rd", "ohm")
            if rect.has("rds_on"):
                raise DesignError(
                    "only for kind = 'synchronous'; a diode takes vf and rd",
                    key=rect.key("rds_on"),
                )
        rect.finish()
    r.finish()
    return PowerStage(
        topology=topology,
        f_sw=f_sw,
        v_in=v_in,
        v_in_range=v_in_range,
        v_out=v_out,
        i_out=i_out,
        i_out_range=i_out_range,
        inductance=inductance,
        r_dcr=r_dcr,
        l_tolerance=l_tol,
        c_out=c_out,
        r_esr=r_esr,
        c_tolerance=c_tol,
        r_on=r_on,
        rectifier=kind,
        r_rect=r_rect,
        v_f=v_f,
    )


def _target(r: _Reader, ps: PowerStage) -> Target:
    fc_raw = r.raw("crossover", required=True)
    if fc_raw == "auto":
        fc = None
    else:
        fc = parse_quantity(fc_raw, "Hz", key=r.key("crossover"))
        if not (0 < fc < ps.f_sw / 2):
            raise DesignError(
                f"must be 'auto' or in (0, fsw/2 = {format_eng(ps.f_sw / 2, 'Hz')}), "
                f"got {format_eng(fc, 'Hz')}",
                key=r.key("crossover"),
            )
    pm = r.quantity("phase_margin", "deg", required=True)
    if not (0 < pm < 120):
        raise DesignError(f"must be in (0, 120) deg, got {pm:g} deg", key=r.key("phase_margin"))
    gm = r.quantity("gain_margin", "dB", default=6.0)
    if not (0 <= gm <= 60):
        raise DesignError(f"must be in [0, 60] dB, got {gm:g} dB", key=r.key("gain_margin"))
    comp = r.text("compensator", default="auto", choices=COMPENSATOR_KINDS)
    strategy = r.text("strategy", default="k-factor", choices=STRATEGIES)
    frac = r.quantity("max_crossover_fraction", "", default=0.1)
    if not (0 < frac <= 0.4):
        raise DesignError(
            f"must be in (0, 0.4] (fraction of fsw), got {frac:g}",
            key=r.key("max_crossover_fraction"),
        )
    rhp = r.quantity("rhp_zero_fraction", "", default=1 / 3)
    if not (0 < rhp <= 1):
        raise DesignError(
            f"must be in (0, 1] (fraction of the lowest RHP zero), got {rhp:g}",
            key=r.key("rhp_zero_fraction"),
        )
    r.finish()
    return Target(fc, pm, gm, comp, strategy, frac, rhp)


def _realization(r: _Reader) -> RealizationSpec:
    kind = r.text("kind", default="op-amp", choices=("op-amp", "ota", "none"))
    series = r.text("series", default="E96", choices=SERIES)
    cseries = r.text("capacitor_series", default="E12", choices=SERIES)
    r1 = r.positive("r1", "ohm", default=10e3)
    gm = r.positive("gm", "S", default=1e-3)
    r.finish()
    return RealizationSpec(kind, series, cseries, r1, gm)


def _digital(r: _Reader, ps: PowerStage) -> DigitalSpec:
    fs = r.positive("sample_rate", "Hz", default=ps.f_sw)
    delay = r.quantity("delay", "", default=1.5)
    if not (0.5 <= delay <= 10):
        raise DesignError(
            f"must be in [0.5, 10] samples (the PWM hold alone is 0.5), got {delay:g}",
            key=r.key("delay"),
        )
    method = r.text("method", default="tustin", choices=DIGITAL_METHODS)
    fmt = r.text("format", default="q15", choices=NUMBER_FORMATS)

    def opt_int(k, lo, hi):
        v = r.raw(k)
        if v is None:
            return None
        if isinstance(v, bool) or not isinstance(v, int) or not (lo <= v <= hi):
            raise DesignError(f"must be an integer in [{lo}, {hi}], got {v!r}", key=r.key(k))
        return v

    adc_bits = opt_int("adc_bits", 4, 24)
    adc_fs = r.positive("adc_full_scale", "V", default=None)
    pwm_counts = opt_int("pwm_counts", 16, 1 << 24)
    dmin = r.quantity("duty_min", "", default=0.0)
    dmax = r.quantity("duty_max", "", default=0.95)
    if not (0 <= dmin < dmax <= 1):
        raise DesignError(
            f"need 0 <= duty_min < duty_max <= 1, got {dmin:g} and {dmax:g}",
            key=r.key("duty_max"),
        )
    r.finish()
    return DigitalSpec(fs, delay, method, fmt, adc_bits, adc_fs, pwm_counts, dmin, dmax)


# ----------------------------------------------------------------------------- corners
def _fmt_pct(x: float) -> str:
    return f"{x * 100:+g} %"


def corners(spec: DesignSpec) -> list[Corner]:
    """Nominal point first, then the cartesian set of line x load x tolerance extremes.

    Each corner has a readable name such as ``"vin 30 V, iout 0.3 A, L -20 %, C +20 %"``.
    Duplicate extremes (a range given as a single value) are collapsed.
    """
    ps = spec.power_stage
    out = [Corner("nominal", ps.v_in, ps.i_out)]
    vins = sorted(set(ps.v_in_range))
    iouts = sorted(set(ps.i_out_range))
    ls = sorted({1 - ps.l_tolerance, 1 + ps.l_tolerance})
    cs = sorted({1 - ps.c_tolerance, 1 + ps.c_tolerance})
    if len(vins) == 1 and len(iouts) == 1 and len(ls) == 1 and len(cs) == 1:
        if (vins[0], iouts[0]) == (ps.v_in, ps.i_out):
            return out
    for vin, iout, ls_, cs_ in itertools.product(vins, iouts, ls, cs):
        parts = [f"vin {format_eng(vin, 'V')}", f"iout {format_eng(iout, 'A')}"]
        if ps.l_tolerance:
            parts.append(f"L {_fmt_pct(ls_ - 1)}")
        if ps.c_tolerance:
            parts.append(f"C {_fmt_pct(cs_ - 1)}")
        out.append(Corner(", ".join(parts), vin, iout, ls_, cs_))
    return out
