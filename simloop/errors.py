"""One exception hierarchy for the whole tool.

``SpecError`` names the key path, the value and the rule; the CLI turns it into exit status 2.
``SolverError`` is a failure of the method-of-moments engine for one point (exit status 1 if it
stops a command). ``ValidityWarning`` is raised when an input leaves a model's range of validity.
"""

from __future__ import annotations


class SimloopError(Exception):
    """Base class of every error the tool raises on purpose."""


class SpecError(SimloopError):
    """Bad input: the message names the key, the value and the rule.

    Parameters
    ----------
    key : str
        Dotted key path in the spec file (``"winding.pitch"``), or ``"<file>"`` for the whole file.
    message : str
        What is wrong, with the offending value and the rule it breaks.
    """

    def __init__(self, key: str, message: str, problems: list[tuple[str, str]] | None = None):
        self.key = key
        self.problems = problems if problems is not None else [(key, message)]
        super().__init__("\n".join(f"{k}: {m}" for k, m in self.problems))


class SolverError(SimloopError):
    """The MoM engine failed (crash, hang, NaN) for one solve."""


class ValidityWarning(UserWarning):
    """An input lies outside the range where a model or formula is valid."""


class CacheWarning(UserWarning):
    """The solve cache cannot be used (unwritable, full): the run carries on without it."""
