"""Flat reference triangulations that exact shape maps are applied to.

Each function returns ``(points, triangles)`` with points (N, 3) and
triangles (M, 3) consistently oriented (outward normals for closed surfaces).
"""

from __future__ import annotations

import numpy as np

__all__ = ["icosahedron", "icosphere", "subdivide", "torus_grid", "subdivisions_for_edge"]


def icosahedron() -> tuple[np.ndarray, np.ndarray]:
    """The regular icosahedron inscribed in the unit sphere (12 vertices, 20 faces)."""
    g = (1.0 + np.sqrt(5.0)) / 2.0
    p = np.array(
        [[-1, g, 0], [1, g, 0], [-1, -g, 0], [1, -g, 0],
         [0, -1, g], [0, 1, g], [0, -1, -g], [0, 1, -g],
         [g, 0, -1], [g, 0, 1], [-g, 0, -1], [-g, 0, 1]], dtype=float)
    p /= np.linalg.norm(p, axis=1)[:, None]
    t = np.array(
        [[0, 11, 5], [0, 5, 1], [0, 1, 7], [0, 7, 10], [0, 10, 11],
         [1, 5, 9], [5, 11, 4], [11, 10, 2], [10, 7, 6], [7, 1, 8],
         [3, 9, 4], [3, 4, 2], [3, 2, 6], [3, 6, 8], [3, 8, 9],
         [4, 9, 5], [2, 4, 11], [6, 2, 10], [8, 6, 7], [9, 8, 1]])
    return p, t


def subdivide(points: np.ndarray, triangles: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Split every triangle into four at its edge midpoints (orientation kept)."""
    edges = np.sort(np.vstack([triangles[:, [0, 1]], triangles[:, [1, 2]], triangles[:, [2, 0]]]), axis=1)
    unique, inverse = np.unique(edges, axis=0, return_inverse=True)
    inverse = inverse.ravel()
    mid = 0.5 * (points[unique[:, 0]] + points[unique[:, 1]])
    m = len(triangles)
    a = inverse[:m] + len(points)
    b = inverse[m:2 * m] + len(points)
    c = inverse[2 * m:] + len(points)
    v0, v1, v2 = triangles.T
    new = np.vstack([np.column_stack([v0, a, c]), np.column_stack([a, v1, b]),
                     np.column_stack([c, b, v2]), np.column_stack([a, b, c])])
    return np.vstack([points, mid]), new


def icosphere(level: int) -> tuple[np.ndarray, np.ndarray]:
    """Icosahedron subdivided ``level`` times, vertices pushed to the unit sphere."""
    p, t = icosahedron()
    for _ in range(level):
        p, t = subdivide(p, t)
        p = p / np.linalg.norm(p, axis=1)[:, None]
    return p, t


def subdivisions_for_edge(edge: float, base_edge: float) -> int:
    """Number of halvings needed to bring ``base_edge`` down to ``edge`` or below."""
    return max(0, int(np.ceil(np.log2(base_edge / edge) - 1e-9)))


def torus_grid(n_major: int, n_minor: int) -> tuple[np.ndarray, np.ndarray]:
    """Periodic grid of the angles (u, v) in [0, 2 pi)^2 as 'points' (N, 3) = (u, v, 0).

    Triangles are numbered so that the map (u, v) -> torus gives outward normals.
    """
    u = 2 * np.pi * np.arange(n_major) / n_major
    v = 2 * np.pi * np.arange(n_minor) / n_minor
    U, V = np.meshgrid(u, v, indexing="ij")
    pts = np.column_stack([U.ravel(), V.ravel(), np.zeros(U.size)])
    idx = np.arange(n_major * n_minor).reshape(n_major, n_minor)
    i0 = idx
    i1 = np.roll(idx, -1, axis=0)
    j1 = np.roll(idx, -1, axis=1)
    ij1 = np.roll(i1, -1, axis=1)
    tri = np.vstack([np.column_stack([i0.ravel(), i1.ravel(), ij1.ravel()]),
                     np.column_stack([i0.ravel(), ij1.ravel(), j1.ravel()])])
    return pts, tri
