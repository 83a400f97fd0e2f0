"""Weak forms and the discretised surface problem.

Dimensionless form (lengths in the case's length unit L, reference energy
E0 = hbar^2 / (2 m L^2), or hbar^2 R^2 / (2 I) for a rigid rotor):

    integral grad_S u . grad_S v + v(x) u v  =  lam * integral u v,

with v = V / E0 and E = E0 * lam.  A hard (Dirichlet) rim removes the rim
degrees of freedom with one index operation; a free (Neumann) rim is the
natural condition and needs nothing.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
import skfem
from skfem import BilinearForm
from skfem.helpers import dot, grad

from shellmodes.case.model import point_potential
from shellmodes.fem.assemble import restricted
from shellmodes.fem.surface import CurvedSurface

__all__ = ["SurfaceProblem", "assemble_surface", "stiffness", "mass", "potential_form"]


@BilinearForm
def stiffness(u, v, w):
    return dot(grad(u), grad(v))


@BilinearForm
def mass(u, v, w):
    return u * v


@BilinearForm
def potential_form(u, v, w):
    return w["pot"] * u * v


def potential_at(expression, x: np.ndarray) -> np.ndarray:
    """Evaluate a compiled expression at global points x of shape (3, ...)."""
    return point_potential(expression)(*x)


def expand(U: np.ndarray, free: np.ndarray, ndofs: int) -> np.ndarray:
    """Vectors on all ``ndofs`` dofs (zero elsewhere) from vectors on the ``free`` dofs."""
    if U.shape[0] == ndofs:
        return U
    full = np.zeros((ndofs,) + U.shape[1:], dtype=U.dtype)  # complex modes (magnetic fields) stay complex
    full[free] = U
    return full


@dataclass(frozen=True, eq=False)
class SurfaceProblem:
    """K u = lam M u on the free degrees of freedom of a curved surface.

    Attributes
    ----------
    surface : CurvedSurface
        The curved Lagrange surface.
    K, M : scipy.sparse.csr_matrix
        Stiffness (plus potential) and mass on the free dofs, lambda units.
    free : ndarray
        Indices of the free dofs (all but a hard rim's).
    area : float
        Area of the discrete surface.
    lower_bound : float
        A value at or below the lowest eigenvalue.
    rim : str or None
        ``"dirichlet"``, ``"neumann"`` or None for a closed surface.
    timings : dict
        Seconds spent per stage.
    """

    surface: CurvedSurface
    K: sp.csr_matrix
    M: sp.csr_matrix
    free: np.ndarray
    area: float
    lower_bound: float
    rim: str | None
    timings: dict = field(default_factory=dict)

    @property
    def ndofs(self) -> int:
        return self.K.shape[0]

    def expand(self, U: np.ndarray) -> np.ndarray:
        """Full nodal vectors (zeros on a hard rim) from free-DOF vectors."""
        return expand(U, self.free, self.surface.ndofs)

    @property
    def spectral_scale(self) -> float:
        """1/R_eq^2 with R_eq = sqrt(area / 4 pi): the size of the first nonzero eigenvalue / 2."""
        return 4.0 * np.pi / self.area

    def __repr__(self):
        return (f"SurfaceProblem(dofs={self.ndofs}, degree={self.surface.degree}, area={self.area:.6g}, "
                f"rim={self.rim!r})")


def assemble_surface(surface: CurvedSurface, potential: Callable[..., np.ndarray] | None = None,
                     rim: str | None = None) -> SurfaceProblem:
    """Assemble stiffness (+ potential) and mass on ``surface``.

    Parameters
    ----------
    surface
        A :class:`CurvedSurface`.
    potential
        Optional compiled expression (see :mod:`shellmodes.case.expression`)
        giving v = V / E0 in 1/L^2 at global points.
    rim
        ``"dirichlet"`` or ``"neumann"`` for open surfaces; ignored when closed.
    """
    t0 = time.perf_counter()
    basis = surface.basis
    K = skfem.asm(stiffness, basis)
    M = skfem.asm(mass, basis)
    lower = 0.0
    if potential is not None:
        values = potential_at(potential, np.asarray(basis.global_coordinates()))
        if not np.all(np.isfinite(values)):
            raise ValueError("the potential is not finite everywhere on the surface")
        K = K + skfem.asm(potential_form, basis, pot=values)
        lower = min(0.0, float(np.min(values)))
    ones = np.ones(basis.N)
    area = float(ones @ (M @ ones))
    free = np.arange(basis.N)
    boundary = surface.boundary_dofs
    if rim == "dirichlet" and len(boundary):
        free = np.setdiff1d(free, boundary)
        K, M = restricted(K, free), restricted(M, free)
    return SurfaceProblem(surface=surface, K=sp.csr_matrix(K), M=sp.csr_matrix(M), free=free, area=area,
                          lower_bound=lower, rim=rim if len(boundary) else None,
                          timings={"assembly": time.perf_counter() - t0})
