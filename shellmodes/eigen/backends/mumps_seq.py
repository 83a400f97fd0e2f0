"""MUMPS (sequential) through the ``python-mumps`` binding (extra ``mumps``).

The binding builds against the system's MUMPS (Debian: ``apt-get install
libmumps-seq-dev`` before ``pip install python-mumps``), which uses the
system BLAS.  The matrix is handed over as symmetric (upper triangle), so
MUMPS runs its LDL^T factorization; its count of negative pivots
(``infog(12)``) is the inertia, Sylvester's law.  Measured against the other
back-ends in ``benchmarks/bench_factor.py``.
"""

from __future__ import annotations

import importlib.util

import numpy as np
import scipy.sparse as sp

from shellmodes.eigen.backends.registry import register
from shellmodes.errors import SolverError


def _available() -> bool:
    return importlib.util.find_spec("mumps") is not None


@register("mumps", available=_available, priority=5)
def factorize(A):
    """MUMPS LDL^T of the symmetric matrix ``A``; ``solve(b)`` for a vector or an (n, k) block."""
    import mumps

    context = mumps.Context()
    context.set_matrix(sp.coo_matrix(A, dtype=np.float64), symmetric=True)
    try:
        context.factor(ordering="auto")
    except mumps.MUMPSError as exc:
        raise SolverError(f"the MUMPS factorization failed ({exc}) for a matrix of size {A.shape[0]}") from None

    def solve(b):
        return np.ascontiguousarray(context.solve(np.asarray(b, dtype=np.float64)))

    solve.handle = context
    return solve
