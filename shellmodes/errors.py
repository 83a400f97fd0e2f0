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
    """Root of every error caused by input the user can fix.

    The command line prints its message as one line and exits with status 2; from Python,
    catch this class to handle every such error at once.

    Examples
    --------
    >>> import shellmodes
    >>> try:
    ...     shellmodes.case_from_dict({"surface": {"shape": "sphere", "radius": -1.0}})
    ... except shellmodes.ShellmodesError as exc:
    ...     print(type(exc).__name__)
    CaseError
    """


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
    """A mesh file is missing, unreadable or not a valid surface/volume mesh.

    Parameters
    ----------
    message : str
        What is wrong with the file.
    source : str, optional
        The mesh file.

    Attributes
    ----------
    source : str or None
        The mesh file.
    reason : str
        The message without the file name.
    """

    def __init__(self, message: str, source: str | None = None):
        self.source = source
        self.reason = message
        super().__init__(f"{source}: {message}" if source else message)


class GeometryError(ShellmodesError, ValueError):
    """A geometry is impossible (self-intersecting walls, negative radius, ...).

    Raised by the shapes and meshes; the pipeline turns it into a :class:`CaseError` naming the
    case file and key.

    Examples
    --------
    >>> from shellmodes.shapes import make_shape
    >>> try:
    ...     make_shape("deformed_sphere", radius=1.0, deformation=[(0, 0, -5.0)])
    ... except GeometryError:
    ...     print("refused")
    refused
    """


class SolverError(ShellmodesError, RuntimeError):
    """The eigen-solver cannot deliver what was asked (too many modes, no convergence).

    Notes
    -----
    The message says what to change (fewer modes, another ``modes.method`` or back-end).
    """


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
    """A result the user should not trust without checking (large residual, ...).

    Notes
    -----
    Never silent: the command line prints it as ``warning: ...`` and records it in run.log and
    spectrum.json.  Turn it into an error with ``warnings.simplefilter("error", DoubtfulResultWarning)``.
    """


class MultipletCutWarning(UserWarning):
    """The computed set ends inside a (near-)degenerate multiplet.

    Notes
    -----
    A cut multiplet has an arbitrary basis inside the part that was kept; ask for more modes.
    """


class MeshQualityWarning(UserWarning):
    """The mesh is valid but badly shaped for accurate results.

    Notes
    -----
    Slivers and very uneven triangles raise the discretisation error; refine or remesh.
    """


class RenamedKeyWarning(FutureWarning):
    """A case file uses an old name of a key or value; it still works (see :mod:`shellmodes.case.aliases`)."""
