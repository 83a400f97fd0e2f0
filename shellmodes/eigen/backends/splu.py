"""scipy's SuperLU: always available, slow fill-in in 3-D (see docs/MEASURED.md)."""

from __future__ import annotations

import scipy.sparse as sp
import scipy.sparse.linalg as sla

from shellmodes.eigen.backends.registry import register


@register("splu", available=lambda: True, priority=0)
def factorize(A):
    lu = sla.splu(sp.csc_matrix(A))
    return lu.solve
