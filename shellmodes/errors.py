"""The project's exceptions and warning categories.

Every error a user can cause derives from :class:`ShellmodesError`; the CLI
turns those into a one-line message and exit status 2.  Anything else is an
internal failure (exit status 1).
"""

from __future__ import annotations

__all__ = [
    "ShellmodesError",
    "CaseError",
    "MeshError",
    "GeometryError",
    "SolverError",
    "ProblemError",
    "DoubtfulResultWarning",
    "MultipletCutWarning",
    "MeshQualityWarning",
    "RenamedKeyWarning",
]


class ShellmodesError(Exception):
    """Root of every error caused by input the user can fix."""


class CaseError(ShellmodesError, ValueError):
    """A case file or case mapping is malformed or asks for something impossible.

    Parameters
    ----------
    message
        What is wrong and what is allowed.
    source
        The file (or ``"<case>"`` for data given from Python).
    key
        Dotted key path, e.g. ``"surface.radius"``.
    """

    def __init__(self, message: str, source: str | None = None, key: str | None = None):
        self.source = source
        self.key = key
        self.reason = message
        where = ": ".join(part for part in (source, key) if part)
        super().__init__(f"{where}: {message}" if where else message)


class MeshError(ShellmodesError, ValueError):
    """A mesh file is missing, unreadable or not a valid surface/volume mesh."""

    def __init__(self, message: str, source: str | None = None):
        self.source = source
        self.reason = message
        super().__init__(f"{source}: {message}" if source else message)


class GeometryError(ShellmodesError, ValueError):
    """A geometry is impossible (self-intersecting walls, negative radius, ...)."""


class SolverError(ShellmodesError, RuntimeError):
    """The eigen-solver cannot deliver what was asked (too many modes, no convergence)."""


class ProblemError(ShellmodesError, ValueError):
    """A discretised problem cannot be set up or solved as the case asks.

    Raised below the pipeline, which knows the case file; ``key`` names the case key
    to change and the pipeline turns the error into a :class:`CaseError`.
    """

    def __init__(self, message: str, key: str):
        self.key = key
        self.reason = message
        super().__init__(message)


class DoubtfulResultWarning(UserWarning):
    """A result the user should not trust without checking (large residual, ...)."""


class MultipletCutWarning(UserWarning):
    """The computed set ends inside a (near-)degenerate multiplet."""


class MeshQualityWarning(UserWarning):
    """The mesh is valid but badly shaped for accurate results."""


class RenamedKeyWarning(FutureWarning):
    """A case file uses an old name of a key or value; it still works (see :mod:`shellmodes.case.aliases`)."""
