"""Balls on layered prisms: the merged centre dof, the free space, and the bordered spherical preconditioner.

A ball's prisms (:func:`shellmodes.volume.prisms.prism_shell` with a first
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
one row and column (:class:`BallPreconditioner`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .prisms import PrismShell
from .separable import SphericalPreconditioner

__all__ = ["FreeSpace", "free_space", "BallPreconditioner"]


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
    >>> from shellmodes.volume.prisms import prism_shell
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


class BallPreconditioner:
    """Exact inverse of a concentric-sphere ball's ``K - shift M`` on the merged space.

    With the centre first, the matrix is bordered:
    ``[[d, v^T], [v, T]]`` where ``T = Ks (x) B + Ms (x) a`` on the non-centre
    radial dofs (``a = A - shift C``; inverted by fast diagonalisation,
    :class:`~shellmodes.volume.separable.SphericalPreconditioner`),
    ``v = (Ms 1) (x) a[rest, 0]`` (the ``Ks 1 (x) B`` part vanishes: Ks 1 = 0)
    and ``d = (1^T Ms 1) a[0, 0]``.  One solve with T per application, plus
    the Schur complement ``S = d - v^T T^-1 v`` (a number, formed once).
    """

    name = "spherical-reference-ball"

    def __init__(self, Ks, Ms, A, B, C, radial_free, shift: float, backend: str = "auto"):
        f = np.asarray(radial_free)
        rest = f[f != 0]
        self.inner = SphericalPreconditioner(Ks, Ms, A, B, C, rest, shift, backend=backend)
        a = A - shift * C
        m1 = Ms @ np.ones(Ks.shape[0])
        self.v = np.kron(m1, a[rest, 0])
        self.w = self.inner(self.v)
        self.schur = float(np.sum(m1) * a[0, 0] - self.v @ self.w)
        n = 1 + self.inner.shape[0]
        self.shape = (n, n)

    def __call__(self, X):
        X = np.asarray(X, dtype=float)
        vector = X.ndim == 1
        X = X.reshape(self.shape[0], -1)
        z = self.inner(X[1:])
        c = (X[0] - self.v @ z) / self.schur
        out = np.vstack([c[None, :], z - np.outer(self.w, c)])
        return out[:, 0] if vector else out
