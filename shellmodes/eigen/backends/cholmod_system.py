"""CHOLMOD of the system's SuiteSparse, through ``scikit-sparse`` (extra ``cholmod-system``).

Unlike the ``cholespy`` wheel (back-end ``"cholmod"``), which bundles the
reference BLAS, this CHOLMOD uses the system's BLAS and LAPACK: with
OpenBLAS installed (Debian: ``apt-get install libsuitesparse-dev
libopenblas-dev`` before ``pip install scikit-sparse``) its supernodal
kernels and block solves run at BLAS-3 speed.  Measured against the other
back-ends in ``benchmarks/bench_factor.py``.
"""

from __future__ import annotations

import importlib.util

import numpy as np
import scipy.sparse as sp

from shellmodes.eigen.backends.registry import register
from shellmodes.errors import SolverError


def _available() -> bool:
    return importlib.util.find_spec("sksparse") is not None


@register("cholmod-system", available=_available, priority=15)
def factorize(A):
    """CHOLMOD Cholesky of the SPD matrix ``A`` (supernodal or simplicial and the ordering: CHOLMOD's choice)."""
    from sksparse.cholmod import CholmodNotPositiveDefiniteError, cholesky

    A = sp.csc_matrix(A, dtype=np.float64)
    A.sort_indices()
    try:
        factor = cholesky(A, mode="auto")
    except CholmodNotPositiveDefiniteError:
        raise SolverError(f"the CHOLMOD factorization failed (not positive definite) for a matrix of size "
                          f"{A.shape[0]}") from None

    def solve(b):
        return factor(np.asarray(b, dtype=np.float64))

    solve.handle = factor
    return solve
