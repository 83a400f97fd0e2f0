"""The azimuthal form Q = integral (d u / d phi)(d v / d phi) on every kind of discretisation.

On a surface or a volume symmetric about the z axis, the rotation generator
L_z = -i d/dphi commutes with the Laplacian (and with media bounded by
axially symmetric walls and a potential independent of phi), so every
eigenspace splits into |m| classes.  With the tangent field t = e_z x X,
d u / d phi = t . grad u, and

    Q_ij = integral (t . grad phi_i)(t . grad phi_j)

is the matrix of -d^2/dphi^2 in the finite-element basis (integrated by
parts around each circle of latitude); :mod:`shellmodes.spectrum.azimuthal`
reads the |m| of each multiplet from it.

- scikit-fem bases (surfaces, curved tetrahedra): the form assembles directly
  (:func:`basis_azimuthal_matrix`);
- layered prisms (no scikit-fem basis): the same exact map and tensor rule as
  :func:`shellmodes.fem.prisms.assemble_prisms`, with the true volume
  Jacobian, ``d u / d phi = (J^-1 t) . grad_ref u`` (:func:`prism_azimuthal_matrix`);
- concentric spheres: d/dphi acts on the direction only and the volume
  element is ``r^2 dr dOmega``, so ``Q = Q_s (x) C`` exactly, with Q_s the unit
  sphere's azimuthal form on the prisms' triangles and C the radial mass
  factor of :func:`shellmodes.fem.prisms.kronecker_factors`.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

__all__ = ["basis_azimuthal_matrix", "prism_azimuthal_matrix", "prism_azimuthal_kronecker", "shape_axisymmetric",
           "rotation_invariant", "walls_axisymmetric", "AXIAL_SHAPES"]

#: surface shapes symmetric about the z axis whatever their parameters
AXIAL_SHAPES = ("sphere", "spheroid", "torus", "cap")
#: rotation angles about z at which a function is compared with itself (not multiples of 2 pi / n for small n)
_ANGLES = (0.7, 2.1, 4.0)
#: element entries collected before they are summed into Q (as in the prism assembly)
_FLUSH_ENTRIES = 30_000_000


def shape_axisymmetric(shape) -> bool:
    """True for a surface of revolution about z (an ellipsoid with equal x and y axes, a deformed sphere
    with only m = 0 terms)."""
    if shape.name in AXIAL_SHAPES:
        return True
    if shape.name == "ellipsoid":
        return bool(shape.axes[0] == shape.axes[1])
    return shape.name == "deformed_sphere" and all(m == 0 for _, m, _ in shape.deformation)


def rotation_invariant(function, points: np.ndarray, rtol: float = 1e-10) -> bool:
    """Whether ``function(points (N, 3)) -> (N,)`` is unchanged by rotations about z (checked at ``points``).

    The tolerance is relative to the largest value: the functions checked here
    (wall radii, potentials) are closed forms, so an invariant one agrees to rounding.

    Examples
    --------
    >>> d = np.random.default_rng(0).normal(size=(50, 3))
    >>> rotation_invariant(lambda p: p[:, 2] ** 2 + p[:, 0] ** 2 + p[:, 1] ** 2, d)
    True
    >>> rotation_invariant(lambda p: p[:, 0], d)
    False
    """
    points = np.asarray(points, dtype=float)
    base = np.asarray(function(points), dtype=float)
    scale = max(float(np.max(np.abs(base))), np.finfo(float).tiny) if base.size else 1.0
    for angle in _ANGLES:
        c, s = np.cos(angle), np.sin(angle)
        turned = points @ np.array([[c, s, 0.0], [-s, c, 0.0], [0.0, 0.0, 1.0]])
        if not np.allclose(np.asarray(function(turned), dtype=float), base, rtol=0.0, atol=rtol * scale):
            return False
    return True


def basis_azimuthal_matrix(basis) -> sp.csr_matrix:
    """Q = integral (t . grad u)(t . grad v), t = e_z x X, on a scikit-fem basis (surface or volume)."""
    import skfem

    @skfem.BilinearForm
    def form(u, v, w):
        x = w.x
        du = -x[1] * u.grad[0] + x[0] * u.grad[1]
        dv = -x[1] * v.grad[0] + x[0] * v.grad[1]
        return du * dv

    return skfem.asm(form, basis).tocsr()


def _sparse(blocks, dofs, n: int) -> sp.csr_matrix:
    """Element matrices (E, Nb, Nb) on element dofs (E, Nb) summed into an n x n matrix."""
    nb = dofs.shape[1]
    rows, cols = np.repeat(dofs, nb, axis=1).ravel(), np.tile(dofs, (1, nb)).ravel()
    return sp.csr_matrix((np.ravel(blocks), (rows, cols)), shape=(n, n))


def prism_azimuthal_matrix(disc, chunk: int = 64) -> sp.csr_matrix:
    """Q on every dof of a :class:`~shellmodes.fem.prisms.PrismShell`, by the prism assembly's map and rule.

    At each quadrature point ``d u / d phi = t . J^-T grad_ref u = (J^-1 t) . grad_ref u``
    with ``t = (-y, x, 0)`` and J the prism map's Jacobian; the weight is the
    rule's weight times det J.  A ball's centre copies are ordinary dofs here
    (vectors expanded from the merged space carry equal values on them).
    """
    from shellmodes.fem.prisms import _reference, _tensor_basis, prism_dofs, prism_geometry

    ref = _reference(disc)
    _, G = _tensor_basis(ref)  # (Nbasis, Q, 3)
    weights = np.outer(ref.ws, ref.wr).ravel()
    ntri = disc.surface_dofs.shape[1]
    per = max(1, chunk // len(disc.radial_elements))
    Q = sp.csr_matrix((disc.ndofs, disc.ndofs))
    blocks, dofs, entries = [], [], 0
    for start in range(0, ntri, per):
        tri = np.arange(start, min(ntri, start + per))
        x, J, det = prism_geometry(disc, ref, tri)
        t = np.stack([-x[..., 1], x[..., 0], np.zeros(x.shape[:2])], axis=-1)
        a = np.linalg.solve(J, t[..., None])[..., 0]  # (E, Q, 3): J^-1 t
        D = sum(G[None, :, :, j] * a[:, None, :, j] for j in range(3))  # (E, Nbasis, Q): d phi_b / d phi
        blocks.append((D * (weights[None, :] * det)[:, None, :]) @ D.transpose(0, 2, 1))
        dofs.append(prism_dofs(disc, tri))
        entries += blocks[-1].size
        if entries > _FLUSH_ENTRIES or start + per >= ntri:  # one COO -> CSR per batch, not per chunk
            Q = Q + _sparse(np.concatenate(blocks), np.concatenate(dofs), disc.ndofs)
            blocks, dofs, entries = [], [], 0
    return Q.tocsr()


def prism_azimuthal_kronecker(disc) -> sp.csr_matrix:
    """Q = Q_s (x) C for concentric spherical walls (see the module docstring).

    Q_s uses the prisms' central-projection chart of the unit sphere:
    ``d u / d phi = t . ds g^-1 grad_xi u`` with ``t = e_z x s`` and ``g = ds^T ds``.
    """
    from shellmodes.fem.prisms import _directions_at, _reference, kronecker_factors

    ref = _reference(disc)
    ntri = disc.surface_dofs.shape[1]
    s, ds = _directions_at(disc, ref, np.arange(ntri))  # (T, Qs, 3), (T, Qs, 3, 2)
    g = np.einsum("tqdi,tqdj->tqij", ds, ds)
    t = np.stack([-s[..., 1], s[..., 0], np.zeros(s.shape[:2])], axis=-1)
    a = np.linalg.solve(g, np.einsum("tqdi,tqd->tqi", ds, t)[..., None])[..., 0]  # (T, Qs, 2)
    D = np.einsum("ajq,tqj->taq", ref.dphi, a)
    w = ref.ws[None, :] * np.sqrt(np.linalg.det(g))
    Qs = _sparse((D * w[:, None, :]) @ D.transpose(0, 2, 1), disc.surface_dofs.T, disc.n_surface)
    C = kronecker_factors(disc, {})[4]
    return sp.kron(Qs, sp.csr_matrix(C)).tocsr()


def walls_axisymmetric(walls) -> bool:
    """Whether every wall radius function (None: a ball's missing inner wall) is symmetric about z."""
    d = np.random.default_rng(0).normal(size=(64, 3))  # seeded directions: reproducible
    d /= np.linalg.norm(d, axis=1)[:, None]
    return all(rotation_invariant(w, d) for w in walls if w is not None)
