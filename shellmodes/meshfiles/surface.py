"""Reading and validating triangulated surface meshes supplied by users.

This module owns the way a surface mesh file enters shellmodes: a registry of
file formats read through meshio (:data:`SURFACE_FORMATS`), the conversion of
meshio's cells into one (N, 3) point array and one consistently oriented
(M, 3) triangle array (plus per-triangle node positions for quadratic
``triangle6`` cells), and the checks that make such a mesh fit for a finite
element eigen-problem: finite coordinates, valid indices, no degenerate
triangles, no duplicated vertices, manifold and consistently oriented edges,
one fan of triangles around every vertex, one connected piece.

Numbering in messages: triangles are counted from 0 over the triangle cells
of the file in file order (other cells are skipped); vertices are the file's
point indices from 0 (for STL, which has no shared vertices, the indices of
the welded vertices, so messages give positions as well).

Every check is vectorised over the whole mesh (sorting of edge keys, a k-d
tree for coincident vertices, a sparse graph for connectivity): a mesh of a
million triangles validates in a few seconds.
"""

from __future__ import annotations

import contextlib
import io
import logging
import os
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import NamedTuple

import meshio
import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from shellmodes.errors import MeshError

__all__ = [
    "SurfaceMeshData",
    "SurfaceFormat",
    "SURFACE_FORMATS",
    "register_surface_format",
    "read_surface_mesh",
    "validate_surface",
    "DUPLICATE_TOLERANCE",
    "DEGENERATE_TOLERANCE",
    "check_header_sizes",
    "check_coordinate_range",
]

log = logging.getLogger(__name__)

#: Two distinct vertices closer than this times the bounding-box diagonal are
#: "the same point".  Coordinates written with 16 significant digits round-trip
#: to ~1e-16 relative, while real vertex spacings are rarely below 1e-6 of the
#: model size; 1e-10 sits well between the two.
DUPLICATE_TOLERANCE = 1e-10

#: A triangle whose area is at most this times the mean edge length squared is
#: degenerate.  Exactly collinear corners give an area of round-off size,
#: about 1e-16 times the squared edge length (1e-13 for a mesh placed 1e3 of
#: its size away from the origin); 1e-12 stays above that and far below any
#: usable element.
DEGENERATE_TOLERANCE = 1e-12


@dataclass(frozen=True)
class SurfaceFormat:
    """One surface mesh file format that :func:`read_surface_mesh` accepts.

    Parameters
    ----------
    description
        Human-readable name used in messages.
    read
        Function taking a path (str) and returning a :class:`meshio.Mesh`.
    separate_facets
        True when the format stores every triangle's corners on their own
        (STL); exactly coincident vertices are then welded on reading instead
        of being reported as duplicated.
    """

    description: str
    read: Callable[[str], meshio.Mesh]
    separate_facets: bool = False


#: File-name suffix (lower case, with dot) -> format.
SURFACE_FORMATS: dict[str, SurfaceFormat] = {}


def register_surface_format(suffix: str, surface_format: SurfaceFormat) -> None:
    """Make files ending in ``suffix`` (e.g. ``".vtu"``) readable as ``surface_format``."""
    if not suffix.startswith("."):
        raise ValueError(f"suffix must start with '.', got {suffix!r}")
    SURFACE_FORMATS[suffix.lower()] = surface_format


# The per-format readers are called directly rather than through meshio.read:
# on a ReadError meshio.read prints the error and calls sys.exit(1).
register_surface_format(".vtu", SurfaceFormat("VTK XML unstructured grid", meshio.vtu.read))
register_surface_format(".vtk", SurfaceFormat("legacy VTK", meshio.vtk.read))
register_surface_format(".msh", SurfaceFormat("gmsh", meshio.gmsh.read))
register_surface_format(".stl", SurfaceFormat("STL", meshio.stl.read, separate_facets=True))
register_surface_format(".obj", SurfaceFormat("Wavefront OBJ", meshio.obj.read))
register_surface_format(".ply", SurfaceFormat("PLY", meshio.ply.read))
register_surface_format(".off", SurfaceFormat("OFF", meshio.off.read))


@dataclass(frozen=True, eq=False)
class SurfaceMeshData:
    """A validated triangulated surface read from a file.

    Arrays are read-only views.  ``eq=False`` because element-wise array
    comparison has no single truth value; compare the fields instead.

    Attributes
    ----------
    points
        (N, 3) float vertex positions; only vertices used by triangles
        (corner vertices for quadratic input).
    triangles
        (M, 3) int vertex indices into ``points``, consistently oriented.
    quadratic_nodes
        (M, 6, 3) node positions in meshio ``triangle6`` order (three corners,
        then the edge nodes of edges 01, 12, 20) when the file held quadratic
        triangles, else None.
    source
        The path as given to :func:`read_surface_mesh`.
    closed
        True when every edge is shared by exactly two triangles.
    """

    points: np.ndarray
    triangles: np.ndarray
    quadratic_nodes: np.ndarray | None
    source: str
    closed: bool

    def __post_init__(self):
        for name in ("points", "triangles", "quadratic_nodes"):
            value = getattr(self, name)
            if value is not None:
                # A read-only view, so the caller's own array keeps its flags.
                view = np.asarray(value).view()
                view.flags.writeable = False
                object.__setattr__(self, name, view)

    def __repr__(self) -> str:
        kind = "quadratic" if self.quadratic_nodes is not None else "flat"
        shape = "closed" if self.closed else "open"
        return (f"SurfaceMeshData({self.source!r}: {len(self.points)} points, "
                f"{len(self.triangles)} {kind} triangles, {shape})")


def read_surface_mesh(path: str | os.PathLike) -> SurfaceMeshData:
    """Read a triangulated surface from a mesh file and validate it.

    Parameters
    ----------
    path
        A file whose suffix is one of :data:`SURFACE_FORMATS` (``.vtu``,
        ``.vtk``, ``.msh``, ``.stl``, ``.obj``, ``.ply``, ``.off``).  Triangle
        cells (``triangle``) or quadratic triangle cells (``triangle6``) are
        used; other cells (lines, vertices, quads, volume cells) are ignored.

    Returns
    -------
    SurfaceMeshData
        Points and triangles with unused vertices dropped.  For ``triangle6``
        input, ``triangles`` holds the corners and ``quadratic_nodes`` the six
        node positions of every triangle.

    Raises
    ------
    MeshError
        When the file is missing, of an unknown kind, unreadable, holds no
        triangles, or fails a check of :func:`validate_surface`; for
        quadratic input also when two triangles place the node of a shared
        edge at different positions.

    Examples
    --------
    >>> import meshio, numpy as np, tempfile, os
    >>> p = np.array([[0., 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]])
    >>> t = np.array([[0, 2, 1], [0, 1, 3], [0, 3, 2], [1, 2, 3]])
    >>> name = os.path.join(tempfile.mkdtemp(), "tet.vtu")
    >>> meshio.write(name, meshio.Mesh(p, [("triangle", t)]))
    >>> mesh = read_surface_mesh(name)
    >>> mesh.points.shape, mesh.triangles.shape, mesh.closed
    ((4, 3), (4, 3), True)
    """
    source = os.fsdecode(path)
    file = Path(source)
    if not file.exists():
        raise MeshError("mesh file not found", source)
    if file.is_dir():
        raise MeshError("is a directory, not a mesh file", source)
    surface_format = SURFACE_FORMATS.get(file.suffix.lower())
    if surface_format is None:
        allowed = ", ".join(f"{suffix} ({fmt.description})" for suffix, fmt in SURFACE_FORMATS.items())
        raise MeshError(f"unknown mesh file suffix {file.suffix!r}; supported: {allowed}", source)
    if file.stat().st_size == 0:
        raise MeshError("mesh file is empty", source)

    check_header_sizes(source)
    mesh = _read_with_meshio(surface_format, source)
    points, cells = _surface_cells(mesh, source)
    # Index and coordinate checks come first: welding and gathering node
    # positions below index the point array with the cells.
    _check_indices(cells, len(points), source)
    _check_finite(points, _used_mask(cells, len(points)), source)
    check_coordinate_range(points[_used_mask(cells, len(points))], source)
    if surface_format.separate_facets:
        # meshio's STL reader happens to weld already; doing it here keeps
        # the guarantee for any facet format.  +0.0 turns -0.0 into 0.0, so
        # signed zeros weld whether np.unique compares values or bytes.
        points, inverse = np.unique(points + 0.0, axis=0, return_inverse=True)
        cells = inverse.reshape(-1)[cells]

    triangles = cells[:, :3]
    quadratic_nodes = points[cells] if cells.shape[1] == 6 else None
    edges = _validate(points, triangles, source)
    if quadratic_nodes is not None:
        _check_edge_nodes(quadratic_nodes, edges, _scale(points[_used_mask(triangles, len(points))]), source)
        _check_folds(quadratic_nodes, source)

    used, triangles = np.unique(triangles, return_inverse=True)
    return SurfaceMeshData(points=points[used], triangles=triangles.reshape(-1, 3),
                           quadratic_nodes=quadratic_nodes, source=source, closed=edges.closed)


def validate_surface(points, triangles, source: str = "<mesh>") -> bool:
    """Check that a triangulation is a valid surface for the eigen-solver.

    Vertices that no triangle uses are ignored.

    Parameters
    ----------
    points
        (N, 3) vertex positions.
    triangles
        (M, 3) integer vertex indices.
    source
        Name used in error messages (a file path, or ``"<mesh>"``).

    Returns
    -------
    bool
        True when the surface is closed (every edge shared by exactly two
        triangles), False when it has a boundary.

    Raises
    ------
    MeshError
        On the first of these found, in this order: wrong array shapes or
        types; no triangles; an index outside the points; a non-finite
        coordinate; two vertices at most :data:`DUPLICATE_TOLERANCE` times
        the bounding-box diagonal apart; a triangle of area at most
        :data:`DEGENERATE_TOLERANCE` times the mean edge length squared; an
        edge shared by more than two triangles; two triangles running along a
        shared edge in the same direction; a vertex where triangles meet
        without sharing an edge (pinch point); several disconnected pieces.

    Examples
    --------
    >>> import numpy as np
    >>> p = np.array([[0., 0, 0], [1, 0, 0], [0, 1, 0]])
    >>> validate_surface(p, np.array([[0, 1, 2]]))
    False
    """
    return _validate(points, triangles, source).closed


class _Edges(NamedTuple):
    """Edge table of a validated triangulation.

    ``pairs`` is (E, 2): for every edge shared by two triangles, the two
    half-edge numbers 3 * triangle + k, where half-edge k of a triangle runs
    from its corner k to corner (k + 1) % 3.
    """

    pairs: np.ndarray
    closed: bool


def _validate(points, triangles, source: str) -> _Edges:
    points, triangles = _as_arrays(points, triangles, source)
    _check_indices(triangles, len(points), source)
    used = _used_mask(triangles, len(points))
    _check_finite(points, used, source)
    scale = _scale(points[used])
    _check_duplicates(points, used, scale, source)
    _check_areas(points, triangles, source)
    edges = _check_edges(triangles, len(points), source)
    _check_vertex_fans(points, triangles, edges.pairs, source)
    _check_connected(triangles, edges.pairs, source)
    return edges


def _read_with_meshio(surface_format: SurfaceFormat, source: str) -> meshio.Mesh:
    captured = io.StringIO()
    try:
        # meshio prints its warnings to stderr (and numpy may warn inside its
        # parsers, e.g. when the STL reader sniffs an ASCII header as a binary
        # triangle count); library code must not print, so the text is caught
        # and passed on to logging.  Redirecting sys.stderr is process-wide:
        # do not read meshes from several threads at once.
        with contextlib.redirect_stderr(captured), contextlib.redirect_stdout(captured), \
                np.errstate(all="ignore"):
            return surface_format.read(source)
    except MemoryError:
        raise
    except (Exception, SystemExit) as exc:  # meshio's parsers fail with anything from ReadError to IndexError;
        # meshio.read prints and exits on a file no reader takes
        raise MeshError(f"cannot read as {surface_format.description} ({_describe(exc)})", source) from None
    finally:
        for line in captured.getvalue().splitlines():
            if line.strip():
                log.warning("meshio reading %s: %s", source, line.strip())


def _describe(exc: BaseException) -> str:
    """One line on why a parser failed."""
    # meshio often raises a bare ReadError() while handling the informative
    # error (an XML ParseError, say), so look down the chain for a message.
    while exc is not None:
        text = " ".join(str(exc).split())
        if text:
            text = text if isinstance(exc, meshio.ReadError) else f"{type(exc).__name__}: {text}"
            return text if len(text) <= 200 else text[:197] + "..."
        exc = exc.__cause__ or exc.__context__
    return "not a valid file of this kind"


def _surface_cells(mesh: meshio.Mesh, source: str) -> tuple[np.ndarray, np.ndarray]:
    """The point array (N, 3) and the triangle or triangle6 cells (M, 3 or 6) of a meshio mesh."""
    flat = [block.data for block in mesh.cells if block.type == "triangle" and len(block.data)]
    curved = [block.data for block in mesh.cells if block.type == "triangle6" and len(block.data)]
    if flat and curved:
        raise MeshError("mixes flat 'triangle' and quadratic 'triangle6' cells; use one kind "
                        "for the whole surface", source)
    if not flat and not curved:
        counts: dict[str, int] = {}
        for block in mesh.cells:
            counts[block.type] = counts.get(block.type, 0) + len(block.data)
        found = ", ".join(f"{kind} ({n})" for kind, n in counts.items()) or "no cells at all"
        raise MeshError(f"no triangle cells; found: {found}; a surface mesh needs 'triangle' or "
                        f"'triangle6' cells (triangulate polygons first)", source)
    # np.asarray with explicit dtypes also turns the big-endian arrays of
    # legacy VTK files into native ones.
    cells = np.concatenate([np.asarray(block, dtype=np.int64) for block in flat or curved])
    points = np.asarray(mesh.points, dtype=np.float64)
    if points.ndim == 2 and points.shape[1] == 2:
        # Planar formats may omit z; such a mesh is a flat surface in z = 0.
        points = np.column_stack([points, np.zeros(len(points))])
    if points.ndim != 2 or points.shape[1] != 3:
        raise MeshError(f"points have shape {points.shape}; expected (N, 3) coordinates", source)
    return points, cells


def _as_arrays(points, triangles, source: str) -> tuple[np.ndarray, np.ndarray]:
    try:
        points = np.asarray(points, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise MeshError(f"points are not an array of numbers ({exc})", source) from exc
    triangles = np.asarray(triangles)
    if points.ndim != 2 or points.shape[1] != 3:
        raise MeshError(f"points have shape {points.shape}; expected (N, 3)", source)
    if triangles.size == 0:
        raise MeshError("no triangles; a surface needs at least one", source)
    if triangles.dtype.kind not in "iu":
        raise MeshError(f"triangle vertex indices have type {triangles.dtype}; expected integers", source)
    if triangles.ndim != 2 or triangles.shape[1] != 3:
        raise MeshError(f"triangles have shape {triangles.shape}; expected (M, 3)", source)
    return points, triangles.astype(np.int64)


def _check_indices(cells: np.ndarray, n_points: int, source: str) -> None:
    bad = (cells < 0) | (cells >= n_points)
    if bad.any():
        row, col = np.argwhere(bad)[0]
        raise MeshError(f"triangle {row} refers to vertex {cells[row, col]}, but there are {n_points} "
                        f"vertices (allowed indices 0 to {n_points - 1}); {int(bad.any(axis=1).sum())} "
                        f"triangles have invalid indices", source)


def _used_mask(cells: np.ndarray, n_points: int) -> np.ndarray:
    used = np.zeros(n_points, dtype=bool)
    used[cells.reshape(-1)] = True
    return used


def _check_finite(points: np.ndarray, used: np.ndarray, source: str) -> None:
    bad = used & ~np.isfinite(points).all(axis=1)
    if bad.any():
        vertex = int(np.flatnonzero(bad)[0])
        raise MeshError(f"vertex {vertex} has coordinates {_position(points[vertex])}; coordinates must "
                        f"be finite ({int(bad.sum())} vertices are not)", source)


def _scale(points: np.ndarray) -> float:
    """Bounding-box diagonal, the length scale of the relative tolerances."""
    return float(np.linalg.norm(points.max(axis=0) - points.min(axis=0)))


def _check_duplicates(points: np.ndarray, used: np.ndarray, scale: float, source: str) -> None:
    index = np.flatnonzero(used)
    radius = DUPLICATE_TOLERANCE * scale
    pairs = cKDTree(points[index]).query_pairs(radius, output_type="ndarray")
    if len(pairs):
        pairs = np.sort(index[pairs], axis=1)
        a, b = pairs[np.lexsort(pairs.T[::-1])[0]]
        distance = np.linalg.norm(points[a] - points[b])
        raise MeshError(f"vertices {a} and {b} are at the same position {_position(points[a])} "
                        f"(distance {distance:.3g} <= {DUPLICATE_TOLERANCE:g} x bounding-box diagonal); "
                        f"{len(pairs)} such pairs; neighbouring triangles must share their vertices "
                        f"(merge duplicated vertices)", source)


def _check_areas(points: np.ndarray, triangles: np.ndarray, source: str) -> None:
    a, b, c = (points[triangles[:, k]] for k in range(3))
    ab, bc, ca = b - a, c - b, a - c
    area = 0.5 * np.sqrt(np.square(np.cross(ab, -ca)).sum(axis=1))
    mean_edge = np.mean([np.sqrt(np.square(side).sum(axis=1)).mean() for side in (ab, bc, ca)])
    threshold = DEGENERATE_TOLERANCE * mean_edge**2
    bad = area <= threshold
    if bad.any():
        tri = int(np.flatnonzero(bad)[0])
        a, b, c = triangles[tri]
        raise MeshError(f"triangle {tri} (vertices {a}, {b}, {c}) has zero area ({area[tri]:.3g} <= "
                        f"{DEGENERATE_TOLERANCE:g} x mean edge length squared = {threshold:.3g}); "
                        f"{int(bad.sum())} degenerate triangles; remove them", source)


def _check_edges(triangles: np.ndarray, n_points: int, source: str) -> _Edges:
    tails = triangles.reshape(-1)
    heads = triangles[:, [1, 2, 0]].reshape(-1)
    key = np.minimum(tails, heads) * n_points + np.maximum(tails, heads)
    order = np.argsort(key, kind="stable")
    key = key[order]
    starts = np.flatnonzero(np.r_[True, key[1:] != key[:-1]])
    counts = np.diff(np.r_[starts, len(key)])

    crowded = np.flatnonzero(counts > 2)
    if len(crowded):
        first = starts[crowded[0]]
        sharing = order[first:first + counts[crowded[0]]]
        a, b = sorted((tails[sharing[0]], heads[sharing[0]]))
        listed = ", ".join(str(t) for t in sharing // 3)
        raise MeshError(f"edge between vertices {a} and {b} is shared by {counts[crowded[0]]} triangles "
                        f"({listed}); at most two triangles may share an edge (non-manifold); "
                        f"{len(crowded)} such edges", source)

    pairs = np.column_stack([order[starts[counts == 2]], order[starts[counts == 2] + 1]])
    same = tails[pairs[:, 0]] == tails[pairs[:, 1]]
    if same.any():
        h0, h1 = pairs[np.flatnonzero(same)[0]]
        raise MeshError(f"triangles {h0 // 3} and {h1 // 3} both run along edge {tails[h0]} -> {heads[h0]}; "
                        f"neighbours must traverse a shared edge in opposite directions (consistent "
                        f"orientation); {int(same.sum())} such edges; reverse the vertex order of "
                        f"wrongly oriented triangles", source)
    return _Edges(pairs=pairs, closed=bool(np.all(counts == 2)))


def _check_vertex_fans(points: np.ndarray, triangles: np.ndarray, pairs: np.ndarray, source: str) -> None:
    """Each vertex must have one fan of triangles, joined through edges that meet at the vertex.

    Two fans at one vertex (two cones touching at their tips, a bow tie, two
    sheets pinched together) make it a non-manifold point: the surfaces meet
    there without sharing an edge, which no valid surface does.
    """
    # Corner 3 * t + k is vertex k of triangle t, numbered like the half-edge
    # leaving it.  A shared edge a -> b (half-edge h0) / b -> a (half-edge h1)
    # joins the two corners at a (h0 and the corner after h1) and the two
    # corners at b (the corner after h0, and h1).
    def after(h):
        return h - h % 3 + (h % 3 + 1) % 3

    h0, h1 = pairs[:, 0], pairs[:, 1]
    n_corners = triangles.size
    graph = coo_matrix((np.ones(2 * len(pairs)), (np.r_[h0, after(h0)], np.r_[after(h1), h1])),
                       shape=(n_corners, n_corners))
    n_fans, fan = connected_components(graph, directed=False)
    vertex_of_corner = triangles.reshape(-1)
    if n_fans == np.count_nonzero(np.bincount(vertex_of_corner)):
        return
    vertex_fan = np.unique(vertex_of_corner.astype(np.int64) * n_corners + fan)
    vertex = vertex_fan // n_corners
    pinched = np.unique(vertex[1:][vertex[1:] == vertex[:-1]])
    v = int(pinched[0])
    n_here = int(np.count_nonzero(vertex == v))
    raise MeshError(f"vertex {v} {_position(points[v])} joins {n_here} fans of triangles that share no edge "
                    f"there (non-manifold vertex, a pinch point); {len(pinched)} such vertices; surfaces "
                    f"must meet along edges, not at single points", source)


def _check_connected(triangles: np.ndarray, pairs: np.ndarray, source: str) -> None:
    # Pieces are triangles connected through shared edges (vertex contacts
    # are rejected before this by _check_vertex_fans).
    m = len(triangles)
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0] // 3, pairs[:, 1] // 3)), shape=(m, m))
    n_pieces, labels = connected_components(graph, directed=False)
    if n_pieces == 1:
        return
    sizes = np.sort(np.bincount(labels))[::-1]
    listed = ", ".join(str(s) for s in sizes[:5]) + (", ..." if n_pieces > 5 else "")
    raise MeshError(f"mesh has {n_pieces} disconnected pieces (triangles per piece: {listed}); a surface "
                    f"must be one connected piece (remove stray pieces or split the file)", source)


def _check_edge_nodes(nodes: np.ndarray, edges: _Edges, scale: float, source: str) -> None:
    """Neighbouring quadratic triangles must place the node of their shared edge at the same point."""
    # Half-edge k (corner k to corner k+1) carries edge node 3 + k in
    # triangle6 order (edges 01, 12, 20).
    edge_nodes = nodes[:, 3:, :].reshape(-1, 3)
    gap = np.linalg.norm(edge_nodes[edges.pairs[:, 0]] - edge_nodes[edges.pairs[:, 1]], axis=1)
    bad = gap > DUPLICATE_TOLERANCE * scale
    if bad.any():
        h0, h1 = edges.pairs[np.flatnonzero(bad)[0]]
        here, there = _position(edge_nodes[h0]), _position(edge_nodes[h1])
        raise MeshError(f"quadratic triangles {h0 // 3} and {h1 // 3} place the node of their shared edge "
                        f"at different positions {here} and {there}; "
                        f"{int(bad.sum())} such edges; curved triangles must meet along shared edges", source)


#: (u, v) where a curved triangle's orientation is checked: corners, edge midpoints, the centroid and the
#: points of a degree-5 rule's pattern (1/3 and 1/6 splits); a fold shows as a reversed normal at one of them
_ORIENTATION_POINTS = np.array([[0, 0], [1, 0], [0, 1], [0.5, 0], [0.5, 0.5], [0, 0.5], [1 / 3, 1 / 3],
                                [2 / 3, 1 / 6], [1 / 6, 2 / 3], [1 / 6, 1 / 6], [0.1, 0.1], [0.8, 0.1], [0.1, 0.8]])


def _triangle6_derivatives(u: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """d/du and d/dv of the six quadratic shape functions (meshio triangle6 order), each (6, P)."""
    w = 1.0 - u - v
    du = np.array([1 - 4 * w, 4 * u - 1, 0 * u, 4 * (w - u), 4 * v, -4 * v])
    dv = np.array([1 - 4 * w, 0 * u, 4 * v - 1, -4 * u, 4 * u, 4 * (w - v)])
    return du, dv


def _check_folds(nodes: np.ndarray, source: str) -> None:
    """Refuse curved triangles whose surface normal turns against the corners' normal (a fold)."""
    du, dv = _triangle6_derivatives(*_ORIENTATION_POINTS.T)
    tu = np.einsum("kp,mkd->mpd", du, nodes)
    tv = np.einsum("kp,mkd->mpd", dv, nodes)
    normal = np.cross(tu, tv)  # (M, P, 3)
    flat = np.cross(nodes[:, 1] - nodes[:, 0], nodes[:, 2] - nodes[:, 0])  # (M, 3)
    agreement = np.einsum("mpd,md->mp", normal, flat)
    bad = np.any(agreement <= 0, axis=1)
    if bad.any():
        tri = int(np.flatnonzero(bad)[0])
        raise MeshError(f"quadratic triangle {tri} is folded: its surface turns against its corners' orientation "
                        f"inside the cell (Jacobian sign changes); {int(bad.sum())} such triangles; check the order "
                        "of the edge nodes (triangle6: corners, then edges 01, 12, 20)", source)


#: most points or cells a mesh file may declare (far beyond what the memory guard would let through)
MAX_ENTITIES = 100_000_000
_HEADER_BYTES = 1 << 16


def check_header_sizes(source: str) -> None:
    """Compare the point and cell counts a header declares with what the file's size can hold.

    Legacy VTK (``POINTS n``, ``CELLS n size``), OFF (``nv nf ne``), PLY (``element vertex n``,
    ``element face n``) and VTK XML (``NumberOfPoints``, ``NumberOfCells``) headers are read from the
    first 64 KiB; every number needs at least one byte (binary) or two (text), so a header claiming
    more than the file can hold is truncated or corrupt, and refused before anything is allocated.
    """
    import re

    path = Path(source)
    size = path.stat().st_size
    with open(path, "rb") as f:
        head = f.read(_HEADER_BYTES).decode("latin-1")
    claims = []  # (what, count, least bytes per entity)
    suffix = path.suffix.lower()
    if suffix == ".vtk":
        claims += [("points", int(m.group(1)), 3) for m in re.finditer(r"\bPOINTS\s+(\d+)", head)]
        claims += [("cell entries", int(m.group(2)), 1) for m in re.finditer(r"\bCELLS\s+(\d+)\s+(\d+)", head)]
    elif suffix == ".off":
        lines = [ln.split("#")[0].strip() for ln in head.splitlines()]
        lines = [ln for ln in lines if ln]
        if lines and lines[0].upper().endswith("OFF"):
            rest = lines[0][lines[0].upper().rfind("OFF") + 3:].split() or (lines[1].split() if len(lines) > 1 else [])
            if len(rest) >= 2 and all(t.isdigit() for t in rest[:2]):
                claims += [("vertices", int(rest[0]), 3 * 2), ("faces", int(rest[1]), 4 * 2)]
    elif suffix == ".ply":
        end = head.find("end_header")
        for match in re.finditer(r"element\s+(\w+)\s+(\d+)", head[:end if end >= 0 else None]):
            claims.append((f"{match.group(1)} elements", int(match.group(2)), 3 if match.group(1) == "vertex" else 4))
    elif suffix == ".vtu":
        claims += [("points", int(m.group(1)), 0) for m in re.finditer(r'NumberOfPoints="(\d+)"', head)]
        claims += [("cells", int(m.group(1)), 0) for m in re.finditer(r'NumberOfCells="(\d+)"', head)]
    for what, count, least in claims:
        if count > MAX_ENTITIES or count * least > size:
            raise MeshError(f"the header declares {count:,} {what}, more than the file's {size:,} bytes can hold "
                            f"(or above {MAX_ENTITIES:,}); the file is truncated or corrupt", source)


def check_coordinate_range(points: np.ndarray, source: str) -> None:
    """Coordinates within the representable range of lengths (case.LENGTH_RANGE) and not all at one point."""
    from shellmodes.case.schema import LENGTH_RANGE

    if len(points) == 0:
        return
    with np.errstate(all="ignore"):
        largest = float(np.max(np.abs(points)))
        extent = _scale(points)
    if largest > LENGTH_RANGE[1] or extent < LENGTH_RANGE[0]:
        raise MeshError(f"coordinates reach {largest:.3g} and span {extent:.3g}; lengths must lie between "
                        f"{LENGTH_RANGE[0]:g} and {LENGTH_RANGE[1]:g} in units.length: rescale the mesh or "
                        "choose another units.length", source)


def _position(x: np.ndarray) -> str:
    return "(" + ", ".join(f"{value:.6g}" for value in x) + ")"
