"""Balls on layered prisms: the merged centre dof and the free space (the bordered preconditioner is in
:mod:`shellmodes.eigen.separable`).

A ball's prisms (:func:`shellmodes.fem.prisms.prism_shell` with a first
wall ``None``) collapse the innermost layer to the centre.  The ``n_surface``
dofs of radial index 0 then sit at one point; they are merged into ONE dof
whose basis function is ``psi_0(r)`` times the surface partition of unity,
i.e. purely radial.  Every other basis function vanishes at r = 0, so the
space is H1-conforming: the angular term ``|grad_s u|^2 / r^2`` times the
``r^2 dr`` weight stays finite, and the integrals use Gauss points in r
(never the centre itself).

The merged space is the range of a prolongation ``P`` (full dofs x free
dofs): column 0 is the sum of the centre dofs, the other columns select one
dof each.  The free dofs are numbered centre first, then
``surface * n_rest + radial`` over the other free radial dofs, so a shell's
fast diagonalisation still applies to the non-centre block; the centre adds
one row and column (:class:`shellmodes.eigen.separable.BallPreconditioner`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from shellmodes.fem.prisms import PrismShell

__all__ = ["FreeSpace", "free_space"]


@dataclass(frozen=True, eq=False)
class FreeSpace:
    """The unknowns left by the walls (and a ball's merged centre) as a prolongation to every dof."""

    P: sp.csr_matrix
    representative: np.ndarray
    radial_free: np.ndarray
    centre: bool

    @property
    def size(self) -> int:
        return self.P.shape[1]

    def restrict(self, A) -> sp.csr_matrix:
        """``P^T A P``: the matrix on the free unknowns."""
        return (self.P.T @ A @ self.P).tocsr()

    def expand(self, X: np.ndarray) -> np.ndarray:
        """Values on every dof (the centre value repeated on its ``n_surface`` copies)."""
        return self.P @ X

    def coordinates(self, U: np.ndarray) -> np.ndarray:
        """Free coordinates of full vectors that lie in the space (``U = P X`` gives ``X``)."""
        return U[self.representative]


def free_space(disc: PrismShell, dirichlet) -> FreeSpace:
    """The free unknowns of a prism shell or ball with the walls named in ``dirichlet`` held at zero.

    Examples
    --------
    >>> from shellmodes.fem.prisms import prism_shell
    >>> ball = prism_shell([None, 1.0], level=0, layers_per_region=1, degree=1, radial_degree=2)
    >>> space = free_space(ball, ["outer"])
    >>> ball.ndofs, space.size    # 12 x 3 dofs; 12 centre copies -> 1, outer wall fixed
    (36, 13)
    """
    ns, nr = disc.n_surface, disc.n_radial
    dirichlet = [w for w in dirichlet if not (disc.ball and w == "inner")]
    radial = disc.free_radial(dirichlet)
    rest = radial[radial != 0] if disc.ball else radial
    others = (np.arange(ns)[:, None] * nr + rest[None, :]).ravel()
    if disc.ball:
        rows = np.concatenate([np.arange(ns) * nr, others])
        cols = np.concatenate([np.zeros(ns, dtype=int), 1 + np.arange(len(others))])
        representative = np.concatenate([[0], others])
    else:
        rows, cols, representative = others, np.arange(len(others)), others
    P = sp.csr_matrix((np.ones(len(rows)), (rows, cols)), shape=(disc.ndofs, len(representative)))
    return FreeSpace(P=P, representative=representative, radial_free=radial, centre=bool(disc.ball))
