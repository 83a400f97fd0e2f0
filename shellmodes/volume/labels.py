"""Radial and angular labels (n, l) of modes in spherically symmetric volumes.

A mode of a spherically symmetric problem is f(r) Y_lm(theta, phi) summed
over the m of one l.  Its angular content in degree l is the fraction of its
mass-matrix norm captured by the least-squares projection (weighted by M) on
span{g_j(r) Y_lm(d)}, with g_j piecewise-linear hat functions of the radius
and Y_lm the real harmonics of :mod:`shellmodes.harmonics`; different l are
orthogonal on every sphere, so the fractions add up to about 1.  The parent
degree is the l of largest content, and n is the 1-based place of the mode's
multiplet in the ladder of its l (modes are taken in ascending energy).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ..errors import CaseError
from ..harmonics import angles, real_sph_harm

__all__ = ["RadialAngularLabels", "radial_angular_labels"]


@dataclass(frozen=True, eq=False)
class RadialAngularLabels:
    """Labels of modes in ascending order.

    Attributes
    ----------
    n, l
        (nmodes,) radial order (1-based within the l-ladder) and parent degree.
    content
        (nmodes, l_max + 1) fraction of each mode's norm in each degree l.
    """

    n: np.ndarray
    l: np.ndarray
    content: np.ndarray

    def pairs(self) -> list[tuple[int, int]]:
        return [(int(a), int(b)) for a, b in zip(self.n, self.l)]

    def __repr__(self) -> str:
        shown = ", ".join(f"{a}{'spdfghiklm'[b] if b < 10 else b}" for a, b in self.pairs()[:8])
        return f"RadialAngularLabels({len(self.n)} modes: {shown}{', ...' if len(self.n) > 8 else ''})"


def _hats(r: np.ndarray, count: int) -> np.ndarray:
    """(N, count) piecewise-linear hat functions on [min r, max r]."""
    knots = np.linspace(r.min(), r.max(), count)
    if count == 1 or knots[-1] == knots[0]:
        return np.ones((len(r), 1))
    width = knots[1] - knots[0]
    return np.clip(1.0 - np.abs(r[:, None] - knots[None, :]) / width, 0.0, None)


def radial_angular_labels(
    nodes: np.ndarray,
    modes: np.ndarray,
    M: sp.spmatrix,
    l_max: int,
    radial_functions: int = 12,
) -> RadialAngularLabels:
    """Label modes (n, l) by their angular content on spheres of fixed radius.

    Parameters
    ----------
    nodes
        (N, 3) positions of the degrees of freedom (origin at the centre).
    modes
        (N, nmodes) nodal values, in ascending order of eigenvalue.
    M
        (N, N) mass matrix on the same degrees of freedom.
    l_max
        Highest degree tried.
    radial_functions
        Number of radial hat functions in the projection.

    Returns
    -------
    RadialAngularLabels

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> rng = np.random.default_rng(0)
    >>> x = rng.normal(size=(400, 3))
    >>> lab = radial_angular_labels(x, x[:, 2:3], sp.identity(400), 3)
    >>> lab.pairs()
    [(1, 1)]
    """
    nodes = np.asarray(nodes, dtype=float)
    modes = np.asarray(modes, dtype=float)
    if modes.ndim == 1:
        modes = modes[:, None]
    if nodes.shape != (modes.shape[0], 3):
        raise CaseError(f"nodes have shape {nodes.shape} for modes of shape {modes.shape}; need (N, 3)")
    if M.shape != (len(nodes), len(nodes)):
        raise CaseError(f"mass matrix has shape {M.shape} for {len(nodes)} nodes")
    if l_max < 0:
        raise CaseError(f"l_max must be >= 0, got {l_max}")
    theta, phi = angles(nodes)
    hats = _hats(np.linalg.norm(nodes, axis=1), radial_functions)
    MU = M @ modes
    norms = np.einsum("ij,ij->j", modes, MU)
    content = np.zeros((modes.shape[1], l_max + 1))
    for l in range(l_max + 1):
        Y = np.column_stack([real_sph_harm(l, m, theta, phi) for m in range(-l, l + 1)])
        B = (hats[:, :, None] * Y[:, None, :]).reshape(len(nodes), -1)
        rhs = B.T @ MU
        G = B.T @ (M @ B)
        coef = np.linalg.lstsq(G, rhs, rcond=1e-12)[0]
        content[:, l] = np.einsum("ij,ij->j", coef, rhs) / norms
    l_of = np.argmax(content, axis=1)
    n_of = np.zeros(len(l_of), dtype=int)
    for l in range(l_max + 1):
        members = np.nonzero(l_of == l)[0]
        n_of[members] = np.arange(len(members)) // (2 * l + 1) + 1
    return RadialAngularLabels(n=n_of, l=l_of, content=content)
