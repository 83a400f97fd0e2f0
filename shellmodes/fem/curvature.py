"""Curvature of the curved finite-element surface.

Gaussian curvature is computed element by element from the Gauss map:
K dA = n . (dn/dX1 x dn/dX2) dX on each curved triangle, with n = J1 x J2 /
|J1 x J2| (orientation-free, since swapping X1 and X2 flips both sides).
Mean curvature H = (1/2) g^ij b_ij with b_ij = dn/dXi . dx/dXj, signed so that
H = +1/R on a sphere with outward normals.  The derivatives of n are central
differences in the reference coordinates (the map is a polynomial, so a step
of 1e-5 leaves errors near 1e-10).  The elementwise curvatures miss the
normal's jumps across element edges, which vanish as the mesh is refined; the
integral of K then tends to 2 pi chi (Gauss-Bonnet; do Carmo, Differential
Geometry of Curves and Surfaces, section 4-5).
"""

from __future__ import annotations

import numpy as np

from shellmodes.fem.surface import CurvedSurface

__all__ = ["curvatures", "total_gaussian_curvature"]

_STEP = 1e-5


def curvatures(surface: CurvedSurface, center=(0.0, 0.0, 0.0)):
    """Gaussian K and mean H at the quadrature points, (Nel, Nqp) each, plus weights dA."""
    mapping = surface.basis.mapping
    X = surface.basis.X
    def normal(Y):
        return mapping.normals_at(Y)

    dn = []
    for i in range(2):
        e = np.zeros((2, 1))
        e[i] = _STEP
        dn.append((normal(X + e) - normal(X - e)) / (2 * _STEP))
    n = normal(X)
    J = mapping.DF(X)  # (3, 2, Nel, Nqp)
    G = np.einsum("dieq,djeq->ijeq", J, J)
    det = G[0, 0] * G[1, 1] - G[0, 1] ** 2
    K = np.einsum("deq,deq->eq", n, np.cross(dn[0], dn[1], axis=0)) / np.sqrt(det)
    b = np.array([[np.einsum("deq,deq->eq", dn[i], J[:, j]) for j in range(2)] for i in range(2)])
    Ginv = np.array([[G[1, 1], -G[0, 1]], [-G[1, 0], G[0, 0]]]) / det
    H = 0.5 * np.einsum("ijeq,ijeq->eq", Ginv, b)
    outward = np.sign(np.einsum("deq,deq->eq", n, mapping.F(X) - np.asarray(center)[:, None, None]))
    return K, H * outward, surface.basis.dx


def total_gaussian_curvature(surface: CurvedSurface) -> float:
    """Integral of the Gaussian curvature over the surface (elementwise)."""
    K, _, dA = curvatures(surface)
    return float(np.sum(K * dA))
