"""Curved tetrahedral discretisations: geometry nodes, scikit-fem basis, walls, export cells.

Degree 1 uses straight tetrahedra (``MeshTet1``, ``ElementTetP1``).  Degree 2
is isoparametric: a ``MeshTet2`` whose edge-midpoint geometry nodes are the
images of the reference midpoints under the exact map of a
:class:`~shellmodes.fem.shellmesh.ShellMesh` (or the file's own
``tetra10`` nodes), with ``ElementTetP2`` on it.  scikit-fem 12 ships no
cubic tetrahedron (``ElementTetP3`` does not exist), so degree 3 is refused.

scikit-fem's P2 tetrahedron numbers its local nodes as the vertices, then the
edges 01, 12, 02, 03, 13, 23 (``ElementTetP2.doflocs``), which is also the
VTK / meshio ``tetra10`` order, so element DOFs are exported unchanged.

Points are (N, 3) on entry and exit; scikit-fem's (3, N) is used only here.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import skfem
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from shellmodes.errors import CaseError, MeshError
from shellmodes.fem.shellmesh import ShellMesh, signed_volumes

__all__ = ["VolumeDiscretisation", "discretise", "discretise_tetrahedra", "export_cells", "WALL_NAMES"]

_ELEMENTS = {1: skfem.ElementTetP1, 2: skfem.ElementTetP2}
_MESHES = {1: skfem.MeshTet1, 2: skfem.MeshTet2}
# quadrature exactness by degree: enough for the curved P2 Jacobian (the
# observed eigenvalue order is 4, see tests/test_volume_modes.py)
_QUADRATURE = {1: 2, 2: 4}
_LOCAL_EDGES = ((0, 1), (1, 2), (0, 2), (0, 3), (1, 3), (2, 3))
WALL_NAMES = ("inner", "outer")


@dataclass(frozen=True, eq=False)
class VolumeDiscretisation:
    """A tetrahedral mesh of one degree with its scikit-fem basis.

    Attributes
    ----------
    mesh
        ``skfem.MeshTet1`` (degree 1) or ``skfem.MeshTet2`` (degree 2).
    basis
        ``skfem.CellBasis`` of the Lagrange element of the same degree.
    nodes
        (Ndofs, 3) position of every degree of freedom.
    degree
        Element and geometry degree.
    regions
        (Nelements,) region id of each tetrahedron.
    walls
        Wall name (``"inner"``, ``"outer"``) -> boundary facet indices.
    h
        Largest straight edge length.
    source
        What the mesh came from (``"shell_mesh"`` or a file name).
    region_names
        Region id -> name given in the file (gmsh physical names of volumes).
    """

    mesh: skfem.Mesh
    basis: skfem.CellBasis
    nodes: np.ndarray
    degree: int
    regions: np.ndarray
    walls: dict = field(default_factory=dict)
    h: float = 0.0
    source: str = ""
    region_names: dict = field(default_factory=dict)

    @property
    def ndofs(self) -> int:
        return int(self.basis.N)

    @property
    def region_ids(self) -> list[int]:
        return sorted(int(r) for r in np.unique(self.regions))

    def wall_dofs(self, name: str) -> np.ndarray:
        """Degrees of freedom on the wall ``name`` (``"inner"`` or ``"outer"``)."""
        if name not in WALL_NAMES:
            raise CaseError(f"unknown wall {name!r}; allowed: {', '.join(WALL_NAMES)}", key="dirichlet")
        facets = self.walls.get(name, np.zeros(0, dtype=np.int64))
        if len(facets) == 0:
            if name == "inner":
                raise CaseError("there is no inner wall (the region is a ball)", key="dirichlet")
            return np.zeros(0, dtype=np.int64)
        return np.unique(self.basis.get_dofs(facets).flatten())

    def __repr__(self) -> str:
        return (f"VolumeDiscretisation(degree={self.degree}, elements={self.mesh.nelements}, "
                f"dofs={self.ndofs}, regions={self.region_ids}, h={self.h:.3g}, source={self.source!r})")


def _element_for(degree: int):
    if degree not in _ELEMENTS:
        raise CaseError(f"degree {degree!r} is not available for tetrahedra; allowed: 1, 2 "
                        "(scikit-fem 12 has no cubic tetrahedron)", key="degree")
    return _ELEMENTS[degree]


def discretise(shell: ShellMesh, degree: int = 1,
               quadrature_order: int | None = None) -> VolumeDiscretisation:
    """Curved discretisation of a generated shell or ball mesh.

    Parameters
    ----------
    shell
        Mesh from :func:`~shellmodes.fem.shellmesh.shell_mesh`.
    degree
        1 (straight P1) or 2 (P2 on isoparametric P2 geometry whose edge
        nodes are exact images of the reference midpoints).
    quadrature_order
        Exactness of the quadrature rule (default 2 for degree 1, 4 for 2).

    Raises
    ------
    MeshError
        An inverted or zero-volume curved tetrahedron.

    Examples
    --------
    >>> from shellmodes.fem.shellmesh import shell_mesh
    >>> d = discretise(shell_mesh([1.0, 2.0], level=1, layers_per_region=2), degree=2)
    >>> d.ndofs  # 126 vertices + 684 edges
    810
    """
    q = shell.radial
    nreg = shell.nregions
    tol = 1e-9

    def classify(mesh):
        facets = mesh.boundary_facets()
        fq = q[mesh.facets[:, facets]]
        walls = {"outer": facets[np.all(np.abs(fq - nreg) < tol, axis=0)]}
        if not shell.is_ball:
            walls["inner"] = facets[np.all(np.abs(fq) < tol, axis=0)]
        return walls

    return _build(shell.points, shell.tets, shell.regions, degree, shell.edge_midpoints,
                  quadrature_order, "shell_mesh", classify)


def discretise_tetrahedra(
    points: np.ndarray,
    tets: np.ndarray,
    regions: np.ndarray | None = None,
    degree: int = 1,
    source: str = "<tetrahedra>",
    quadrature_order: int | None = None,
) -> VolumeDiscretisation:
    """Discretisation of given tetrahedra (e.g. read from a file).

    Parameters
    ----------
    points
        (N, 3) node positions.
    tets
        (M, 4) vertex indices, or (M, 10) ``tetra10`` connectivity (vertices,
        then edges 01, 12, 02, 03, 13, 23).
    regions
        (M,) region ids; all 0 if omitted.
    degree
        1 or 2; with ``tetra10`` input degree 2 uses the given edge nodes,
        with ``tetra`` input degree 2 has straight edges.  Points no cell
        uses are dropped.
    source
        Named in error messages.

    Raises
    ------
    MeshError
        Inverted or zero-volume tetrahedra, bad connectivity.
    """
    points = np.asarray(points, dtype=float)
    tets = np.asarray(tets)
    if points.ndim != 2 or points.shape[1] != 3:
        raise MeshError(f"points have shape {points.shape}; need (N, 3)", source)
    if tets.ndim != 2 or tets.shape[1] not in (4, 10):
        raise MeshError(f"cells have shape {tets.shape}; need (M, 4) tetra or (M, 10) tetra10", source)
    if len(tets) == 0:
        raise MeshError("no tetrahedra", source)
    if tets.min() < 0 or tets.max() >= len(points):
        raise MeshError(f"cell refers to node {int(tets.max())} but there are {len(points)} points", source)
    regions = np.zeros(len(tets), dtype=np.int32) if regions is None else np.asarray(regions).astype(np.int32)
    if regions.shape != (len(tets),):
        raise MeshError(f"{regions.size} region ids for {len(tets)} tetrahedra", source)
    # compact the vertices (drop points no tetrahedron uses, e.g. surface-only nodes)
    used, corner = np.unique(tets[:, :4], return_inverse=True)
    corner = corner.reshape(-1, 4)
    vertices = points[used]
    vol = signed_volumes(vertices, corner)
    scale = np.max(np.abs(vol))
    bad = np.nonzero(vol <= 1e-12 * scale)[0]
    if len(bad):
        k = bad[0]
        what = "zero volume" if abs(vol[k]) <= 1e-12 * scale else "negative volume (inverted)"
        raise MeshError(f"tetrahedron {int(k)} has {what} {vol[k] / 6:.3g} at "
                        f"{np.array2string(vertices[corner[k]].mean(axis=0), precision=4)}; "
                        "vertices must be ordered right-handed", source)
    if tets.shape[1] == 10:
        keys = np.concatenate([_edge_keys(corner[:, [i, j]], len(vertices)) for i, j in _LOCAL_EDGES])
        where = np.concatenate([points[tets[:, 4 + k]] for k in range(6)])
        keys, first = np.unique(keys, return_index=True)
        where = where[first]

        def midpoints(pairs):
            return where[np.searchsorted(keys, _edge_keys(pairs, len(vertices)))]
    else:
        def midpoints(pairs):
            return 0.5 * (vertices[pairs[:, 0]] + vertices[pairs[:, 1]])

    def classify(mesh):
        return _walls_by_component(mesh)

    return _build(vertices, corner, regions, degree, midpoints, quadrature_order, source, classify)


def _edge_keys(pairs: np.ndarray, n: int) -> np.ndarray:
    pairs = np.sort(pairs, axis=1).astype(np.int64)
    return pairs[:, 0] * n + pairs[:, 1]


def _walls_by_component(mesh) -> dict:
    """Split the boundary into connected surfaces: the one reaching farthest out is ``outer``."""
    facets = mesh.boundary_facets()
    if len(facets) == 0:
        return {}
    fv = mesh.facets[:, facets]  # (3, F)
    n = mesh.nvertices
    rows = np.concatenate([fv[0], fv[1], fv[2]])
    cols = np.concatenate([fv[1], fv[2], fv[0]])
    graph = coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(n, n))
    _, label = connected_components(graph, directed=False)
    facet_label = label[fv[0]]
    reach = {c: np.max(np.linalg.norm(mesh.p[:, fv[:, facet_label == c].ravel()], axis=0))
             for c in np.unique(facet_label)}
    outer = max(reach, key=reach.get)
    return {"outer": facets[facet_label == outer], "inner": facets[facet_label != outer]}


def _build(vertices, tets, regions, degree, midpoints: Callable, quadrature_order, source, classify):
    element_type = _element_for(degree)
    p = np.ascontiguousarray(np.asarray(vertices, dtype=float).T)
    t = np.ascontiguousarray(np.asarray(tets).T)
    linear = skfem.MeshTet1(p, t)
    if degree == 1:
        mesh = linear
        nodes = vertices.copy()
    else:
        dofs = skfem.assembly.Dofs(linear, element_type())
        element_dofs = dofs.element_dofs  # (10, M); rows 4.. are the local edges
        nodes = np.zeros((dofs.N, 3))
        nodes[element_dofs[:4].ravel()] = vertices[linear.t.ravel()]
        edge_dofs = element_dofs[4:].ravel()  # (6 * M,) row-major over local edges
        pairs = np.vstack([linear.t[[i, j]].T for i, j in _LOCAL_EDGES])
        unique, first = np.unique(edge_dofs, return_index=True)
        nodes[unique] = midpoints(pairs[first])
        mesh = skfem.MeshTet2(np.ascontiguousarray(nodes.T), t)
    order = _QUADRATURE[degree] if quadrature_order is None else int(quadrature_order)
    basis = skfem.CellBasis(mesh, element_type(), intorder=order)
    if degree > 1:
        _check_jacobians(mesh, basis, source)
    pairs = np.vstack([linear.t[[i, j]].T for i, j in _LOCAL_EDGES])
    h = float(np.max(np.linalg.norm(vertices[pairs[:, 0]] - vertices[pairs[:, 1]], axis=1)))
    return VolumeDiscretisation(mesh=mesh, basis=basis, nodes=nodes, degree=degree,
                                regions=np.asarray(regions, dtype=np.int32), walls=classify(linear),
                                h=h, source=source)


def _check_jacobians(mesh, basis, source):
    """Signed Jacobian determinants at quadrature and node points must all be positive."""
    mapping = mesh._mapping()
    X = np.hstack([basis.X, skfem.ElementTetP2.doflocs.T])
    det = mapping.detDF(X)  # (M, Nqp + 10)
    scale = np.max(np.abs(det))
    bad = np.nonzero(np.min(det, axis=1) <= 1e-10 * scale)[0]
    if len(bad):
        k = int(bad[0])
        centre = mesh.doflocs[:, mesh.t[:, k]].mean(axis=1)
        raise MeshError(f"curved tetrahedron {k} is inverted or flat (Jacobian {np.min(det[k]):.3g}) at "
                        f"{np.array2string(centre, precision=4)}; curved edges must not fold the element",
                        source or None)


def export_cells(disc: VolumeDiscretisation):
    """Point and cell data for a VTU file.

    Returns
    -------
    points : (Ndofs, 3) ndarray
        Position of every degree of freedom (mode values are point data).
    cells : list of (str, ndarray)
        ``[("tetra", (M, 4))]`` or ``[("tetra10", (M, 10))]`` in meshio/VTK order.
    cell_data : dict
        ``{"region": [(M,) ids]}``.

    Examples
    --------
    >>> from shellmodes.fem.shellmesh import shell_mesh
    >>> pts, cells, data = export_cells(discretise(shell_mesh([1.0, 2.0], 0, 1), degree=2))
    >>> cells[0][0], cells[0][1].shape
    ('tetra10', (60, 10))
    """
    cell_type = {1: "tetra", 2: "tetra10"}[disc.degree]
    connectivity = np.ascontiguousarray(disc.basis.element_dofs.T)
    return disc.nodes.copy(), [(cell_type, connectivity)], {"region": [disc.regions.copy()]}
