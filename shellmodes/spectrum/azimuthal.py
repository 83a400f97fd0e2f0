"""|m| of each multiplet of a surface of revolution about z, from its phi-dependence.

On a shape symmetric about the z axis the rotation generator L_z = -i d/dphi
commutes with the Laplace-Beltrami operator, so every eigenspace is invariant
under d^2/dphi^2 and splits into |m| classes.  With the tangent field
t = e_z x X (so d/dphi u = t . grad u), the matrix

    Q_ij = integral (t . grad phi_i)(t . grad phi_j) dA

is assembled once; for a multiplet with M-orthonormal modes V the small
matrix G = V^T Q V is the compression of -d^2/dphi^2 to the multiplet's
subspace.  Its eigenvalues (sorted) do not depend on the basis the solver
picked inside the multiplet, and for an exact |m| class they are m^2: a
spheroid's or torus's doublet gives (m^2, m^2), a sphere's (2l+1)-multiplet
gives 0, 1, 1, ..., l^2, l^2.  |m| is the nearest integer to sqrt(G's
eigenvalue); a value further than :data:`M_TOLERANCE` from an integer is
reported as unresolved (-1), e.g. on a mesh too coarse for that level.
"""

from __future__ import annotations

import numpy as np

__all__ = ["AXIAL_SHAPES", "is_axisymmetric", "azimuthal_matrix", "multiplet_abs_m", "continuation_parents",
           "M_TOLERANCE"]

#: sqrt(G eigenvalue) further than this from an integer: |m| unresolved
M_TOLERANCE = 0.2
#: shapes symmetric about the z axis whatever their parameters
AXIAL_SHAPES = ("sphere", "spheroid", "torus", "cap")


def is_axisymmetric(shape) -> bool:
    """True for a surface of revolution about z (a star shape only with m = 0 deformations)."""
    if shape.name in AXIAL_SHAPES:
        return True
    return shape.name == "star" and all(m == 0 for _, m, _ in shape.deformation)


def azimuthal_matrix(basis):
    """Q = integral (t . grad u)(t . grad v), t = e_z x X, on a scikit-fem basis (surface or volume)."""
    import skfem

    @skfem.BilinearForm
    def form(u, v, w):
        x = w.x
        du = -x[1] * u.grad[0] + x[0] * u.grad[1]
        dv = -x[1] * v.grad[0] + x[0] * v.grad[1]
        return du * dv

    return skfem.asm(form, basis).tocsr()


def multiplet_abs_m(Q, vectors: np.ndarray, groups) -> list[np.ndarray]:
    """Per multiplet (``groups``: member index lists), its sorted |m| values (-1: unresolved).

    ``vectors`` are M-orthonormal modes on every dof of ``Q``.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> Q = sp.diags([0.0, 1.0, 1.0, 4.0])
    >>> [m.tolist() for m in multiplet_abs_m(Q, np.eye(4), [[0], [1, 2], [3]])]
    [[0], [1, 1], [2]]
    """
    out = []
    for members in groups:
        V = vectors[:, list(members)]
        G = V.T @ (Q @ V)
        mu = np.linalg.eigvalsh(0.5 * (G + G.T))
        root = np.sqrt(np.clip(mu, 0.0, None))
        m = np.rint(root).astype(int)
        m[np.abs(root - m) > M_TOLERANCE] = -1
        out.append(np.sort(m))
    return out


def continuation_parents(abs_m) -> list[int | None]:
    """Parent l of each multiplet of a sphere-like surface of revolution, by continuation from the sphere.

    ``abs_m`` holds each multiplet's sorted |m| values, multiplets in ascending
    order.  Along any axially symmetric deformation from the sphere the levels of
    one |m| class are the eigenvalues of a 1-D Sturm-Liouville problem (the
    profile equation), which are simple and so never cross (Courant and Hilbert,
    vol. 1, ch. VI): the k-th level (k = 0, 1, ...) of class |m| stays connected
    to the sphere's level l = |m| + k.  A level of class m > 0 is a +-m pair, so
    it counts once per two members (a pair the mesh split over two multiplets
    still gives both halves the same parent).  From the first unresolved |m| (-1)
    on, the counts are unknown and the parent is None.  A multiplet whose
    members lead to different parents (an accidental degeneracy) takes the
    most common.

    Examples
    --------
    >>> continuation_parents([(0,), (0, 1, 1), (0,), (1, 1), (2, 2), (1,), (1,)])
    [0, 1, 2, 2, 2, 3, 3]
    """
    seen: dict[int, int] = {}
    out: list[int | None] = []
    broken = False
    for ms in abs_m:
        if broken or any(m < 0 for m in ms):
            broken = True
            out.append(None)
            continue
        parents = []
        for m in ms:
            n = seen.get(m, 0)
            parents.append(m + n // (1 if m == 0 else 2))
            seen[m] = n + 1
        values, counts = np.unique(parents, return_counts=True)
        out.append(int(values[np.argmax(counts)]))
    return out
