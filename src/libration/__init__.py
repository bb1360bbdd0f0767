"""libration: n-body propagation for long-term planetary and stellar dynamics."""
from ._version import __version__
from .exceptions import (ConvergenceError, FileFormatError, LibrationError, MethodError, ScenarioError,
                         SingularityError, UnitError, ValidationError)
from .ensemble import Ensemble
from .io import open_output
from .methods import METHODS, StepReport
from .propagator import Propagator
from .system import System
from .units import UNIT_SYSTEMS, UnitSystem

__all__ = [
    "__version__",
    "System",
    "Propagator",
    "Ensemble",
    "open_output",
    "StepReport",
    "METHODS",
    "UNIT_SYSTEMS",
    "UnitSystem",
    "LibrationError",
    "ValidationError",
    "UnitError",
    "MethodError",
    "ScenarioError",
    "SingularityError",
    "ConvergenceError",
    "FileFormatError",
]
