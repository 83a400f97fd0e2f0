"""|m| of each multiplet of a surface of revolution, shell or ball symmetric about z, from its phi-dependence.

The matrix Q comes from the discretisation (:meth:`~shellmodes.fem.discretisation.Discretisation.azimuthal_matrix`,
built in :mod:`shellmodes.fem.azimuthal`: scikit-fem bases, prisms, Kronecker factors).
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

from shellmodes.fem.azimuthal import AXIAL_SHAPES, rotation_invariant
from shellmodes.fem.azimuthal import basis_azimuthal_matrix as azimuthal_matrix
from shellmodes.fem.azimuthal import shape_axisymmetric as is_axisymmetric

__all__ = ["AXIAL_SHAPES", "is_axisymmetric", "azimuthal_matrix", "potential_axisymmetric", "multiplet_abs_m",
           "continuation_parents", "M_TOLERANCE"]

#: sqrt(G eigenvalue) further than this from an integer: |m| unresolved
M_TOLERANCE = 0.2


def potential_axisymmetric(potential, nodes: np.ndarray) -> bool:
    """Whether a compiled potential (None: no potential) is unchanged by rotations about z at ``nodes``."""
    if potential is None:
        return True
    from shellmodes.case.model import point_potential

    function = point_potential(potential)
    sample = nodes[:: max(1, len(nodes) // 2000)]  # a spread subset: the potential is a closed form
    return rotation_invariant(lambda p: function(p[:, 0], p[:, 1], p[:, 2]), sample)


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
