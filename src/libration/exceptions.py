"""Every exception libration raises: misuse raises, integration failure is a result."""


class LibrationError(Exception):
    """Base class of all libration errors."""


class ValidationError(LibrationError, ValueError):
    """An argument or input value is invalid (names the field, body, range and value)."""


class UnitError(ValidationError):
    """An unknown unit system, or a quantity that cannot be converted."""


class MethodError(ValidationError):
    """An unknown stepping method or an invalid method option."""


class SingularityError(LibrationError, ArithmeticError):
    """A kernel met a singular configuration (zero distance, non-finite value)."""


class ConvergenceError(LibrationError, ArithmeticError):
    """An iterative solver (Kepler equation, extrapolation) did not converge."""


class FileFormatError(LibrationError, ValueError):
    """A checkpoint, output or scenario file is damaged, foreign or of a newer version."""


class ScenarioError(ValidationError):
    """A scenario file is malformed (names the key, the line and what was expected)."""
