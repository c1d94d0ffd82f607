"""loopwright: close the feedback loop of PWM DC-DC converters.

The public objects interoperate with python-control: averaged models return
``control.StateSpace`` systems, compensators and loops have ``.to_control()``.
"""

from .averaging import AveragedModel, OperatingPoint, analyze_stage
from .compensators import Compensator
from .design import DesignResult, design
from .errors import DesignError, DesignWarning, LoopwrightWarning, ModelValidityWarning
from .margins import LoopMargins, find_margins
from .plant import PlantAnalysis, analyze_plant
from .spec import DesignSpec, corners, load_design, parse_design
from .topologies import TOPOLOGIES, PowerStageParameters

__version__ = "0.1.0"

__all__ = [
    "AveragedModel",
    "Compensator",
    "DesignError",
    "DesignResult",
    "DesignSpec",
    "DesignWarning",
    "LoopMargins",
    "LoopwrightWarning",
    "ModelValidityWarning",
    "OperatingPoint",
    "PlantAnalysis",
    "PowerStageParameters",
    "TOPOLOGIES",
    "analyze_plant",
    "analyze_stage",
    "corners",
    "design",
    "find_margins",
    "load_design",
    "parse_design",
]
