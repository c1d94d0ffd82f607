"""Tests of loopwright.eseries beyond the published check values (see
tests/references/test_iec60063.py): rounding properties by brute force over neighbouring
decades of IEC 60063:2015 series, and bad input."""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from loopwright.errors import DesignError
from loopwright.eseries import SERIES, round_to_series, series_values


def _members_near(x: float, series: str) -> list[float]:
    e = math.floor(math.log10(x))
    return [v * 10.0**k for k in range(e - 1, e + 2) for v in series_values(series)]


@given(
    mantissa=st.floats(1.0, 9.999999),
    exponent=st.integers(-13, 7),
    series=st.sampled_from(sorted(SERIES)),
)
def test_rounding_picks_the_best_member(mantissa, exponent, series):
    x = mantissa * 10.0**exponent
    near = _members_near(x, series)
    best_ratio = min(abs(math.log(v / x)) for v in near)
    got = round_to_series(x, series)
    assert abs(math.log(got / x)) <= best_ratio * (1 + 1e-9) + 1e-12
    best_diff = min(abs(v - x) for v in near)
    got = round_to_series(x, series, "difference")
    assert abs(got - x) <= best_diff * (1 + 1e-9) + 1e-12 * x
    up = round_to_series(x, series, "up")
    down = round_to_series(x, series, "down")
    assert down <= x * (1 + 1e-12) and up >= x * (1 - 1e-12)
    assert not any(down * (1 + 1e-9) < v < up * (1 - 1e-9) for v in near)


@pytest.mark.parametrize("series", sorted(SERIES))
def test_members_round_to_themselves(series):
    for v in series_values(series):
        for k in (-12, 0, 3):
            value = float(f"{v}e{k}")
            for mode in ("ratio", "difference", "up", "down"):
                assert round_to_series(value, series, mode) == value


def test_decade_edges():
    assert round_to_series(0.99, "E12") == 1.0
    assert round_to_series(1000.0, "E24", "down") == 1000.0
    assert round_to_series(999.999, "E24", "up") == 1000.0
    assert round_to_series(1.04, "E6", "down") == 1.0
    assert round_to_series(0.96, "E6", "down") == 0.68
    assert round_to_series(2.2e-12, "e12") == 2.2e-12


@pytest.mark.parametrize(
    "args, key",
    [
        ((0.0, "E12"), "value"),
        ((-1.0, "E12"), "value"),
        ((math.inf, "E12"), "value"),
        (("ten", "E12"), "value"),
        ((1.0, "E13"), "series"),
        ((1.0, "E12", "nearest"), "mode"),
    ],
)
def test_bad_input(args, key):
    with pytest.raises(DesignError, match=key):
        round_to_series(*args)
