"""Linear-solver back-ends for shift-invert eigen-solves (registry in :mod:`.registry`).

A back-end is a function ``factorize(A) -> solve`` for a sparse symmetric
positive definite ``A``; each module of this package registers its own.
"""

from shellmodes.eigen.backends import (  # noqa: F401  (each module registers its back-end)
    cholmod,
    cholmod_system,
    lobpcg_amg,
    mumps_seq,
    pardiso,
    splu,
)
from shellmodes.eigen.backends.registry import BACKENDS, available_backends, get_backend, register

__all__ = ["BACKENDS", "register", "get_backend", "available_backends"]
