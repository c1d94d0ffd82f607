"""Step-down (buck) power stage."""

from __future__ import annotations

from .base import PowerStageParameters, SwitchedModel, lc_interval

__all__ = ["dcm_duty", "buck", "ideal_duty", "k_crit", "NAME"]

NAME = "buck"


def buck(p: PowerStageParameters) -> SwitchedModel:
    """Switched state equations of a buck stage, one set per switching interval.

    Parameters
    ----------
    p : PowerStageParameters
        Component values; ``r_on`` is the high-side switch, ``r_rect``/``v_f`` the low-side
        rectifier.

    Returns
    -------
    SwitchedModel
        ``on``: ``L di/dt = v_in - (r_dcr + r_on) i - v_out``;
        ``off``: ``L di/dt = -v_f - (r_dcr + r_rect) i - v_out``; the inductor feeds the
        output node in both intervals; the line delivers ``i_l`` only while the switch is on.

    References
    ----------
    .. [1] R. D. Middlebrook and S. Cuk, "A general unified approach to modelling
       switching-converter power stages," IEEE PESC Record, 1976.
    .. [2] R. W. Erickson and D. Maksimovic, Fundamentals of Power Electronics, 2nd ed.,
       Kluwer, 2001, ch. 7.
    """
    diode = p.rectifier == "diode"
    on = lc_interval(
        "on", p, k_in=1.0, k_out=-1.0, r_path=p.r_dcr + p.r_on, k_f=0.0, k_node=1.0, k_line=1.0
    )
    off = lc_interval(
        "off",
        p,
        k_in=0.0,
        k_out=-1.0,
        r_path=p.r_dcr + p.r_rect,
        k_f=1.0 if diode else 0.0,
        k_node=1.0,
        k_line=0.0,
    )
    idle = (
        lc_interval("idle", p, k_in=0, k_out=0, r_path=0, k_f=0, k_node=0, k_line=0)
        if diode
        else None
    )
    return SwitchedModel(NAME, on, off, idle, inverting=False)


def ideal_duty(v_in: float, v_out: float) -> float:
    """Ideal CCM duty cycle ``D = V/Vg`` (Erickson & Maksimovic, ch. 2)."""
    return abs(v_out) / v_in


def k_crit(duty: float) -> float:
    """CCM/DCM boundary ``Kcrit(D) = 1 - D`` (Erickson & Maksimovic, 2nd ed., sec. 5.1)."""
    return 1.0 - duty


def dcm_duty(m: float, k: float) -> float:
    """Duty cycle in DCM for conversion ratio ``m`` (ideal parts): ``D = M sqrt(K/(1-M))``
    (Erickson & Maksimovic, 2nd ed., Table 5.2)."""
    return m * (k / (1.0 - m)) ** 0.5
