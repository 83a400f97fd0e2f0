"""scipy's SuperLU: always available, slow fill-in in 3-D (see docs/MEASURED.md)."""

from __future__ import annotations

import scipy.sparse as sp
import scipy.sparse.linalg as sla

from shellmodes.eigen.backends.registry import register


@register("splu", available=lambda: True, priority=0)
def factorize(A):
    lu = sla.splu(sp.csc_matrix(A))
    return lu.solve


@register("splu-hermitian", available=lambda: True, priority=-1)
def factorize_hermitian(A):
    """SuperLU for a Hermitian (or real symmetric) positive definite ``A``: complex shift-invert in a magnetic field.

    No pivoting is needed for a positive definite matrix, so the symmetric mode with a symmetric
    ordering applies: measured on the 10,242-node P4 sphere in a field, 3.4x faster to factor and
    2.4x faster to solve than the default COLAMD ordering, with a third of the fill.  CHOLMOD
    through cholespy is real-only, so the planner picks this back-end for complex problems; its
    priority keeps ``auto`` from choosing it for real ones.
    """
    lu = sla.splu(sp.csc_matrix(A), permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                  options={"SymmetricMode": True})
    return lu.solve
