"""Errors and warnings raised by perftest.

Every user mistake ends in a :class:`PerftestError` (a ``ValueError``) whose
message names where the problem is (file, line, column, tag, TOML key or
function parameter) and what to do about it.  The location fields are also
stored on the exception so that programs can act on them.
"""

from __future__ import annotations

__all__ = [
    "PerftestError",
    "InputError",
    "DataError",
    "PlantFileError",
    "UnitError",
    "PropertyRangeError",
    "DeclaredPhaseError",
    "ConvergenceError",
    "PerftestWarning",
    "DataQualityWarning",
    "StabilityWarning",
    "ReconciliationWarning",
    "IndistinguishableWarning",
    "PerftestDeprecationWarning",
]


class PerftestError(ValueError):
    """Base class of every error perftest raises on bad input.

    Parameters
    ----------
    message : str
        The full, human-readable message.  It should already name the place
        (file, line, column, tag or key) and say what to do.
    file, line, column, tag, key, parameter : optional
        Where the problem is.  Stored as attributes of the same names.
    """

    def __init__(
        self,
        message: str,
        *,
        file=None,
        line: int | None = None,
        column: str | None = None,
        tag: str | None = None,
        key: str | None = None,
        parameter: str | None = None,
    ):
        super().__init__(message)
        self.message = message
        self.file = None if file is None else str(file)
        self.line = line
        self.column = column
        self.tag = tag
        self.key = key
        self.parameter = parameter

    def __str__(self) -> str:  # keep the message exactly as written
        return self.message


class InputError(PerftestError):
    """A function argument has the wrong shape, type or value."""


class DataError(PerftestError):
    """A run file (CSV) cannot be read or holds data that cannot be used."""


class PlantFileError(PerftestError):
    """The plant TOML file is invalid; names the key and line."""


class UnitError(PerftestError):
    """A unit string is unknown or does not fit the quantity."""


class PropertyRangeError(PerftestError):
    """A fluid state lies outside the range of the equation of state, or is ambiguous."""


class DeclaredPhaseError(PlantFileError, PropertyRangeError):
    """A stream's measured pressure and temperature contradict its declared phase.

    Both a plant-file error (the declaration is what to correct, named by key and
    line) and a property-range error (the state is on the wrong side of saturation).
    """


class ConvergenceError(PerftestError):
    """An iterative solver stopped without meeting its convergence criteria.

    Attributes
    ----------
    residual_norm : float
        Norm of the constraint residual at the last iterate.
    iterate : object
        The last iterate (for reconciliation: a tuple ``(x, y)``).
    iterations : int
        Number of iterations performed.
    """

    def __init__(self, message: str, *, residual_norm=None, iterate=None, iterations=None, **kw):
        super().__init__(message, **kw)
        self.residual_norm = residual_norm
        self.iterate = iterate
        self.iterations = iterations


class PerftestWarning(UserWarning):
    """Base class of perftest warnings."""


class DataQualityWarning(PerftestWarning):
    """Samples were masked, duplicated or missing; the run is still usable."""


class StabilityWarning(PerftestWarning):
    """A tag varies more than its permissible variation in the chosen window."""


class ReconciliationWarning(PerftestWarning):
    """The reconciliation succeeded but something deserves a look (e.g. global test failed)."""


class IndistinguishableWarning(PerftestWarning):
    """Planned instruments form sets that no measurement test can tell apart."""


class PerftestDeprecationWarning(PerftestWarning, DeprecationWarning):
    """A perftest API will change."""
