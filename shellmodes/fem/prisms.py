"""Layered curved prisms for shells: a high-order surface element times a high-order radial element.

A shell between star-shaped walls ``r = R_0(s) < R_1(s) < ... < R_n(s)``
(``s`` a unit direction) is mapped from (direction, radial coordinate).  The
directions come from an icosphere triangulation; on each flat triangle with
corners ``v0, v1, v2`` the exact map onto the unit sphere is the central
projection ``s(xi) = X(xi) / |X(xi)|``, ``X = v0 + xi1 (v1 - v0) + xi2 (v2 - v0)``,
so the directions cover the sphere exactly.  Inside medium i the radius is
``rho = R_i + tau (R_{i+1} - R_i)`` with ``tau`` in [0, 1] split into equal
layers; the wall radii are interpolated by Lagrange polynomials of the
geometry degree on the triangle (exact for spheres).

The trial space is the tensor product of the Lagrange triangle of degree k
(scikit-fem's P1-P4) and a Lagrange interval of degree q on Gauss-Lobatto
nodes, continuous across layers and media.  Degrees of freedom are numbered
``surface_dof * n_radial + radial_dof``, so for concentric spherical walls the
matrices are exactly Kronecker sums (derivation in :func:`kronecker_factors`)
and the eigenproblem separates (:mod:`shellmodes.eigen.separable`).

A ball (no inner wall, first wall ``None``) collapses the innermost layer to
the centre: its inner wall is the radius 0, the ``n_surface`` centre nodes of
radial dof 0 coincide, and :mod:`shellmodes.volume.ball` merges them into one
dof (a purely radial function; every other basis function vanishes at r = 0).
Quadrature uses Gauss points in the radial direction, never the centre itself.
Layers inside a medium are equal unless ``fractions`` grade them.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import skfem
from skfem.quadrature import get_quadrature
from skfem.refdom import RefTri

from shellmodes.errors import GeometryError
from shellmodes.fem.shellmesh import as_wall, check_wall_order
from shellmodes.fem.surface import lagrange_element, lattice_cells
from shellmodes.shapes.reference import icosphere

__all__ = ["PrismShell", "prism_shell", "assemble_prisms", "kronecker_factors", "lobatto_nodes", "export_prisms"]


def lobatto_nodes(q: int) -> np.ndarray:
    """Gauss-Lobatto nodes of degree ``q`` on [0, 1] (the ends and the roots of P_q')."""
    if q < 1:
        raise ValueError(f"radial degree must be at least 1, got {q}")
    inner = np.polynomial.legendre.Legendre.basis(q).deriv().roots() if q > 1 else np.zeros(0)
    return np.concatenate([[0.0], 0.5 * (np.sort(inner.real) + 1.0), [1.0]])


def _lagrange_1d(nodes: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Values and derivatives (len(nodes), len(x)) of the Lagrange polynomials on ``nodes``."""
    n = len(nodes)
    V = np.ones((n, len(x)))
    D = np.zeros((n, len(x)))
    for a in range(n):
        others = [b for b in range(n) if b != a]
        denom = np.prod([nodes[a] - nodes[b] for b in others])
        for b in others:
            V[a] *= (x - nodes[b])
        for c in others:
            term = np.ones(len(x))
            for b in others:
                if b != c:
                    term = term * (x - nodes[b])
            D[a] += term
        V[a] /= denom
        D[a] /= denom
    return V, D


@dataclass(frozen=True, eq=False)
class PrismShell:
    """A layered prism discretisation of a shell between curved walls.

    Attributes
    ----------
    mesh
        ``skfem.MeshTri`` of the directions (topology only; its vertices are
        ``directions``).
    directions
        (Nv, 3) unit vectors of the icosphere vertices.
    surface_dofs
        (Nb, Ntri) global surface dof of each local triangle node.
    surface_nodes
        (Ns, 3) unit direction of every surface dof.
    tau
        (Nr,) radial coordinate of every radial dof: medium index plus the
        fraction across it (0 on the inner wall, n on the outer).
    radial_elements
        (Nlayer, q + 1) radial dofs of each layer.
    layer_region
        (Nlayer,) medium of each layer (0 is the innermost).
    walls
        Wall radius functions, inner to outer.
    wall_values
        (Nwall, Ng) wall radii at the geometry nodes.
    nodes
        (Ns * Nr, 3) position of every dof.
    """

    mesh: skfem.MeshTri
    directions: np.ndarray
    surface_dofs: np.ndarray
    surface_nodes: np.ndarray
    tau: np.ndarray
    radial_elements: np.ndarray
    layer_region: np.ndarray
    walls: tuple
    wall_values: np.ndarray
    geometry_dofs: np.ndarray
    nodes: np.ndarray
    degree: int
    radial_degree: int
    geometry_degree: int
    quadrature_order: int
    h: float
    source: str = "prism_shell"
    ball: bool = False

    @property
    def n_surface(self) -> int:
        return len(self.surface_nodes)

    @property
    def n_radial(self) -> int:
        return len(self.tau)

    @property
    def ndofs(self) -> int:
        return self.n_surface * self.n_radial

    @property
    def region_ids(self) -> list[int]:
        return sorted(int(r) for r in np.unique(self.layer_region))

    @property
    def nelements(self) -> int:
        return self.surface_dofs.shape[1] * len(self.radial_elements)

    @property
    def regions(self) -> np.ndarray:
        """(Nelements,) medium of every prism, triangle-major like the element loop."""
        return np.tile(self.layer_region, self.surface_dofs.shape[1])

    def wall_dofs(self, name: str) -> np.ndarray:
        """Dofs on the ``"inner"`` or ``"outer"`` wall."""
        if name not in ("inner", "outer"):
            raise ValueError(f"unknown wall {name!r}; allowed: inner, outer")
        r = 0 if name == "inner" else self.n_radial - 1
        return np.arange(self.n_surface) * self.n_radial + r

    def free_radial(self, dirichlet) -> np.ndarray:
        """Radial dof indices left free when the walls named in ``dirichlet`` are held at zero."""
        fixed = {0 if name == "inner" else self.n_radial - 1 for name in dirichlet}
        return np.array([r for r in range(self.n_radial) if r not in fixed])

    def free_dofs(self, dirichlet) -> np.ndarray:
        """Sorted dofs left free by the Dirichlet walls (surface-major, like the numbering).

        For a ball the centre dofs (radial dof 0) are not independent: use
        :func:`shellmodes.volume.ball.free_space`.
        """
        radial = self.free_radial(dirichlet)
        return (np.arange(self.n_surface)[:, None] * self.n_radial + radial[None, :]).ravel()

    def concentric_spheres(self) -> bool:
        """True when every wall is a sphere about the origin (the matrices separate)."""
        return bool(np.all(np.ptp(self.wall_values, axis=1) <= 1e-14 * np.max(np.abs(self.wall_values))))

    def __repr__(self) -> str:
        return (f"PrismShell(degree={self.degree}, radial_degree={self.radial_degree}, "
                f"triangles={self.surface_dofs.shape[1]}, layers={len(self.radial_elements)}, "
                f"dofs={self.ndofs} = {self.n_surface} x {self.n_radial}, regions={self.region_ids}, h={self.h:.3g}"
                + (", ball" if self.ball else "") + ")")


def prism_shell(walls: Sequence, level: int, layers_per_region: int | Sequence[int], degree: int = 2,
                radial_degree: int | None = None, geometry_degree: int | None = None,
                quadrature_order: int | None = None, fractions: Sequence | None = None) -> PrismShell:
    """Layered curved prisms between walls (numbers for spheres, or functions of directions).

    Parameters
    ----------
    walls
        Two or more wall radius functions ``R(directions (N, 3)) -> (N,)`` or
        numbers, inner to outer; ``len(walls) - 1`` media.  A first wall
        ``None`` makes a ball: the innermost medium reaches the centre.
    level
        Icosphere subdivisions of the directions (0..8).
    layers_per_region
        Radial elements across each medium (one number for all).
    degree, radial_degree, geometry_degree
        Lagrange degree on the triangle (1..4), across the layers (1..12,
        default ``degree``), and of the wall interpolation (default ``degree``).
    quadrature_order
        Exactness of the triangle rule (default ``2 * max(degree, geometry_degree) + 2``).
    fractions
        Per medium, ``None`` (equal layers) or the layer boundaries as
        increasing fractions of the medium's thickness from 0 to 1 (see
        :func:`shellmodes.volume.grading.layer_fractions`); they override
        ``layers_per_region`` for that medium.

    Raises
    ------
    GeometryError
        Fewer than two walls, walls that touch or cross, non-positive radii,
        bad layer counts, fractions or degrees.

    Examples
    --------
    >>> p = prism_shell([1.0, 2.0], level=0, layers_per_region=1, degree=2, radial_degree=2)
    >>> p.n_surface, p.n_radial, p.ndofs
    (42, 3, 126)
    """
    if len(walls) < 2:
        raise GeometryError(f"need at least two walls (one medium), got {len(walls)}")
    ball = walls[0] is None
    funcs = tuple(as_wall(w, i) for i, w in enumerate(walls))
    nreg = len(funcs) - 1
    layers = ((int(layers_per_region),) * nreg if isinstance(layers_per_region, (int, np.integer))
              else tuple(int(n) for n in layers_per_region))
    if len(layers) != nreg:
        raise GeometryError(f"layers_per_region has {len(layers)} entries for {nreg} media")
    if min(layers) < 1:
        raise GeometryError(f"every medium needs at least one layer, got {list(layers)}")
    bounds = _medium_fractions(layers, fractions)
    if not 0 <= int(level) <= 8:
        raise GeometryError(f"level {level} is outside 0..8")
    q = degree if radial_degree is None else int(radial_degree)
    g = degree if geometry_degree is None else int(geometry_degree)
    if not 1 <= q <= 12:
        raise GeometryError(f"radial degree {q} is outside 1..12")
    check_wall_order(funcs, min(int(level), 6))
    if ball:
        funcs = (_centre,) + funcs[1:]

    directions, triangles = icosphere(int(level))
    mesh = skfem.MeshTri(np.ascontiguousarray(directions[:, :2].T), np.ascontiguousarray(triangles.T))
    element, gelement = lagrange_element(degree), lagrange_element(g)
    sdofs = skfem.assembly.Dofs(mesh, element)
    gdofs = skfem.assembly.Dofs(mesh, gelement)
    surface_nodes = _projected_nodes(directions, mesh.t, element.doflocs, sdofs.element_dofs, sdofs.N)
    geometry_nodes = _projected_nodes(directions, mesh.t, gelement.doflocs, gdofs.element_dofs, gdofs.N)
    wall_values = np.array([np.asarray(f(geometry_nodes), dtype=float).reshape(-1) for f in funcs])

    local = lobatto_nodes(q)
    tau, elements, region = [0.0], [], []
    for i, edges in enumerate(bounds):
        for j in range(len(edges) - 1):
            start = len(tau) - 1
            tau.extend(i + edges[j] + local[1:] * (edges[j + 1] - edges[j]))
            elements.append(np.arange(start, start + q + 1))
            region.append(i)
    tau = np.array(tau)
    return PrismShell(mesh=mesh, directions=directions, surface_dofs=sdofs.element_dofs,
                      surface_nodes=surface_nodes, tau=tau, radial_elements=np.array(elements),
                      layer_region=np.array(region), walls=funcs, wall_values=wall_values,
                      geometry_dofs=gdofs.element_dofs, nodes=_dof_positions(surface_nodes, tau, funcs),
                      degree=degree,
                      radial_degree=q, geometry_degree=g,
                      quadrature_order=2 * max(degree, g) + 2 if quadrature_order is None else int(quadrature_order),
                      h=float(np.max(np.linalg.norm(directions[triangles] - directions[np.roll(triangles, 1, 1)],
                                                    axis=2))) * float(np.max(wall_values[-1])), ball=ball)


def _centre(d: np.ndarray) -> np.ndarray:
    """The inner 'wall' of a ball: radius 0 in every direction."""
    return np.zeros(len(d))


def _medium_fractions(layers, fractions) -> list[np.ndarray]:
    """Layer boundaries (fractions 0..1) of every medium: equal layers, or the graded ones given."""
    out = []
    given = [None] * len(layers) if fractions is None else list(fractions)
    if len(given) != len(layers):
        raise GeometryError(f"fractions has {len(given)} entries for {len(layers)} media")
    for i, (n, f) in enumerate(zip(layers, given)):
        if f is None:
            out.append(np.linspace(0.0, 1.0, n + 1))
            continue
        f = np.asarray(f, dtype=float)
        if f.ndim != 1 or len(f) < 2 or f[0] != 0.0 or f[-1] != 1.0 or np.any(np.diff(f) <= 0):
            raise GeometryError(f"layer fractions of medium {i} must rise strictly from 0 to 1, got {f.tolist()}")
        out.append(f)
    return out


def _projected_nodes(directions, t, doflocs, element_dofs, n):
    """Unit directions of the Lagrange nodes: central projections of their flat positions."""
    lam = np.column_stack([1.0 - doflocs[:, 0] - doflocs[:, 1], doflocs[:, 0], doflocs[:, 1]])
    flat = np.einsum("bv,ved->bed", lam, directions[t])
    out = np.zeros((n, 3))
    out[element_dofs.ravel()] = flat.reshape(-1, 3)
    return out / np.linalg.norm(out, axis=1)[:, None]


def _dof_positions(s: np.ndarray, tau: np.ndarray, funcs) -> np.ndarray:
    """(Ns * Nr, 3) positions: each surface direction s times the radius at each radial coordinate tau."""
    radii = np.array([np.asarray(f(s), dtype=float).reshape(-1) for f in funcs])  # (Nwall, Ns)
    medium = np.minimum(np.floor(tau).astype(int), len(funcs) - 2)
    frac = tau - medium
    rho = radii[medium].T * (1.0 - frac) + radii[medium + 1].T * frac  # (Ns, Nr)
    return (rho[:, :, None] * s[:, None, :]).reshape(-1, 3)


@dataclass(frozen=True)
class _Reference:
    """Reference tensor basis at the tensor quadrature points."""

    phi: np.ndarray      # (Nb, Qs) triangle values
    dphi: np.ndarray     # (Nb, 2, Qs)
    gphi: np.ndarray     # (Ng, Qs) geometry values
    dgphi: np.ndarray    # (Ng, 2, Qs)
    xi: np.ndarray       # (2, Qs)
    ws: np.ndarray       # (Qs,)
    psi: np.ndarray      # (q+1, Qr)
    dpsi: np.ndarray     # (q+1, Qr)
    eta: np.ndarray      # (Qr,)
    wr: np.ndarray       # (Qr,)


def _reference(disc: PrismShell) -> _Reference:
    X, W = get_quadrature(RefTri, disc.quadrature_order)
    element, gelement = lagrange_element(disc.degree), lagrange_element(disc.geometry_degree)

    def table(el):
        pairs = [el.lbasis(X, a) for a in range(el.doflocs.shape[0])]
        return np.array([p[0] for p in pairs]), np.array([p[1] for p in pairs])

    phi, dphi = table(element)
    gphi, dgphi = table(gelement)
    eta, wr = np.polynomial.legendre.leggauss(disc.radial_degree + 3)
    eta, wr = 0.5 * (eta + 1.0), 0.5 * wr
    psi, dpsi = _lagrange_1d(lobatto_nodes(disc.radial_degree), eta)
    return _Reference(phi, dphi, gphi, dgphi, X, W, psi, dpsi, eta, wr)


def _directions_at(disc: PrismShell, ref: _Reference, tri: np.ndarray):
    """Unit directions s (T, Qs, 3) and ds/dxi (T, Qs, 3, 2) on triangles ``tri``."""
    v = disc.directions[disc.mesh.t[:, tri]]  # (3, T, 3)
    E = np.stack([v[1] - v[0], v[2] - v[0]], axis=-1)  # (T, 3, 2)
    X = v[0][:, None, :] + np.einsum("tdj,jq->tqd", E, ref.xi)
    n = np.linalg.norm(X, axis=2)
    s = X / n[..., None]
    proj = E[:, None, :, :] - s[..., None] * np.einsum("tqd,tdj->tqj", s, E)[:, :, None, :]
    return s, proj / n[..., None, None]


def _orientation(disc: PrismShell, tri: np.ndarray) -> np.ndarray:
    """+1 where the chart (xi1, xi2, outward) of a triangle is right-handed, -1 where it is not."""
    v = disc.directions[disc.mesh.t[:, tri]]
    return np.sign(np.einsum("td,td->t", np.cross(v[1] - v[0], v[2] - v[0]), v[0] + v[1] + v[2]))


def _walls_at(disc: PrismShell, ref: _Reference, tri: np.ndarray):
    """Wall radii (Nwall, T, Qs) and their xi-gradients (Nwall, T, Qs, 2) on triangles ``tri``."""
    nodal = disc.wall_values[:, disc.geometry_dofs[:, tri]]  # (Nwall, Ng, T)
    return np.einsum("wgt,gq->wtq", nodal, ref.gphi), np.einsum("wgt,gjq->wtqj", nodal, ref.dgphi)


def _tensor_basis(ref: _Reference) -> tuple[np.ndarray, np.ndarray]:
    """Reference tensor basis values (Nb (q+1), Qs Qr) and gradients (Nb (q+1), Qs Qr, 3) in (xi1, xi2, eta).

    Basis index ``a * (q + 1) + b``, point index ``qs_index * Qr + qr_index``.
    """
    nb, nr1 = ref.phi.shape[0], ref.psi.shape[0]
    qs, qr = len(ref.ws), len(ref.wr)
    Phi = np.einsum("aq,br->abqr", ref.phi, ref.psi).reshape(nb * nr1, qs * qr)
    G = np.concatenate([np.einsum("ajq,br->abqrj", ref.dphi, ref.psi),
                        np.einsum("aq,br->abqr", ref.phi, ref.dpsi)[..., None]], axis=-1).reshape(nb * nr1, qs * qr, 3)
    return Phi, G


def prism_dofs(disc: PrismShell, tri: np.ndarray) -> np.ndarray:
    """(T L, Nb (q+1)) global dofs of the prisms on triangles ``tri`` (prism ``t * L + layer``)."""
    nb, nr1 = disc.surface_dofs.shape[0], disc.radial_elements.shape[1]
    return (disc.surface_dofs[:, tri].T[:, None, :, None] * disc.n_radial
            + disc.radial_elements[None, :, None, :]).reshape(len(tri) * len(disc.radial_elements), nb * nr1)


def prism_geometry(disc: PrismShell, ref: _Reference, tri: np.ndarray):
    """Points x (E, Q, 3), Jacobians J = dx/d(xi1, xi2, eta) (E, Q, 3, 3) and oriented det J (E, Q).

    E runs over the prisms on triangles ``tri`` (``t * L + layer``), Q over the
    tensor rule (``qs_index * Qr + qr_index``).

    Raises
    ------
    GeometryError
        A prism whose Jacobian is not positive at a quadrature point.
    """
    qs, qr = len(ref.ws), len(ref.wr)
    nlayer = len(disc.radial_elements)
    medium = disc.layer_region
    tau_ends = disc.tau[disc.radial_elements[:, [0, -1]]] - medium[:, None]  # (L, 2) local fractions
    s, ds = _directions_at(disc, ref, tri)
    R, dR = _walls_at(disc, ref, tri)
    lo, hi = R[medium], R[medium + 1]  # (L, T, Qs)
    dlo, dhi = dR[medium], dR[medium + 1]
    frac = tau_ends[:, 0, None] + np.outer(tau_ends[:, 1] - tau_ends[:, 0], ref.eta)  # (L, Qr)
    width = tau_ends[:, 1] - tau_ends[:, 0]  # (L,)
    rho = lo[..., None] + (hi - lo)[..., None] * frac[:, None, None, :]  # (L, T, Qs, Qr)
    drho = dlo[..., None, :] + (dhi - dlo)[..., None, :] * frac[:, None, None, :, None]  # (L,T,Qs,Qr,2)
    deta = (hi - lo)[..., None] * width[:, None, None, None]  # (L, T, Qs, 1) -> d rho / d eta
    c12 = (drho[..., None, :] * s[None, :, :, None, :, None]
           + rho[..., None, None] * ds[None, :, :, None, :, :])  # (L, T, Qs, Qr, 3, 2)
    c3 = np.broadcast_to(deta[..., None] * s[None, :, :, None, :], rho.shape + (3,))
    J = np.concatenate([c12, c3[..., None]], axis=-1)  # (L, T, Qs, Qr, 3, 3) columns d x / d (xi1, xi2, eta)
    J = J.transpose(1, 0, 2, 3, 4, 5).reshape(len(tri) * nlayer, qs * qr, 3, 3)
    # scikit-fem sorts triangle vertices, so a triangle's chart may be inward: det J then has
    # that triangle's orientation sign at every point, and a sign change means the prism folds
    det = np.linalg.det(J) * np.repeat(_orientation(disc, tri), nlayer)[:, None]
    if np.any(det <= 0):
        e = int(np.argmin(np.min(det, axis=1)))
        raise GeometryError(f"prism {tri[0] * nlayer + e} has a non-positive Jacobian "
                            f"({np.min(det):.3g}); the walls fold or cross")
    x = (rho[..., None] * s[None, :, :, None, :]).transpose(1, 0, 2, 3, 4).reshape(len(J), qs * qr, 3)
    return x, J, det


def assemble_prisms(disc: PrismShell, inverse_mass: dict, offsets: dict | None = None,
                    potential: Callable | None = None, chunk: int = 64) -> tuple[sp.csr_matrix, sp.csr_matrix]:
    """Stiffness K and mass M (lambda units) of the layered effective-mass problem on prisms.

    Same weak form as :func:`shellmodes.volume.assemble_volume`:
    ``K = sum_media (m0/m_i) grad u . grad v + (offset_i + V) u v``,
    ``M = u v``, on the exact prism map (see the module docstring).

    Raises
    ------
    GeometryError
        A prism whose Jacobian is not positive at a quadrature point.
    """
    offsets = offsets or {}
    ref = _reference(disc)
    nb, nr1 = ref.phi.shape[0], ref.psi.shape[0]
    qs, qr = len(ref.ws), len(ref.wr)
    Phi, G = _tensor_basis(ref)
    Gflat = G.reshape(nb * nr1, -1)
    nlayer = len(disc.radial_elements)
    medium = disc.layer_region
    K = sp.csr_matrix((disc.ndofs, disc.ndofs))
    M = sp.csr_matrix((disc.ndofs, disc.ndofs))
    ntri = disc.surface_dofs.shape[1]
    per = max(1, chunk // nlayer)
    index = np.int32 if disc.ndofs < 2**31 - 1 else np.int64
    pending: list = []
    flush_entries = 30_000_000  # element entries collected before they are summed into K and M
    for start in range(0, ntri, per):
        tri = np.arange(start, min(ntri, start + per))
        x, J, det = prism_geometry(disc, ref, tri)
        Jinv = np.linalg.inv(J)
        w = np.outer(ref.ws, ref.wr).ravel()[None, :] * det  # (E, Q)
        coeff = np.array([inverse_mass.get(int(r), 1.0) for r in medium])
        kappa = np.tile(coeff, len(tri))[:, None]
        C = (Jinv @ Jinv.transpose(0, 1, 3, 2)) * (w * kappa)[..., None, None]  # w kappa J^-1 J^-T
        H = np.zeros((len(w), nb * nr1, qs * qr, 3))
        for i in range(3):  # H = G . C, as nine broadcast products (far faster than einsum here)
            for j in range(3):
                H[..., j] += G[None, :, :, i] * C[:, None, :, i, j]
        Ke = H.reshape(len(w), nb * nr1, -1) @ Gflat.T
        Me = (Phi[None, :, :] * w[:, None, :]) @ Phi.T
        value = np.tile(np.array([offsets.get(int(r), 0.0) for r in medium]), len(tri))[:, None]
        if potential is not None:
            value = value + np.asarray(potential(x[..., 0], x[..., 1], x[..., 2]), dtype=float)
        if potential is not None or np.any(value):
            Ke = Ke + (Phi[None, :, :] * (w * value)[:, None, :]) @ Phi.T
        dofs = prism_dofs(disc, tri)
        rows = np.repeat(dofs, nb * nr1, axis=1).ravel()
        cols = np.tile(dofs, (1, nb * nr1)).ravel()
        pending.append((rows.astype(index), cols.astype(index), Ke.ravel(), Me.ravel()))
        if sum(len(b[0]) for b in pending) > flush_entries:
            K, M = _flush(K, M, pending)
    return _flush(K, M, pending)


def _flush(K, M, pending: list):
    """Add the collected element entries to K and M (one COO -> CSR conversion per batch)."""
    if not pending:
        return K, M
    rows, cols = np.concatenate([b[0] for b in pending]), np.concatenate([b[1] for b in pending])
    K, M = (A + sp.coo_matrix((np.concatenate([b[slot] for b in pending]), (rows, cols)), shape=A.shape).tocsr()
            for slot, A in ((2, K), (3, M)))
    pending.clear()
    return K, M


def kronecker_factors(disc: PrismShell, inverse_mass: dict, offsets: dict | None = None,
                      radial_potential: Callable | None = None):
    """Surface and radial factors of the matrices for concentric spherical walls.

    With ``x = rho(tau) s(xi)`` and ``s . ds/dxi = 0`` the metric is
    block-diagonal, ``det J = rho^2 h sqrt(g_s)`` with ``h = d rho / d eta``, and

        K = K_s (x) B + M_s (x) (A + D),   M = M_s (x) C,

    where K_s, M_s are the unit sphere's Laplace-Beltrami stiffness and mass
    on the same triangles and rule, and over the radial chain
    ``A = sum kappa rho^2 psi' psi' / h``, ``B = sum kappa h psi psi``,
    ``C = sum rho^2 h psi psi``, ``D = sum (V_i + V(rho)) rho^2 h psi psi`` (kappa = m0/m_i,
    V_i the medium's offset, V(rho) an optional radial potential).

    Returns ``(K_s, M_s, A + D, B, C)``.
    """
    if not disc.concentric_spheres():
        raise GeometryError("the matrices separate only for concentric spherical walls")
    offsets = offsets or {}
    ref = _reference(disc)
    ntri = disc.surface_dofs.shape[1]
    s, ds = _directions_at(disc, ref, np.arange(ntri))
    g = np.einsum("tqdi,tqdj->tqij", ds, ds)
    sqrtg = np.sqrt(np.linalg.det(g))
    ginv = np.linalg.inv(g)
    w = ref.ws[None, :] * sqrtg  # (T, Qs)
    Ke = np.einsum("aiq,tqij,bjq,tq->tab", ref.dphi, ginv, ref.dphi, w, optimize=True)
    Me = np.einsum("aq,tq,bq->tab", ref.phi, w, ref.phi, optimize=True)
    dofs = disc.surface_dofs.T
    nb = dofs.shape[1]
    rows, cols = np.repeat(dofs, nb, axis=1).ravel(), np.tile(dofs, (1, nb)).ravel()
    Ks = sp.csr_matrix((Ke.ravel(), (rows, cols)), shape=(disc.n_surface,) * 2)
    Ms = sp.csr_matrix((Me.ravel(), (rows, cols)), shape=(disc.n_surface,) * 2)
    radii = disc.wall_values[:, 0]
    nr = disc.n_radial
    A, B, C = (np.zeros((nr, nr)) for _ in range(3))
    for layer, medium in zip(disc.radial_elements, disc.layer_region):
        lo, hi = radii[medium], radii[medium + 1]
        t0, t1 = disc.tau[layer[0]] - medium, disc.tau[layer[-1]] - medium
        h = (hi - lo) * (t1 - t0)
        rho = lo + (hi - lo) * (t0 + (t1 - t0) * ref.eta)
        kappa = inverse_mass.get(int(medium), 1.0)
        block = np.ix_(layer, layer)
        A[block] += kappa * np.einsum("aq,q,bq->ab", ref.dpsi, ref.wr * rho**2 / h, ref.dpsi)
        value = np.full(len(rho), offsets.get(int(medium), 0.0))
        if radial_potential is not None:
            value = value + np.asarray(radial_potential(rho), dtype=float)
        A[block] += np.einsum("aq,q,bq->ab", ref.psi, ref.wr * value * rho**2 * h, ref.psi)
        B[block] += kappa * np.einsum("aq,q,bq->ab", ref.psi, ref.wr * h, ref.psi)
        C[block] += np.einsum("aq,q,bq->ab", ref.psi, ref.wr * rho**2 * h, ref.psi)
    return Ks, Ms, A, B, C


def export_prisms(disc: PrismShell):
    """Linear wedge cells on the Lagrange lattice of every prism, with region ids (meshio/VTK order).

    Each prism of degrees (k, q) becomes k^2 q wedges on its own nodes, the
    outer triangle first; the discretisation's export turns every cell to a
    positive volume (:func:`shellmodes.fem.orientation.positive_volume_cells`).  A ball's wedges that
    touch the centre collapse to tetrahedra (the outer triangle and the centre
    node of surface dof 0), oriented to a positive volume.
    """
    element = lagrange_element(disc.degree)
    sub = lattice_cells(element, disc.degree)  # (k^2, 3) local triangle nodes
    tri_global = disc.surface_dofs.T[:, sub]  # (T, k^2, 3)
    nr = disc.n_radial
    wedges, region, tets = [], [], None
    for layer, medium in zip(disc.radial_elements, disc.layer_region):
        for b in range(len(layer) - 1):
            inner, outer = tri_global * nr + layer[b], tri_global * nr + layer[b + 1]
            if disc.ball and layer[b] == 0:
                tri = outer.reshape(-1, 3)
                p = disc.nodes[tri]
                flip = np.einsum("td,td->t", np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), -p[:, 0]) < 0
                tri[flip] = tri[flip][:, ::-1]
                tets = np.column_stack([tri, np.zeros(len(tri), dtype=tri.dtype)])
                tet_region = np.full(len(tets), medium)
                continue
            wedges.append(np.concatenate([outer, inner], axis=2).reshape(-1, 6))
            region.append(np.full(wedges[-1].shape[0], medium))
    cells = [("wedge", np.concatenate(wedges))] if wedges else []
    regions = [np.concatenate(region)] if wedges else []
    if tets is not None:
        cells, regions = [("tetra", tets), *cells], [tet_region, *regions]
    return disc.nodes.copy(), cells, {"region": regions}
