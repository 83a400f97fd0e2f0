"""Orientation of exported cells: outward surface normals and positive volumes.

scikit-fem sorts each element's vertices, so the cells it hands back face
either way.  Viewers need them oriented: a surface's normals (right-hand rule
on the triangle's node order) should all point out, and a volume cell's
signed volume should be positive, or integrals and shading come out wrong.

- :func:`input_flips`: the elements whose sorted vertex order runs against the
  order they were given in (a scanned mesh keeps its own orientation).
- :func:`outward_flips`: the elements to turn so that neighbours agree across
  every shared edge (propagated over the edge graph) and each connected piece
  encloses a positive signed volume sum p0 . (p1 x p2) / 6 (for a closed
  surface the divergence theorem makes that the enclosed volume when the
  normals point out; for an open cap about the origin it is the cone volume).
- :func:`flip_cells`: turn the chosen cells of a triangle, triangle6, tetra,
  tetra10 or wedge block.
- :func:`positive_volume_cells`: turn every tetra, tetra10 and wedge whose
  vertex volume is negative, in meshio's node order.  meshio's wedge (gmsh's
  prism) is positive when the right-hand normal of its first triangle 0-1-2
  points away from the second 3-4-5; meshio reverses both triangles when it
  writes VTK's wedge, whose normal points towards 3-4-5 (checked with VTK's
  own cell sizes in tests/test_vtk_reader.py).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.sparse import csgraph

__all__ = ["input_flips", "outward_flips", "flip_cells", "positive_volume_cells", "FLIPS"]

#: node permutations reversing a cell (meshio/VTK node order)
FLIPS = {
    "triangle": [0, 2, 1],
    "triangle6": [0, 2, 1, 5, 4, 3],  # corners 0 2 1, then edge nodes 02, 21, 10
    "tetra": [0, 2, 1, 3],
    "tetra10": [0, 2, 1, 3, 6, 5, 4, 7, 9, 8],  # edges 01<->02, 13<->23
    "wedge": [0, 2, 1, 3, 5, 4],
}


def input_flips(given: np.ndarray, stored: np.ndarray) -> np.ndarray | None:
    """(M,) True where ``stored`` (the same triangles, vertices reordered) runs against ``given``.

    None when the rows are not the same vertex sets in the same element order.
    """
    given, stored = np.asarray(given), np.asarray(stored)
    if given.shape != stored.shape or not np.array_equal(np.sort(given, axis=1), np.sort(stored, axis=1)):
        return None
    return _odd(given) != _odd(stored)


def _odd(tri: np.ndarray) -> np.ndarray:
    """True where the vertex order is an odd permutation of the ascending one (3 vertices)."""
    a, b, c = tri[:, 0], tri[:, 1], tri[:, 2]
    return ((a > b).astype(int) + (a > c) + (b > c)) % 2 == 1


def outward_flips(tri: np.ndarray, points: np.ndarray) -> np.ndarray:
    """(M,) True for the triangles to turn so that all agree and each piece faces out.

    Parameters
    ----------
    tri
        (M, 3) vertex indices (any order within a row).
    points
        (N, 3) vertex positions.
    """
    tri = np.asarray(tri, dtype=np.int64)
    m = len(tri)
    flips = np.zeros(m, dtype=bool)
    if m == 0:
        return flips
    a, b = tri.ravel(), tri[:, [1, 2, 0]].ravel()
    element = np.repeat(np.arange(m), 3)
    key = np.minimum(a, b) * (int(tri.max()) + 1) + np.maximum(a, b)
    order = np.argsort(key, kind="stable")
    pair = np.flatnonzero(key[order][1:] == key[order][:-1])
    first, second = order[pair], order[pair + 1]
    # two neighbours agree when they run along their shared edge in opposite directions
    disagree = (a[first] < b[first]) == (a[second] < b[second])
    graph = sp.coo_matrix((np.where(disagree, 2, 1), (element[first], element[second])), shape=(m, m)).tocsr()
    graph = (graph + graph.T).tocsr()
    n_pieces, piece = csgraph.connected_components(graph, directed=False)
    p = np.asarray(points, dtype=float)
    for label in range(n_pieces):
        start = int(np.flatnonzero(piece == label)[0])
        reached, parent = csgraph.breadth_first_order(graph, start, directed=False, return_predecessors=True)
        child = reached[1:]
        turn = np.asarray(graph[child, parent[child]]).ravel() == 2
        for e, up, t in zip(child.tolist(), parent[child].tolist(), turn.tolist()):
            flips[e] = flips[up] != t
        q = p[tri[reached]]
        signs = np.where(flips[reached], -1.0, 1.0)
        volume = np.sum(signs * np.einsum("ij,ij->i", q[:, 0], np.cross(q[:, 1], q[:, 2])))
        if volume < 0:
            flips[reached] = ~flips[reached]
    return flips


def flip_cells(kind: str, cells: np.ndarray, flips: np.ndarray) -> np.ndarray:
    """A copy of ``cells`` with the rows where ``flips`` is True reversed (:data:`FLIPS`)."""
    out = np.array(cells, copy=True)
    out[flips] = out[flips][:, FLIPS[kind]]
    return out


def _signed_volumes(points: np.ndarray, cells: np.ndarray) -> np.ndarray:
    p = points[cells[:, :4]]
    return np.einsum("ij,ij->i", np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), p[:, 3] - p[:, 0])


def positive_volume_cells(points: np.ndarray, blocks: list) -> list:
    """meshio cell blocks with every tetra, tetra10 and wedge turned to a positive volume.

    For a wedge the sign is that of the tetrahedron 0-1-2-3 (its first triangle and the node above
    node 0), which has the wedge's orientation for any wedge that is not folded; meshio's wedge is
    positive when that tetrahedron is negative.
    """
    points = np.asarray(points, dtype=float)
    out = []
    for kind, cells in blocks:
        cells = np.asarray(cells)
        if kind in ("tetra", "tetra10", "wedge") and len(cells):
            sign = -1.0 if kind == "wedge" else 1.0
            cells = flip_cells(kind, cells, sign * _signed_volumes(points, cells) < 0)
        out.append((kind, cells))
    return out
