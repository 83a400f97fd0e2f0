"""Curved surface finite elements: a scikit-fem mapping for triangles in 3-D.

scikit-fem's own mappings assume a square Jacobian, so triangles embedded in
3-D fail.  :class:`SurfaceMapping` supplies what :class:`skfem.CellBasis`
needs (``F``, ``DF``, ``detDF``, ``invDF``) for an isoparametric map of
degree k whose geometry nodes lie exactly on the true surface; the ordinary
bilinear forms then assemble the Laplace-Beltrami problem unchanged.

For a parametrisation x(X) with Jacobian J (3 x 2) the surface measure is
sqrt(det(J^T J)) dX and the tangential gradient of u(X) is
J (J^T J)^-1 grad_X u, i.e. ``invDF = (J^T J)^-1 J^T``
(Dziuk and Elliott, Acta Numerica 22 (2013), section 2.4).

Array layout: points enter and leave as (N, 3); scikit-fem's (3, N) is used
only inside this module.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import skfem
from skfem.mapping import Mapping

__all__ = ["SurfaceMapping", "CurvedSurface", "curved_surface", "lagrange_element", "lattice_cells"]

_ELEMENTS = {
    1: skfem.ElementTriP1,
    2: skfem.ElementTriP2,
    3: skfem.ElementTriP3,
    4: skfem.ElementTriP4,
}


def lagrange_element(degree: int) -> skfem.Element:
    """The scikit-fem Lagrange triangle of ``degree`` (1 to 4)."""
    try:
        return _ELEMENTS[degree]()
    except KeyError:
        raise ValueError(f"degree must be one of {sorted(_ELEMENTS)}, got {degree!r}") from None


class SurfaceMapping(Mapping):
    """Isoparametric map from the reference triangle to a curved triangle in 3-D.

    Parameters
    ----------
    element_dofs
        (Nbfun, Nelems) global node numbers of each element (scikit-fem order).
    nodes
        (3, Nnodes) geometry node positions.
    element
        The Lagrange element whose shape functions define the map.
    """

    def __init__(self, element_dofs: np.ndarray, nodes: np.ndarray, element: skfem.Element):
        self.t = element_dofs
        self.nodes = nodes
        self.elem = element
        self._cache: dict = {}

    def _shape(self, X: np.ndarray):
        key = ("shape", X.shape, X.tobytes())
        if key not in self._cache:
            phi, dphi = zip(*(self.elem.lbasis(X, i) for i in range(self.t.shape[0])))
            self._cache[key] = (np.array(phi), np.array(dphi))  # (Nb, Nqp), (Nb, 2, Nqp)
        return self._cache[key]

    def _element_nodes(self, tind):
        t = self.t if tind is None else self.t[:, tind]
        return self.nodes[:, t]  # (3, Nb, Nel)

    def F(self, X, tind=None):
        phi, _ = self._shape(X)
        return np.einsum("dbe,bq->deq", self._element_nodes(tind), phi)

    def DF(self, X, tind=None):
        key = ("DF", X.shape, X.tobytes(), None if tind is None else np.asarray(tind).tobytes())
        if key not in self._cache:
            _, dphi = self._shape(X)
            self._cache[key] = np.einsum("dbe,bjq->djeq", self._element_nodes(tind), dphi)
        return self._cache[key]

    def _metric(self, X, tind):
        J = self.DF(X, tind)
        G = np.einsum("dieq,djeq->ijeq", J, J)
        det = G[0, 0] * G[1, 1] - G[0, 1] * G[1, 0]
        return J, G, det

    def detDF(self, X, tind=None):
        _, _, det = self._metric(X, tind)
        if np.any(det <= 0):
            raise ValueError("degenerate curved triangle (zero surface Jacobian)")
        return np.sqrt(det)

    def invDF(self, X, tind=None):
        key = ("invDF", X.shape, X.tobytes(), None if tind is None else np.asarray(tind).tobytes())
        if key not in self._cache:
            J, G, det = self._metric(X, tind)
            Ginv = np.array([[G[1, 1], -G[0, 1]], [-G[1, 0], G[0, 0]]]) / det
            self._cache[key] = np.einsum("ijeq,djeq->ideq", Ginv, J)
        return self._cache[key]

    def normals_at(self, X, tind=None):
        """Unit normals (3, Nel, Nqp) of the discrete surface, J_1 x J_2 normalised."""
        J = self.DF(X, tind)
        n = np.cross(J[:, 0], J[:, 1], axis=0)
        return n / np.linalg.norm(n, axis=0)


def lattice_cells(element: skfem.Element, degree: int) -> np.ndarray:
    """Sub-triangles (k^2, 3) of the reference triangle on the element's nodes.

    Lagrange nodes of degree k sit on the lattice (i/k, j/k); connecting them
    gives k^2 flat sub-triangles, which is how degrees 1, 3 and 4 are exported.
    """
    locs = np.rint(element.doflocs * degree).astype(int)
    index = {tuple(p): n for n, p in enumerate(locs)}
    cells = []
    for i in range(degree):
        for j in range(degree - i):
            cells.append((index[(i, j)], index[(i + 1, j)], index[(i, j + 1)]))
            if i + j < degree - 1:
                cells.append((index[(i + 1, j)], index[(i + 1, j + 1)], index[(i, j + 1)]))
    return np.array(cells)


@dataclass(frozen=True, eq=False)
class CurvedSurface:
    """A curved Lagrange surface mesh of one degree and its scikit-fem basis.

    Attributes
    ----------
    mesh
        The topological scikit-fem mesh (its 2-D coordinates are unused).
    basis
        The :class:`skfem.CellBasis` on the curved geometry.
    nodes
        (Ndofs, 3) geometry nodes, one per degree of freedom.
    degree
        Polynomial degree of both the geometry and the elements.
    h
        Largest flat edge length of the reference triangulation.
    """

    mesh: skfem.MeshTri
    basis: skfem.CellBasis
    nodes: np.ndarray
    degree: int
    h: float
    geometry_degree: int | None = None
    #: (Nel,) True where scikit-fem's sorted vertex order runs against the triangle as given (None if unknown)
    input_flipped: np.ndarray | None = None

    @property
    def ndofs(self) -> int:
        return self.basis.N

    @property
    def boundary_dofs(self) -> np.ndarray:
        """Degrees of freedom on the rim (empty for a closed surface)."""
        facets = self.mesh.boundary_facets()
        if len(facets) == 0:
            return np.zeros(0, dtype=np.int64)
        return self.basis.get_dofs(facets).flatten()

    def __repr__(self) -> str:
        return (f"CurvedSurface(degree={self.degree}, geometry_degree={self.geometry_degree}, "
                f"elements={self.mesh.nelements}, "
                f"dofs={self.ndofs}, h={self.h:.3g})")


def curved_surface(
    points: np.ndarray,
    triangles: np.ndarray,
    degree: int,
    project: Callable[[np.ndarray], np.ndarray] | None = None,
    quadrature_order: int | None = None,
    element_nodes: np.ndarray | None = None,
    unwrap: Callable[[np.ndarray], np.ndarray] | None = None,
    geometry_degree: int | None = None,
) -> CurvedSurface:
    """Build a curved surface of ``degree`` from a flat reference triangulation.

    Parameters
    ----------
    points
        (N, 3) reference vertices.
    triangles
        (M, 3) vertex indices.
    degree
        Geometry and element degree, 1 to 4.
    project
        Exact map (K, 3) -> (K, 3) from reference positions to the true
        surface.  Every geometry node is the image of its position on the
        flat reference triangle.  ``None`` keeps flat positions.
    quadrature_order
        Exactness of the quadrature rule; by default ``2 * degree + 2`` so
        the curved Jacobian is integrated accurately.
    element_nodes
        Optional (M, 6) positions for quadratic input (meshio ``triangle6``
        order: vertices then edge midpoints 01, 12, 20); used for degree 2
        geometry instead of ``project``.
    geometry_degree
        Degree of the geometry map (default: ``degree``).  A higher one
        (superparametric) removes the geometric error that otherwise limits
        odd degrees to order k+1.
    unwrap
        Optional map of per-element corner coordinates (3, Nel, 3) that makes
        them contiguous on periodic reference charts (the torus seam).

    Returns
    -------
    CurvedSurface

    Examples
    --------
    >>> from shellmodes.shapes.reference import icosphere
    >>> p, t = icosphere(1)
    >>> s = curved_surface(p, t, 2, project=lambda x: x / np.linalg.norm(x, axis=1)[:, None])
    >>> s.ndofs
    162
    """
    points = np.asarray(points, dtype=float)
    triangles = np.asarray(triangles)
    element = lagrange_element(degree)
    gdegree = degree if geometry_degree is None else geometry_degree
    geometry_element = lagrange_element(gdegree)
    # scikit-fem needs a planar coordinate array for its topology bookkeeping;
    # the coordinates themselves are never used, the mapping carries geometry.
    mesh = skfem.MeshTri(np.ascontiguousarray(points[:, :2].T), np.ascontiguousarray(triangles.T))
    # scikit-fem sorts each triangle's vertices; use its ordering for the
    # affine reference map so local node positions match the global dofs.
    corners = points[mesh.t]  # (3 vertices, Nel, 3)
    if unwrap is not None:
        corners = unwrap(corners)
    gdofs = skfem.assembly.Dofs(mesh, geometry_element)
    tg = gdofs.element_dofs
    flat = _flat_positions(corners, geometry_element.doflocs, tg, gdofs.N)
    if element_nodes is not None and gdegree == 2:
        gnodes = _quadratic_nodes(mesh, triangles, element_nodes, tg, gdofs.N)
    elif project is not None:
        gnodes = np.asarray(project(flat), dtype=float)
    else:
        gnodes = flat
    mapping = SurfaceMapping(tg, np.ascontiguousarray(gnodes.T), geometry_element)
    order = 2 * max(degree, gdegree) + 2 if quadrature_order is None else quadrature_order
    basis = skfem.CellBasis(mesh, element, mapping=mapping, intorder=order)
    t = basis.element_dofs
    if gdegree == degree:
        nodes = gnodes
    else:  # positions of the solution's nodes on the curved geometry
        local = mapping.F(element.doflocs.T)  # (3, Nel, Nb)
        nodes = np.zeros((basis.N, 3))
        nodes[t.T.ravel()] = local.transpose(1, 2, 0).reshape(-1, 3)
    ends = gnodes[tg[:3]]  # vertex images, (3, Nel, 3)
    h = float(np.max(np.linalg.norm(ends - np.roll(ends, 1, axis=0), axis=2)))
    from shellmodes.fem.orientation import input_flips

    return CurvedSurface(mesh=mesh, basis=basis, nodes=nodes, degree=degree, h=h, geometry_degree=gdegree,
                         input_flipped=input_flips(triangles, mesh.t.T))


def _flat_positions(corners, doflocs, t, n):
    """Positions of Lagrange nodes on the flat reference triangles, one per global dof."""
    lam = np.column_stack([1.0 - doflocs[:, 0] - doflocs[:, 1], doflocs[:, 0], doflocs[:, 1]])  # (Nb, 3)
    local = np.einsum("bv,ved->bed", lam, corners)  # (Nb, Nel, 3)
    flat = np.zeros((n, 3))
    flat[t.ravel()] = local.reshape(-1, 3)  # shared nodes get the same position from each element
    return flat


def _quadratic_nodes(mesh, triangles, element_nodes, t, n):
    """Place degree-2 geometry nodes from meshio triangle6 data (vectorised over triangles)."""
    triangles = np.asarray(triangles)
    element_nodes = np.asarray(element_nodes, dtype=float)
    nvert = int(triangles.max()) + 1
    vertex_pos = np.zeros((nvert, 3))
    vertex_pos[triangles.ravel()] = element_nodes[:, :3].reshape(-1, 3)
    # the given midpoints, keyed by their edge (meshio order 01, 12, 20)
    ends = triangles[:, [[0, 1], [1, 2], [2, 0]]]  # (M, 3, 2)
    given = np.sort(ends, axis=2).reshape(-1, 2)
    given_keys = given[:, 0].astype(np.int64) * nvert + given[:, 1]
    order = np.argsort(given_keys)
    given_keys, given_pos = given_keys[order], element_nodes[:, 3:].reshape(-1, 3)[order]
    nodes = np.zeros((n, 3))
    for a in range(3):
        nodes[t[a]] = vertex_pos[mesh.t[a]]
    # scikit-fem P2 edge dofs follow the facets (0,1), (1,2), (0,2)
    for a, (i, j) in enumerate(((0, 1), (1, 2), (0, 2))):
        lo, hi = np.minimum(mesh.t[i], mesh.t[j]), np.maximum(mesh.t[i], mesh.t[j])
        nodes[t[3 + a]] = given_pos[np.searchsorted(given_keys, lo.astype(np.int64) * nvert + hi)]
    return nodes
