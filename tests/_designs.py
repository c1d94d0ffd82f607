"""Design-file texts shared by the tests (an invented demonstration stage)."""

from __future__ import annotations


def minimal_buck(name: str) -> str:
    """The smallest valid design file: a 36 V -> 12 V, 3 A buck with only required keys."""
    return f'''\
name = "{name}"

[power_stage]
topology = "buck"
fsw = "250 kHz"
vin = "36 V"
vout = "12 V"
iout = "3 A"

[power_stage.inductor]
value = "22 uH"

[power_stage.capacitor]
value = "100 uF"

[modulator]
ramp = "2.5 V"

[feedback]
vref = "1.2 V"

[target]
crossover = "auto"
phase_margin = "55 deg"
'''
