"""MKL PARDISO sparse Cholesky through the ``pypardiso`` wheel (extra ``pardiso``; x86-64 only).

The wheel brings MKL, whose BLAS kernels are optimised, so the supernodal
factorization and the multi-right-hand-side solves run at BLAS-3 speed
(measured against the other back-ends in ``benchmarks/bench_factor.py``).
PARDISO is called with matrix type 2 (real symmetric positive definite) on
the upper triangle in CSR with zero-based indices, and every solve goes
straight to the solve phase: pypardiso's own ``solve`` would compare the
matrix with the factorized one on every call.  The factor is released when
the returned ``solve`` is garbage-collected.
"""

from __future__ import annotations

import ctypes
import importlib.util
import weakref

import numpy as np
import scipy.sparse as sp

from shellmodes.eigen.backends.registry import register
from shellmodes.errors import SolverError

#: PARDISO matrix type of a real symmetric positive definite matrix (MKL reference, ``pardiso`` mtype)
MTYPE_SPD = 2


def _available() -> bool:
    import platform

    return platform.machine().lower() in ("x86_64", "amd64") and importlib.util.find_spec("pypardiso") is not None


class _Pardiso:
    """One PARDISO handle: analyse and factorize ``A`` (upper triangle) once, then solve blocks."""

    def __init__(self, A, mtype: int = MTYPE_SPD):
        from pypardiso import PyPardisoSolver

        self._lib = PyPardisoSolver(mtype=mtype)._mkl_pardiso  # finds mkl_rt and sets the argument types
        upper = sp.triu(sp.csr_matrix(A), format="csr")
        upper.sort_indices()
        self.n = upper.shape[0]
        self.mtype = mtype
        self.data = np.ascontiguousarray(upper.data, dtype=np.float64)
        self.ia = np.ascontiguousarray(upper.indptr, dtype=np.int32)
        self.ja = np.ascontiguousarray(upper.indices, dtype=np.int32)
        self.pt = np.zeros(64, dtype=np.int64)
        self.iparm = np.zeros(64, dtype=np.int32)
        self.iparm[0] = 1   # iparm(1): values below are given, not defaults
        self.iparm[1] = 3   # iparm(2): parallel nested-dissection ordering (METIS)
        self.iparm[9] = 8   # iparm(10): pivot perturbation 1e-8 (unused for mtype 2)
        self.iparm[17] = -1  # iparm(18): report the factor's non-zeros
        self.iparm[34] = 1  # iparm(35): zero-based indices
        self.perm = np.zeros(0, dtype=np.int32)
        self._call(12, np.zeros((self.n, 1)), np.zeros((self.n, 1)))
        self.factor_nnz = int(self.iparm[17])
        # iparm(15)-(17): peak memory of analysis, of factorization and solve, in KiB
        self.peak_kib = int(max(self.iparm[14], self.iparm[15] + self.iparm[16]))
        self._finalizer = weakref.finalize(self, _release, self._lib, self.pt, self.n, mtype)

    def _call(self, phase: int, b, x):
        error = ctypes.c_int32(0)
        i32 = ctypes.POINTER(ctypes.c_int32)
        f64 = ctypes.POINTER(ctypes.c_double)
        nrhs = 1 if b.ndim == 1 else b.shape[1]
        self._lib(self.pt.ctypes.data_as(ctypes.POINTER(ctypes.c_int64)), ctypes.byref(ctypes.c_int32(1)),
                  ctypes.byref(ctypes.c_int32(1)), ctypes.byref(ctypes.c_int32(self.mtype)),
                  ctypes.byref(ctypes.c_int32(phase)), ctypes.byref(ctypes.c_int32(self.n)),
                  self.data.ctypes.data_as(f64), self.ia.ctypes.data_as(i32), self.ja.ctypes.data_as(i32),
                  self.perm.ctypes.data_as(i32), ctypes.byref(ctypes.c_int32(nrhs)),
                  self.iparm.ctypes.data_as(i32), ctypes.byref(ctypes.c_int32(0)),
                  b.ctypes.data_as(f64), x.ctypes.data_as(f64), ctypes.byref(error))
        if error.value != 0:
            what = "not positive definite" if error.value == -4 else f"PARDISO error {error.value}"
            raise SolverError(f"the PARDISO factorization failed ({what}) for a matrix of size {self.n}")

    def solve(self, b):
        b = np.asarray(b, dtype=np.float64)
        # PARDISO stores several right-hand sides column after column (Fortran order)
        bf = np.asfortranarray(b)
        x = np.empty_like(bf, order="F")
        self._call(33, bf, x)
        return np.ascontiguousarray(x)


def _release(lib, pt, n, mtype):
    """Phase -1: free every array PARDISO holds for this handle."""
    error = ctypes.c_int32(0)
    i32 = ctypes.POINTER(ctypes.c_int32)
    dummy = np.zeros(1)
    zero = np.zeros(1, dtype=np.int32)
    iparm = np.zeros(64, dtype=np.int32)
    lib(pt.ctypes.data_as(ctypes.POINTER(ctypes.c_int64)), ctypes.byref(ctypes.c_int32(1)),
        ctypes.byref(ctypes.c_int32(1)), ctypes.byref(ctypes.c_int32(mtype)), ctypes.byref(ctypes.c_int32(-1)),
        ctypes.byref(ctypes.c_int32(n)), dummy.ctypes.data_as(ctypes.POINTER(ctypes.c_double)),
        zero.ctypes.data_as(i32), zero.ctypes.data_as(i32), zero.ctypes.data_as(i32),
        ctypes.byref(ctypes.c_int32(1)), iparm.ctypes.data_as(i32), ctypes.byref(ctypes.c_int32(0)),
        dummy.ctypes.data_as(ctypes.POINTER(ctypes.c_double)), dummy.ctypes.data_as(ctypes.POINTER(ctypes.c_double)),
        ctypes.byref(error))


@register("pardiso", available=_available, priority=12)
def factorize(A):
    """PARDISO Cholesky of the SPD matrix ``A``; ``solve(b)`` for a vector or an (n, k) block."""
    handle = _Pardiso(A)

    def solve(b):
        return handle.solve(b)

    solve.handle = handle  # keeps the factor alive with the function; factor statistics for benchmarks
    return solve
