"""Angular content of modes: how much of each spherical-harmonic degree l a mode holds.

A mode u on a star-shaped surface or in a shell is a function of the position
x; its direction from a centre, omega = (x - c)/|x - c|, is what the real
harmonics Y_lm of :mod:`shellmodes.harmonics` are evaluated at (the radial map
onto the unit sphere).  The harmonics are interpolated at the finite-element
nodes and compared with the modes in the mass-matrix (M) inner product, i.e.
in the L2 inner product of the discrete surface or volume itself.

Choice of projection (documented because the answer depends on it)
------------------------------------------------------------------
On a deformed surface the interpolated harmonics are not M-orthonormal: the
Gram matrix G = B^T M B of the analysing functions B differs from the identity
(the area element is not that of the unit sphere).  We therefore

1. fit u by least squares in the M norm: c = G^+ B^T M u (G^+ the
   pseudo-inverse on the numerically non-null part of G), so that B c is the
   M-orthogonal projection P u of u onto span(B).  The resolved fraction is
   ||P u||_M^2 / ||u||_M^2 <= 1; the rest is content above ``l_max`` (or
   not representable by the analysing functions);
2. split the resolved fraction among the degrees in proportion to the norms
   of the coefficient blocks measured on the unit sphere, where the Y_lm are
   orthonormal: w_l = resolved * sum_m |c_lm|^2 / sum_lm |c_lm|^2.

This is the spherical-harmonic content of the mode seen as a function of
direction (the expansion a physicist writes), fitted in the metric of the
actual surface.  It is exact for a function in span(B) (a spheroid's constant
ground state is pure l = 0, whatever G is), reduces to |<Y_lm, u>|^2 on the
sphere, and since c_l -> R^T c_l under any orthogonal change of basis R inside
one l block it does not depend on the real/complex or rotated choice of
harmonics of one degree.  (A split by a symmetric orthonormalisation of B
would spread even an exact Y_00 over other degrees at first order in G - I,
which is why it is not used.)

Shells (volume modes)
---------------------
For a volume mode u(r, omega) = sum_lm f_lm(r) Y_lm(omega) the weight of l
is sum_m int f_lm(r)^2 r^2 dr / ||u||^2.  Projecting onto the harmonics alone
(constant in r) would only see the radial average of f_lm and miss modes with
radial nodes.  With ``radial_degree = d > 0`` the analysing functions are the
products P_k(s(r)) Y_lm(omega), k = 0..d, with P_k Legendre polynomials in the
radius mapped onto [-1, 1] over the nodes' radial range; the M inner product
then integrates the radial dependence out, and the coefficient block of l is
measured with the norm of sum_k c_lmk P_k(s(r)) Y_lm in r^2 dr dOmega over
that range.  For surfaces keep d = 0: there r is a function of omega and
radial factors would alias other degrees.

Memory: B and M B are dense (N, (l_max+1)^2 (d+1)) arrays.

Array layout: ``nodes`` (N, 3), ``modes`` (N, n_modes), as everywhere.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.linalg
import scipy.sparse as sp
from numpy.polynomial import legendre

from shellmodes.errors import MeshQualityWarning
from shellmodes.harmonics import angles, harmonic_labels, real_sph_harm_basis

__all__ = [
    "AngularContent", "HarmonicProjector", "angular_content", "multiplet_content", "harmonic_projector",
]

# More analysing functions than this fraction of the nodes cannot be told apart
# by interpolation on the mesh (common practice: a few nodes per wavelength).
_MAX_FUNCTIONS_PER_NODE = 1.0 / 8.0
# Above this Gram condition number the least-squares weights lose meaning.
_MAX_GRAM_CONDITION = 1e6


@dataclass(frozen=True)
class AngularContent:
    """Per-mode weights of each harmonic degree l.

    Attributes
    ----------
    weights
        (n_modes, l_max + 1) weight of each l; rows sum to <= 1, the remainder
        being content the analysis does not resolve (l > l_max).
    dominant_l
        (n_modes,) the l of largest weight.
    dominant_weight
        (n_modes,) that weight.
    mean_L2
        (n_modes,) <L^2>/hbar^2 = sum_l l(l+1) w_l / sum_l w_l: the expectation
        in the resolved part, renormalised to it.
    abs_m
        (n_modes,) dominant |m| about the z axis (axisymmetric shapes), else None.
    l_max
        Highest degree analysed.
    """

    weights: np.ndarray
    dominant_l: np.ndarray
    dominant_weight: np.ndarray
    mean_L2: np.ndarray
    abs_m: np.ndarray | None
    l_max: int

    @property
    def unresolved(self) -> np.ndarray:
        """(n_modes,) weight not accounted for by degrees up to ``l_max``."""
        return 1.0 - self.weights.sum(axis=1)

    def __repr__(self) -> str:
        n = len(self.dominant_l)
        head = ", ".join(f"{l}:{w:.3f}" for l, w in zip(self.dominant_l[:6], self.dominant_weight[:6]))
        more = ", ..." if n > 6 else ""
        return f"AngularContent(modes={n}, l_max={self.l_max}, dominant l:weight=[{head}{more}])"


@dataclass(frozen=True, eq=False)
class HarmonicProjector:
    """Least-squares harmonic analysis on one mesh (see the module docstring).

    Attributes
    ----------
    M
        The mass matrix the inner product uses.
    B
        (N, n_functions) analysing functions at the nodes.
    gram
        The Gram matrix G = B^T M B.
    gram_pinv
        Its pseudo-inverse.
    radial_gram
        (d+1, d+1) Gram matrix of the radial factors in r^2 dr ([[1]] for surfaces).
    l, m, k
        (n_functions,) degree, order and radial index of each column.
    l_max
        Highest degree.
    condition
        Condition number of G.
    """

    M: object
    B: np.ndarray
    gram: np.ndarray
    gram_pinv: np.ndarray
    radial_gram: np.ndarray
    l: np.ndarray
    m: np.ndarray
    k: np.ndarray
    l_max: int
    condition: float

    def coefficients(self, vectors: np.ndarray) -> np.ndarray:
        """(n_functions, n_vectors) least-squares coefficients c = G^+ B^T M v."""
        return self.gram_pinv @ (self.B.T @ np.asarray(self.M @ vectors))

    def projected_norms(self, coefficients: np.ndarray) -> np.ndarray:
        """(n_vectors,) ||P v||_M^2 = c^T G c from the coefficients."""
        return np.einsum("iv,iv->v", coefficients, self.gram @ coefficients)

    def sphere_norms(self, coefficients: np.ndarray, key: str = "l") -> np.ndarray:
        """Norms on the unit sphere (times r^2 dr for shells) of the coefficient blocks.

        Returns (max key + 1, n_vectors): summed over the functions with the same
        degree (``key="l"``) or the same |m| (``key="abs_m"``).
        """
        n_radial = len(self.radial_gram)
        c = coefficients.reshape(n_radial, -1, coefficients.shape[1])  # (k, harmonic, vector)
        per_function = np.einsum("kjv,kq,qjv->jv", c, self.radial_gram, c)
        labels = self.l[: c.shape[1]] if key == "l" else np.abs(self.m[: c.shape[1]])
        out = np.zeros((self.l_max + 1, coefficients.shape[1]))
        np.add.at(out, labels, per_function)
        return out


def harmonic_projector(nodes, M, l_max: int, center=(0.0, 0.0, 0.0), radial_degree: int = 0):
    """Build the least-squares harmonic analysis of functions on a mesh.

    Parameters
    ----------
    nodes
        (N, 3) finite-element node positions.
    M
        (N, N) mass matrix (sparse or dense) of the same discretisation.
    l_max
        Highest degree analysed.
    center
        Centre of the radial map onto the unit sphere.
    radial_degree
        0 for surface modes; for volume modes the Legendre degree of the
        radial factors (see the module docstring).

    Returns
    -------
    HarmonicProjector

    Raises
    ------
    ValueError
        For inconsistent shapes, a negative ``l_max`` or ``radial_degree``, or
        all nodes at the centre.  (A node at the centre of a ball has no
        direction: there the harmonics with l > 0 are taken as 0, the limit of
        the degree-l part of any regular function.)

    Warns
    -----
    MeshQualityWarning
        When the analysing functions exceed 1/8 of the nodes or the Gram
        matrix has a condition number above 1e6: the mesh does not resolve
        ``l_max``.
    """
    nodes = np.asarray(nodes, dtype=float)
    if nodes.ndim != 2 or nodes.shape[1] != 3:
        raise ValueError(f"nodes must have shape (N, 3), got {nodes.shape}")
    if M.shape != (len(nodes), len(nodes)):
        raise ValueError(f"M has shape {M.shape}, expected {(len(nodes), len(nodes))} to match the nodes")
    if int(l_max) != l_max or l_max < 0:
        raise ValueError(f"l_max must be a non-negative integer, got {l_max!r}")
    if int(radial_degree) != radial_degree or radial_degree < 0:
        raise ValueError(f"radial_degree must be a non-negative integer, got {radial_degree!r}")
    l_max, radial_degree = int(l_max), int(radial_degree)
    offset = nodes - np.asarray(center, dtype=float)
    r = np.linalg.norm(offset, axis=1)
    at_center = r <= 1e-12 * max(float(r.max()), 1.0)
    if np.all(at_center):
        raise ValueError("every node lies at the centre: there is no direction to analyse")
    n_functions = (l_max + 1) ** 2 * (radial_degree + 1)
    if n_functions > _MAX_FUNCTIONS_PER_NODE * len(nodes):
        warnings.warn(f"{n_functions} analysing functions for {len(nodes)} nodes: the mesh cannot resolve "
                      f"l_max={l_max} (keep the count below {_MAX_FUNCTIONS_PER_NODE:.3g} of the nodes); "
                      "lower l_max or refine", MeshQualityWarning, stacklevel=3)
    theta, phi = angles(offset)
    Y = real_sph_harm_basis(l_max, theta, phi)
    # A node at the centre (a full ball) has no direction; a regular function's
    # degree-l part vanishes there like r^l, so harmonics with l > 0 are set to 0.
    Y[at_center, 1:] = 0.0
    labels = np.array(harmonic_labels(l_max))
    if radial_degree == 0:
        B, radial_index, radial_gram = Y, np.zeros(len(labels), dtype=int), np.ones((1, 1))
    else:
        span = float(r.max() - r.min())
        if span <= 1e-9 * float(r.max()):
            raise ValueError("radial_degree > 0 needs nodes spread in radius (a volume mesh); "
                             "use radial_degree=0 for surfaces")
        s = 2.0 * (r - r.min()) / span - 1.0
        P = legendre.legvander(s, radial_degree)  # (N, d + 1)
        B = (P[:, :, None] * Y[:, None, :]).reshape(len(nodes), -1)  # column = k * n_h + j
        radial_index = np.repeat(np.arange(radial_degree + 1), len(labels))
        labels = np.tile(labels, (radial_degree + 1, 1))
        # int P_k P_q r^2 dr over the radial range, exact by Gauss-Legendre in s
        x, w = legendre.leggauss(radial_degree + 2)
        Px = legendre.legvander(x, radial_degree)
        rx = r.min() + 0.5 * (x + 1.0) * span
        radial_gram = Px.T @ ((w * rx**2 * 0.5 * span)[:, None] * Px)
    MB = M @ B
    G = B.T @ MB
    G = 0.5 * (G + G.T)
    s_values, vectors = np.linalg.eigh(G)
    if s_values[0] <= 0:
        condition = np.inf
    else:
        condition = float(s_values[-1] / s_values[0])
    if condition > _MAX_GRAM_CONDITION:
        warnings.warn(f"harmonic Gram matrix condition number {condition:.3g} > {_MAX_GRAM_CONDITION:.0e}: "
                      f"the mesh does not resolve l_max={l_max} (or radial_degree={radial_degree}); "
                      "lower them or refine", MeshQualityWarning, stacklevel=3)
    # Drop numerically null directions rather than divide by ~0 (minimum-norm fit).
    keep = s_values > 1e-12 * s_values[-1]
    gram_pinv = (vectors[:, keep] / s_values[keep]) @ vectors[:, keep].T
    return HarmonicProjector(M=M, B=B, gram=G, gram_pinv=gram_pinv, radial_gram=radial_gram, l=labels[:, 0],
                             m=labels[:, 1], k=radial_index, l_max=l_max, condition=condition)


def _split(projector, coefficients, resolved):
    """Share ``resolved`` (n_vectors,) among degrees in proportion to each vector's sphere norms."""
    blocks = projector.sphere_norms(coefficients)
    total = blocks.sum(axis=0)
    return blocks * (resolved / np.where(total > 0, total, 1.0))


def _columns(modes, n_nodes):
    modes = np.asarray(modes, dtype=float)
    if modes.ndim == 1:
        modes = modes[:, None]
    if modes.ndim != 2 or modes.shape[0] != n_nodes:
        raise ValueError(f"modes must have shape ({n_nodes}, n_modes), got {modes.shape}")
    return modes


def _m_norms(M, modes):
    norms = np.einsum("ij,ij->j", modes, np.asarray(M @ modes))
    if np.any(norms <= 0):
        raise ValueError("a mode has zero (or negative) M-norm; is M a mass matrix?")
    return norms


def angular_content(nodes: np.ndarray, modes: np.ndarray, M: sp.spmatrix, l_max: int,
                    center: tuple[float, float, float] = (0.0, 0.0, 0.0), axisymmetric: bool = False,
                    radial_degree: int = 0, projector: HarmonicProjector | None = None) -> AngularContent:
    """Weight of each harmonic degree l in each mode (least squares in the M norm).

    Parameters
    ----------
    nodes
        (N, 3) node positions (surface or volume mesh).
    modes
        (N, n_modes) nodal values; any normalisation.
    M
        (N, N) mass matrix of the discretisation.
    l_max
        Highest degree analysed.
    center
        Centre of the radial map onto the unit sphere.
    axisymmetric
        If True, also report the dominant |m| about the z axis.
    radial_degree
        0 for surfaces; for shells, the Legendre degree in r of the radial
        factors (e.g. 6 for the lowest few radial states; the remainder
        ``1 - weights.sum(1)`` shows when it is too low).
    projector
        A :func:`harmonic_projector` already built for these nodes, M and
        parameters (saves building it again).

    Returns
    -------
    AngularContent

    Examples
    --------
    >>> import numpy as np
    >>> from skfem import asm
    >>> from skfem.models.poisson import mass
    >>> from shellmodes.fem.surface import curved_surface
    >>> from shellmodes.shapes.reference import icosphere
    >>> s = curved_surface(*icosphere(2), 2, project=lambda x: x / np.linalg.norm(x, axis=1)[:, None])
    >>> c = angular_content(s.nodes, s.nodes[:, 2], asm(mass, s.basis), l_max=3)
    >>> int(c.dominant_l[0]), bool(c.dominant_weight[0] > 0.999)
    (1, True)

    References
    ----------
    Least squares in a weighted inner product: G. H. Golub and C. F. Van Loan,
    *Matrix Computations*, 4th ed., sect. 6.1 (normal equations).
    """
    nodes = np.asarray(nodes, dtype=float)
    modes = _columns(modes, len(nodes))
    if projector is None:
        projector = harmonic_projector(nodes, M, l_max, center, radial_degree)
    c = projector.coefficients(modes)
    resolved = np.clip(projector.projected_norms(c) / _m_norms(M, modes), 0.0, 1.0)
    weights = _split(projector, c, resolved).T
    dominant = np.argmax(weights, axis=1)
    degrees = np.arange(l_max + 1)
    mean_L2 = (weights @ (degrees * (degrees + 1.0))) / np.where(resolved > 0, resolved, 1.0)
    abs_m = None
    if axisymmetric:
        abs_m = np.argmax(projector.sphere_norms(c, "abs_m"), axis=0)
    return AngularContent(weights=weights, dominant_l=dominant,
                          dominant_weight=weights[np.arange(len(dominant)), dominant],
                          mean_L2=mean_L2, abs_m=abs_m, l_max=int(l_max))


def multiplet_content(nodes: np.ndarray, modes: np.ndarray, M: sp.spmatrix, groups: Sequence[Sequence[int]],
                      l_max: int, center: tuple[float, float, float] = (0.0, 0.0, 0.0),
                      radial_degree: int = 0, projector: HarmonicProjector | None = None) -> list[dict]:
    """Weight of each degree l in the subspaces spanned by groups of modes.

    With Q an M-orthonormal basis of the group's span and C its coefficient
    matrix, the resolved fraction trace(Q^T M P Q) / size is shared among the
    degrees in proportion to the sphere norms ||C_l||_F^2 of the degree-l
    blocks.  Both are unchanged by Q -> Q R (R orthogonal), so the result does
    not depend on which vectors inside a degenerate multiplet the eigen-solver
    returned; for one mode it equals :func:`angular_content`.

    Parameters
    ----------
    nodes, modes, M, l_max, center, radial_degree, projector
        As in :func:`angular_content`.
    groups
        Sequence of sequences of mode (column) indices, e.g. the multiplets.

    Returns
    -------
    list of dict
        One per group: ``modes`` (the indices), ``size``, ``weights`` ((l_max+1,)
        array), ``l`` (dominant degree), ``purity`` (its weight),
        ``unresolved`` (1 - sum of weights) and ``mean_L2`` (<L^2>/hbar^2 of the
        subspace, renormalised to its resolved part).

    Raises
    ------
    ValueError
        For an empty group, an index out of range, or linearly dependent modes.
    """
    nodes = np.asarray(nodes, dtype=float)
    modes = _columns(modes, len(nodes))
    groups = [list(map(int, g)) for g in groups]
    for g in groups:
        if not g:
            raise ValueError("empty group of modes")
        if min(g) < -modes.shape[1] or max(g) >= modes.shape[1]:
            raise ValueError(f"group {g} refers to modes outside 0..{modes.shape[1] - 1}")
    if projector is None:
        projector = harmonic_projector(nodes, M, l_max, center, radial_degree)
    # one pass over the mesh for every group: with gram = L L^T, Q = V L^-T and the
    # coefficients of Q are those of V times L^-T; every group's whitened columns side by side,
    # so that the projections and sphere norms are two matrix products for all groups at once
    MV = np.asarray(M @ modes)
    CV = projector.gram_pinv @ (projector.B.T @ MV)
    whitening = []
    for g in groups:
        gram = modes[:, g].T @ MV[:, g]
        gram = 0.5 * (gram + gram.T)
        s_values = np.linalg.eigvalsh(gram)
        if s_values[0] <= 1e-10 * s_values[-1]:
            raise ValueError(f"modes {g} are linearly dependent in the M inner product")
        whitening.append(scipy.linalg.solve_triangular(np.linalg.cholesky(gram), np.eye(len(g)), lower=True).T)
    C = (sp.block_diag(whitening, format="csr").T @ CV[:, np.concatenate(groups)].T).T
    starts = np.cumsum([0] + [len(g) for g in groups])[:-1]
    projected = np.add.reduceat(projector.projected_norms(C), starts)
    blocks = np.add.reduceat(projector.sphere_norms(C), starts, axis=1)
    rows = []
    for k, g in enumerate(groups):
        resolved = min(float(projected[k]) / len(g), 1.0)
        total_blocks = blocks[:, k].sum()
        weights = blocks[:, k] * (resolved / total_blocks if total_blocks > 0 else resolved)
        dominant = int(np.argmax(weights))
        total = float(weights.sum())
        degrees = np.arange(len(weights))
        mean_L2 = float(weights @ (degrees * (degrees + 1.0))) / total if total > 0 else float("nan")
        rows.append({"modes": g, "size": len(g), "weights": weights, "l": dominant,
                     "purity": float(weights[dominant]), "unresolved": float(1.0 - total), "mean_L2": mean_L2})
    return rows
