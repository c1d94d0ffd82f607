"""Tests of loopwright.realization: networks, rounding, recomputed compensator, warnings.

External reference: circuit analysis -- the networks' transfer functions are recomputed here
from their impedances (``Zf/Zi`` for the inverting op-amp, ``gm Z`` for the OTA), an
independent route from the synthesis formulas (METHODS sec. 4.2-4.4); IEC 60063:2015 for the
series the rounded parts must belong to.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from loopwright.compensators import Compensator
from loopwright.errors import DesignError, DesignWarning
from loopwright.eseries import series_members
from loopwright.realization import (
    Realization,
    compensator_from_components,
    realize,
    realize_opamp,
    realize_ota,
)

TWO_PI = 2 * math.pi
TYPE1 = Compensator("type1", 2e4, strategy="manual")
TYPE2 = Compensator("type2", 3e4, (TWO_PI * 2e3,), (TWO_PI * 60e3,), strategy="manual")
TYPE3 = Compensator(
    "type3", 1e4, (TWO_PI * 3e3, TWO_PI * 5e3), (TWO_PI * 60e3, TWO_PI * 120e3), strategy="manual"
)
W = TWO_PI * np.geomspace(10.0, 1e6, 15)


def opamp_network(parts: dict, omega):
    """Zf/Zi from the impedances of sec. 4.2 (circuit analysis)."""
    s = 1j * np.asarray(omega)
    if "R2" not in parts:
        zf = 1 / (s * parts["C1"])
    else:
        zf = 1 / (s * parts["C2"] + 1 / (parts["R2"] + 1 / (s * parts["C1"])))
    zi = parts["R1"] + 0 * s
    if "R3" in parts:
        zi = 1 / (1 / parts["R1"] + 1 / (parts["R3"] + 1 / (s * parts["C3"])))
    return zf / zi


@pytest.mark.parametrize("comp", [TYPE1, TYPE2, TYPE3], ids=["type1", "type2", "type3"])
@pytest.mark.parametrize("h", [1.0, 0.1])
def test_opamp_network_realises_h_times_gc(comp, h):
    real = realize_opamp(comp, 10e3, h)
    assert real.network == "op-amp" and real.kind == comp.kind and real.h == h
    assert opamp_network(real.components, W) == pytest.approx(h * comp.freqresp(W), rel=1e-10)
    back = compensator_from_components(comp.kind, real.components, h)
    assert back.w_i == pytest.approx(comp.w_i, rel=1e-12)
    assert sorted(back.zeros_rad) == pytest.approx(sorted(comp.zeros_rad), rel=1e-12)
    assert sorted(back.poles_rad) == pytest.approx(sorted(comp.poles_rad), rel=1e-12)
    assert real.compensator().freqresp(W) == pytest.approx(comp.freqresp(W), rel=1e-10)


def test_ota_network_realises_gc_from_the_sensed_node():
    h = 0.25
    real = realize_ota(TYPE2, 200e-6, h)
    parts = real.components
    assert set(parts) == {"gm", "R", "C1", "C2"}
    s = 1j * W
    z = 1 / (s * parts["C2"] + 1 / (parts["R"] + 1 / (s * parts["C1"])))
    assert parts["gm"] * z == pytest.approx(TYPE2.freqresp(W), rel=1e-10)
    # from vo the divider is part of the gain: gm H Z = H Gc
    assert h * parts["gm"] * z == pytest.approx(h * TYPE2.freqresp(W), rel=1e-10)
    # the op-amp type II with R1 = 1/(gm H) has the same parts
    opamp = realize_opamp(TYPE2, 1 / (200e-6 * h), h).components
    assert opamp["R2"] == pytest.approx(parts["R"], rel=1e-12)
    assert opamp["C1"] == pytest.approx(parts["C1"], rel=1e-12)
    back = compensator_from_components("type2", parts, h)
    assert back.freqresp(W) == pytest.approx(TYPE2.freqresp(W), rel=1e-10)


def test_dispatcher():
    assert realize(TYPE3, 0.1, r1=10e3).components == realize_opamp(TYPE3, 10e3, 0.1).components
    assert realize(TYPE2, 0.1, network="ota", gm=1e-4).network == "ota"
    with pytest.raises(DesignError, match="r1"):
        realize(TYPE3, 0.1)
    with pytest.raises(DesignError, match="gm"):
        realize(TYPE2, 0.1, network="ota")
    with pytest.raises(DesignError, match="network"):
        realize(TYPE2, 0.1, network="tube", r1=1e3)


def test_rounding_keeps_r1_and_uses_the_series():
    real = realize_opamp(TYPE3, 10.2e3, 0.1)
    rounded = real.rounded()
    assert rounded.components["R1"] == 10.2e3
    assert rounded.ideal_components == real.ideal_components
    assert (rounded.series_r, rounded.series_c) == ("E96", "E12")
    assert real.series_r is None
    for name, value in rounded.components.items():
        if name == "R1":
            continue
        series = "E96" if name.startswith("R") else "E12"
        digits = 3 if series == "E96" else 2
        mantissa = round(value / 10 ** (math.floor(math.log10(value)) - digits + 1))
        assert mantissa in series_members(series), (name, value)
        assert value / real.ideal_components[name] == pytest.approx(1.0, rel=0.12)
    one = real.rounded(series="E6", mode="up")
    assert all(one.components[n] >= real.ideal_components[n] for n in one.components)
    ota = realize_ota(TYPE2, 1e-4, 0.1).rounded(series="E24")
    assert ota.components["gm"] == 1e-4


def test_rounded_parts_give_a_nearby_compensator():
    rounded = realize_opamp(TYPE3, 10e3, 0.1).rounded()
    gc = rounded.compensator()
    ratio = np.abs(gc.freqresp(W) / TYPE3.freqresp(W))
    assert np.all(np.abs(ratio - 1) < 0.25)
    assert isinstance(rounded, Realization)


def test_impractical_parts_warn():
    with pytest.warns(DesignWarning, match="C2"):
        realize_opamp(TYPE3, 10e6, 1.0)  # huge R1 -> capacitors of a few pF
    with pytest.warns(DesignWarning, match="R3"):
        realize_opamp(TYPE3, 1e3, 1.0)  # R3 ~ R1 wz2/(wp2 - wz2) = 43 ohm
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        realize_opamp(TYPE3, 10e3, 0.1)


def test_type3_pole_below_zero_is_explained():
    bad = Compensator(
        "type3", 1e4, (TWO_PI * 3e3, TWO_PI * 90e3), (TWO_PI * 60e3, TWO_PI * 80e3), "manual"
    )
    with pytest.raises(DesignError, match="pole above"):
        realize_opamp(bad, 10e3, 1.0)
    lag = Compensator("type2", 1e4, (TWO_PI * 50e3,), (TWO_PI * 5e3,), "manual")
    with pytest.raises(DesignError, match="pole"):
        realize_opamp(lag, 10e3, 1.0)
    with pytest.raises(DesignError, match="pole"):
        realize_ota(lag, 1e-4, 0.1)


@pytest.mark.parametrize(
    "call, key",
    [
        (lambda: realize_opamp(TYPE2, 0.0, 1.0), "r1"),
        (lambda: realize_opamp(TYPE2, 1e3, 1.5), "h"),
        (lambda: realize_opamp("type2", 1e3, 1.0), "comp"),
        (lambda: realize_ota(TYPE3, 1e-4, 0.1), "comp"),
        (lambda: realize_ota(TYPE2, -1e-4, 0.1), "gm"),
        (lambda: compensator_from_components("type2", {"R1": 1e3, "C1": 1e-9}, 1.0), "R2"),
        (lambda: compensator_from_components("type4", {"R1": 1e3}, 1.0), "kind"),
        (lambda: compensator_from_components("type1", {"R1": 1e3, "C1": -1e-9}, 1.0), "C1"),
    ],
)
def test_bad_input(call, key):
    with pytest.raises(DesignError, match=key):
        call()
