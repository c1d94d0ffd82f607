"""Step-up (boost) power stage."""

from __future__ import annotations

from .base import PowerStageParameters, SwitchedModel, lc_interval

__all__ = ["dcm_duty", "boost", "ideal_duty", "k_crit", "NAME"]

NAME = "boost"


def boost(p: PowerStageParameters) -> SwitchedModel:
    """Switched state equations of a boost stage, one set per switching interval.

    Parameters
    ----------
    p : PowerStageParameters
        Component values; ``r_on`` is the low-side switch, ``r_rect``/``v_f`` the rectifier
        to the output.

    Returns
    -------
    SwitchedModel
        ``on``: ``L di/dt = v_in - (r_dcr + r_on) i`` (output node fed by the capacitor only);
        ``off``: ``L di/dt = v_in - v_f - (r_dcr + r_rect) i - v_out`` (inductor feeds the
        output). The line delivers ``i_l`` in both intervals.

    References
    ----------
    .. [1] R. D. Middlebrook and S. Cuk, "A general unified approach to modelling
       switching-converter power stages," IEEE PESC Record, 1976.
    .. [2] R. W. Erickson and D. Maksimovic, Fundamentals of Power Electronics, 2nd ed.,
       Kluwer, 2001, ch. 7.
    """
    diode = p.rectifier == "diode"
    on = lc_interval(
        "on", p, k_in=1.0, k_out=0.0, r_path=p.r_dcr + p.r_on, k_f=0.0, k_node=0.0, k_line=1.0
    )
    off = lc_interval(
        "off",
        p,
        k_in=1.0,
        k_out=-1.0,
        r_path=p.r_dcr + p.r_rect,
        k_f=1.0 if diode else 0.0,
        k_node=1.0,
        k_line=1.0,
    )
    idle = (
        lc_interval("idle", p, k_in=0, k_out=0, r_path=0, k_f=0, k_node=0, k_line=0)
        if diode
        else None
    )
    return SwitchedModel(NAME, on, off, idle, inverting=False)


def ideal_duty(v_in: float, v_out: float) -> float:
    """Ideal CCM duty cycle ``D = 1 - Vg/V`` (Erickson & Maksimovic, ch. 2)."""
    return 1.0 - v_in / abs(v_out)


def k_crit(duty: float) -> float:
    """CCM/DCM boundary ``Kcrit(D) = D (1 - D)^2`` (Erickson & Maksimovic, sec. 5.3)."""
    return duty * (1.0 - duty) ** 2


def dcm_duty(m: float, k: float) -> float:
    """Duty cycle in DCM for conversion ratio ``m`` (ideal parts): ``D = sqrt(K M (M-1))``
    (Erickson & Maksimovic, 2nd ed., Table 5.2)."""
    return (k * m * (m - 1.0)) ** 0.5
