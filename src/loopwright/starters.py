"""Annotated starter design files written by ``loopwright new``.

The scenarios are invented demonstration stages, not products.
"""

from __future__ import annotations

__all__ = ["STARTERS", "starter_text"]

_COMMON_TAIL = """
[modulator]
ramp = "1.0 V"                 # PWM ramp, peak-to-peak; modulator gain Fm = 1/ramp

[feedback]
vref = "0.8 V"                 # reference; divider ratio H = vref/|vout|

[target]
crossover = "auto"             # a frequency such as "15 kHz", or "auto" (highest common practice allows)
phase_margin = "55 deg"
gain_margin = "10 dB"
compensator = "auto"           # type1 | type2 | type3 | auto (simplest that meets every corner)
strategy = "k-factor"          # k-factor | resonance (type III zeros at the LC double pole)
# max_crossover_fraction = 0.1 # crossover at most this fraction of fsw ("auto")
# rhp_zero_fraction = 0.333    # and at most this fraction of the lowest RHP zero

[realization]                  # optional: build the compensator from standard parts
kind = "op-amp"                # op-amp | ota | none
series = "E96"                 # resistor series: E6 E12 E24 E48 E96 E192
capacitor_series = "E12"
r1 = "10 kohm"                 # divider-top resistor = the error amplifier's input resistor
# gm = "1 mS"                  # OTA transconductance (kind = "ota")

# [digital]                    # optional: a sampled controller for firmware
# sample_rate = "{fsw}"
# delay = "1.5"                # samples: computation + PWM hold
# method = "tustin"            # tustin (prewarped at crossover) | zoh | matched
# format = "q15"               # float32 | q15 | q31
"""

STARTERS: dict[str, str] = {
    "buck": """# loopwright design file: a step-down stage (an invented demonstration scenario).
# Quantities take SI prefixes and units ("22 uH", "10 mohm", "250 kHz") or plain SI numbers.
name = "sensor-hub-buck"

[power_stage]
topology = "buck"
fsw = "300 kHz"
vin = "24 V"                   # nominal line
vin_range = ["18 V", "32 V"]   # line corners
vout = "5 V"
iout = "4 A"                   # full load (or rload = "1.25 ohm")
iout_range = ["0.4 A", "4 A"]  # load corners

[power_stage.inductor]
value = "15 uH"
dcr = "12 mohm"
tolerance = "20 %"

[power_stage.capacitor]
value = "220 uF"
esr = "8 mohm"
tolerance = "20 %"

[power_stage.switch]
rds_on = "18 mohm"

[power_stage.rectifier]
kind = "synchronous"           # synchronous | diode
rds_on = "9 mohm"              # a diode takes vf = "0.45 V" and rd = "20 mohm" instead
""",
    "boost": """# loopwright design file: a step-up stage (an invented demonstration scenario).
# Quantities take SI prefixes and units ("22 uH", "10 mohm", "250 kHz") or plain SI numbers.
name = "lamp-string-boost"

[power_stage]
topology = "boost"
fsw = "250 kHz"
vin = "12 V"
vin_range = ["10 V", "14 V"]
vout = "30 V"
iout = "1 A"
iout_range = ["0.5 A", "1 A"]

[power_stage.inductor]
value = "33 uH"
dcr = "25 mohm"
tolerance = "20 %"

[power_stage.capacitor]
value = "100 uF"
esr = "15 mohm"
tolerance = "20 %"

[power_stage.switch]
rds_on = "20 mohm"

[power_stage.rectifier]
kind = "diode"
vf = "0.45 V"
rd = "25 mohm"
""",
    "buck-boost": """# loopwright design file: an inverting buck-boost (an invented demonstration scenario).
# Quantities take SI prefixes and units ("22 uH", "10 mohm", "250 kHz") or plain SI numbers.
name = "bias-rail-inverter"

[power_stage]
topology = "buck-boost"
fsw = "350 kHz"
vin = "12 V"
vin_range = ["10 V", "15 V"]
vout = "-15 V"                 # inverting: the sign may be written or left out
iout = "0.6 A"
iout_range = ["0.3 A", "0.6 A"]

[power_stage.inductor]
value = "47 uH"
dcr = "40 mohm"
tolerance = "20 %"

[power_stage.capacitor]
value = "68 uF"
esr = "12 mohm"
tolerance = "20 %"

[power_stage.switch]
rds_on = "35 mohm"

[power_stage.rectifier]
kind = "synchronous"
rds_on = "30 mohm"
""",
}

_FSW = {"buck": "300 kHz", "boost": "250 kHz", "buck-boost": "350 kHz"}


def starter_text(topology: str) -> str:
    """Full annotated starter design file for a topology."""
    return STARTERS[topology] + _COMMON_TAIL.replace("{fsw}", _FSW[topology])
