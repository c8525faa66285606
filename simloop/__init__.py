"""simloop: method-of-moments design of tuned, tapped medium-wave receiving loops."""

from simloop.errors import SimloopError, SolverError, SpecError, ValidityWarning

__version__ = "0.1.0"

__all__ = ["SimloopError", "SolverError", "SpecError", "ValidityWarning", "__version__"]
