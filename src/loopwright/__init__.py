"""loopwright: close the feedback loop of PWM DC-DC converters."""

__version__ = "0.1.0"
