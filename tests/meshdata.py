"""Tiny canonical surface meshes for tests.

Every function builds fresh arrays on each call, so a test may modify what it
gets (to plant a defect) without touching any other test.  Points are (N, 3)
float, triangles (M, 3) int with outward normals on closed surfaces.
"""

from __future__ import annotations

import numpy as np

from shellmodes.shapes.reference import icosphere

__all__ = [
    "tetrahedron",
    "octahedron",
    "sphere",
    "cap",
    "quadratic_sphere",
    "two_tetrahedra",
    "pinched_tetrahedra",
    "triangle_areas",
    "enclosed_volume",
]


def tetrahedron() -> tuple[np.ndarray, np.ndarray]:
    """The corner tetrahedron (0,0,0), e_x, e_y, e_z: 4 vertices, 4 outward faces."""
    p = np.array([[0.0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]])
    t = np.array([[0, 2, 1], [0, 1, 3], [0, 3, 2], [1, 2, 3]])
    return p, t


def octahedron() -> tuple[np.ndarray, np.ndarray]:
    """The regular octahedron with vertices +-e_i: 6 vertices, 8 outward faces."""
    p = np.array([[1.0, 0, 0], [-1, 0, 0], [0, 1, 0], [0, -1, 0], [0, 0, 1], [0, 0, -1]])
    t = np.array([[0, 2, 4], [2, 1, 4], [1, 3, 4], [3, 0, 4],
                  [2, 0, 5], [1, 2, 5], [3, 1, 5], [0, 3, 5]])
    return p, t


def sphere(level: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """Subdivided icosahedron on the unit sphere (level 1: 42 vertices, 80 faces)."""
    return icosphere(level)


def cap(level: int = 2, z_min: float = 0.3) -> tuple[np.ndarray, np.ndarray]:
    """Open spherical cap: the triangles of ``sphere(level)`` with every corner above ``z_min``."""
    p, t = icosphere(level)
    t = t[(p[t, 2] > z_min).all(axis=1)]
    used, t = np.unique(t, return_inverse=True)
    return p[used], t.reshape(-1, 3)


def quadratic_sphere(level: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """Unit sphere as quadratic triangles: points and (M, 6) cells in meshio triangle6 order.

    Edge nodes are the chord midpoints pushed onto the sphere, shared by the
    two triangles of each edge; they are numbered after the corners.
    """
    p, t = icosphere(level)
    half_edges = np.stack([t[:, [0, 1]], t[:, [1, 2]], t[:, [2, 0]]], axis=1)  # (M, 3, 2)
    edges, inverse = np.unique(np.sort(half_edges, axis=2).reshape(-1, 2), axis=0, return_inverse=True)
    mid = p[edges[:, 0]] + p[edges[:, 1]]
    mid /= np.linalg.norm(mid, axis=1)[:, None]
    cells = np.column_stack([t, len(p) + inverse.reshape(-1, 3)])
    return np.vstack([p, mid]), cells


def two_tetrahedra() -> tuple[np.ndarray, np.ndarray]:
    """Two disjoint closed tetrahedra (the second shifted by 3 along x)."""
    p, t = tetrahedron()
    return np.vstack([p, p + [3.0, 0, 0]]), np.vstack([t, t + len(p)])


def pinched_tetrahedra() -> tuple[np.ndarray, np.ndarray]:
    """Two tetrahedra touching at one shared vertex (the origin), mirrored through it."""
    p, t = tetrahedron()
    # Point reflection has determinant -1 and turns outward normals inward;
    # reversing each face of the copy restores them.
    q = -p[1:]
    renumber = np.array([0, 4, 5, 6])
    return np.vstack([p, q]), np.vstack([t, renumber[t][:, ::-1]])


def triangle_areas(points: np.ndarray, triangles: np.ndarray) -> np.ndarray:
    """Areas of flat triangles, half the cross product of two sides."""
    a, b, c = (points[triangles[:, k]] for k in range(3))
    return 0.5 * np.linalg.norm(np.cross(b - a, c - a), axis=1)


def enclosed_volume(points: np.ndarray, triangles: np.ndarray) -> float:
    """Signed volume inside a closed flat triangulation (divergence theorem).

    Positive for outward-oriented faces: the sum of the tetrahedra
    (origin, a, b, c), each a . (b x c) / 6.
    """
    a, b, c = (points[triangles[:, k]] for k in range(3))
    return float(np.einsum("ij,ij->", a, np.cross(b, c)) / 6.0)
