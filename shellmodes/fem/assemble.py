"""Stiffness and mass matrices of the layered effective-mass problem, and wall conditions.

In "lambda" units with a reference mass m0 the weak forms are

    K(u, v) = sum_regions  integral  (m0 / m_i) grad u . grad v + (2 m0 / hbar^2) V u v,
    M(u, v) = integral u v,

so that E = (hbar^2 / 2 m0) lambda for K u = lambda M u.  The caller gives the
per-region numbers ``m0 / m_i`` (``inverse_mass``) and ``2 m0 V_i / hbar^2``
(``potential``) already converted.  A piecewise coefficient in the kinetic
form makes the natural interface condition continuity of (1/m) du/dn, the
BenDaniel-Duke condition (BenDaniel and Duke, Phys. Rev. 152 (1966) 683),
with no extra terms.  Walls left out of ``dirichlet`` are Neumann walls.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping

import numpy as np
import scipy.sparse as sp
from skfem import BilinearForm
from skfem.helpers import dot, grad

from shellmodes.errors import CaseError
from shellmodes.fem.tetrahedra import VolumeDiscretisation

__all__ = ["assemble_volume", "free_dofs", "restricted"]


@BilinearForm
def _hamiltonian(u, v, w):
    return w["c"] * dot(grad(u), grad(v)) + w["v"] * u * v


@BilinearForm
def _overlap(u, v, w):
    return u * v


def _per_element(values, disc: VolumeDiscretisation, key: str, default: float | None) -> np.ndarray:
    """Region -> number (or one number for all regions) as an (Nelements,) array."""
    ids = disc.region_ids
    if values is None:
        if default is None:
            raise CaseError(f"give {key} for regions {ids}", key=key)
        values = default
    if isinstance(values, Mapping):
        missing = [r for r in ids if r not in values]
        if missing:
            raise CaseError(f"no value for region(s) {missing}; given for {sorted(values)}, "
                            f"the mesh has regions {ids}", key=key)
        if min(ids) < 0:
            raise CaseError(f"region ids must be non-negative, got {min(ids)}", key=key)
        table = np.zeros(max(ids) + 1)
        for r in ids:
            table[r] = float(values[r])
        out = table[disc.regions]
    else:
        out = np.full(len(disc.regions), float(values))
    if not np.all(np.isfinite(out)):
        raise CaseError(f"{key} must be finite, got {values!r}", key=key)
    return out


def assemble_volume(
    disc: VolumeDiscretisation,
    inverse_mass: Mapping[int, float] | float = 1.0,
    potential: Mapping[int, float] | float | None = None,
    potential_function: Callable[[np.ndarray, np.ndarray, np.ndarray], np.ndarray] | None = None,
) -> tuple[sp.csr_matrix, sp.csr_matrix]:
    """Assemble K and M on every degree of freedom (walls are imposed afterwards).

    Parameters
    ----------
    disc
        The discretisation.
    inverse_mass
        Region -> m0 / m (positive), or one number for all regions.
    potential
        Region -> potential offset in lambda units (2 m0 V / hbar^2), or one
        number; default 0.
    potential_function
        Optional V(x, y, z) in the same units, arrays in and out, added to the
        offsets at the quadrature points.

    Returns
    -------
    K, M : scipy.sparse.csr_matrix
        Symmetric (Ndofs, Ndofs) matrices.

    Raises
    ------
    CaseError
        A region with no value, a non-positive inverse mass, a potential
        function returning the wrong shape or non-finite values.

    Examples
    --------
    >>> from shellmodes.volume import shell_mesh, discretise
    >>> d = discretise(shell_mesh([1.0, 2.0], 0, 1), 1)
    >>> K, M = assemble_volume(d, {0: 1.0})
    >>> round(float(M.sum()), 3)  # volume of the straight-sided shell (exact 28 pi / 3 = 29.32)
    17.753
    """
    c = _per_element(inverse_mass, disc, "inverse_mass", None)
    if np.any(c <= 0):
        k = int(np.argmin(c))
        raise CaseError(f"inverse mass {c[k]} in region {int(disc.regions[k])} must be positive",
                        key="inverse_mass")
    offset = _per_element(potential, disc, "potential", 0.0)
    basis = disc.basis
    nqp = basis.X.shape[1]
    v = np.repeat(offset[:, None], nqp, axis=1)
    if potential_function is not None:
        x = basis.mapping.F(basis.X)  # (3, Nelements, Nqp)
        extra = np.asarray(potential_function(x[0], x[1], x[2]), dtype=float)
        try:
            extra = np.broadcast_to(extra, v.shape)
        except ValueError:
            raise CaseError(f"potential function returned shape {extra.shape} for points of shape "
                            f"{x[0].shape}", key="potential_function") from None
        if not np.all(np.isfinite(extra)):
            raise CaseError("potential function returned non-finite values", key="potential_function")
        v = v + extra
    K = _hamiltonian.assemble(basis, c=np.repeat(c[:, None], nqp, axis=1), v=v)
    M = _overlap.assemble(basis)
    return K.tocsr(), M.tocsr()


def free_dofs(disc: VolumeDiscretisation, dirichlet: Iterable[str] = ("outer",)) -> np.ndarray:
    """Sorted indices of the degrees of freedom not fixed by Dirichlet walls.

    ``dirichlet`` names walls (``"inner"``, ``"outer"``) held at zero; the
    others are Neumann walls.
    """
    fixed = [disc.wall_dofs(name) for name in dirichlet]
    mask = np.ones(disc.ndofs, dtype=bool)
    for f in fixed:
        mask[f] = False
    return np.nonzero(mask)[0]


def restricted(A: sp.spmatrix, free: np.ndarray) -> sp.csr_matrix:
    """A[free][:, free] in one pass over the non-zeros (no double fancy indexing)."""
    A = A.tocoo()
    new = np.full(A.shape[0], -1, dtype=np.int64)
    new[free] = np.arange(len(free))
    i, j = new[A.row], new[A.col]
    keep = (i >= 0) & (j >= 0)
    n = len(free)
    return sp.csr_matrix((A.data[keep], (i[keep], j[keep])), shape=(n, n))
