"""Radial and angular labels (n, l) of modes in spherically symmetric volumes.

A mode of a spherically symmetric problem is f(r) Y_lm(theta, phi) summed over
the m of one l.  Its angular content comes from
:func:`shellmodes.spectrum.angular.angular_content` with radial factors (Legendre
polynomials in r up to ``radial_degree``): the least-squares projection of
the nodal values on P_k(r) Y_lm(direction), weighted by the mass matrix, so
the radial dependence is integrated out on spheres of fixed r.  The parent
degree l is the one of largest weight, and n is the 1-based place of the
mode's multiplet in the ladder of its l (modes are taken in ascending
energy), i.e. one more than the number of radial nodes for an exact
spherically symmetric problem.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from shellmodes.errors import CaseError
from shellmodes.spectrum.angular import angular_content

__all__ = ["RadialAngularLabels", "radial_angular_labels"]


@dataclass(frozen=True, eq=False)
class RadialAngularLabels:
    """Labels of modes in ascending order.

    Attributes
    ----------
    n, l
        (nmodes,) radial order (1-based within the l-ladder) and parent degree.
    content
        (nmodes, l_max + 1) weight of each degree l in each mode.
    """

    n: np.ndarray
    l: np.ndarray
    content: np.ndarray

    def pairs(self) -> list[tuple[int, int]]:
        return [(int(a), int(b)) for a, b in zip(self.n, self.l)]

    def __repr__(self) -> str:
        letters = "spdfghiklm"
        shown = ", ".join(f"{a}{letters[b] if b < len(letters) else b}" for a, b in self.pairs()[:8])
        return f"RadialAngularLabels({len(self.n)} modes: {shown}{', ...' if len(self.n) > 8 else ''})"


def radial_angular_labels(nodes, modes, M, l_max: int, radial_degree: int = 6) -> RadialAngularLabels:
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
    radial_degree
        Legendre degree in r of the radial factors of the projection.

    Returns
    -------
    RadialAngularLabels

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> x = np.random.default_rng(0).normal(size=(4000, 3))
    >>> radial_angular_labels(x, x[:, 2:3], sp.identity(4000), 3, radial_degree=2).pairs()
    [(1, 1)]
    """
    if l_max < 0:
        raise CaseError(f"l_max must be >= 0, got {l_max}", key="l_max")
    content = angular_content(nodes, modes, M, l_max, radial_degree=radial_degree)
    l_of = content.dominant_l.astype(int)
    n_of = np.zeros(len(l_of), dtype=int)
    for l in range(l_max + 1):
        members = np.nonzero(l_of == l)[0]
        n_of[members] = np.arange(len(members)) // (2 * l + 1) + 1
    return RadialAngularLabels(n=n_of, l=l_of, content=content.weights)
