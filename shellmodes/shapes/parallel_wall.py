"""Parallel (constant normal distance) walls of star-shaped surfaces, as radius functions of direction.

A shell of constant thickness d around a surface S has the walls S +- (d/2) n,
the parallel surfaces at normal distance d/2.  Offsetting along the radius
instead (R(w) +- d/2) makes the normal thickness vary by O(d |grad R|^2 / R^2)
and the transverse energy pi^2 / d(x)^2 then varies by O(1) as d -> 0, which
hides the thin-layer limit.  For a direction u this module finds the surface
direction w whose offset point y(w) = R(w) w + delta n(w) lies along u by the
fixed-point iteration w <- (w + u - y/|y|) / |...| (a contraction for
|delta| below the smallest radius of curvature), and returns |y|.  Normals n
are the normalised gradients of F(x) = |x| - R(x/|x|) by fourth-order central
differences (step 1e-4 of the radius scale: errors near 1e-12 relative).
"""

from __future__ import annotations

import numpy as np

from shellmodes.errors import GeometryError

__all__ = ["parallel_radius", "outward_normals"]


def _unit(x):
    return x / np.linalg.norm(x, axis=1)[:, None]


def outward_normals(radius, points: np.ndarray, step: float) -> np.ndarray:
    """Unit outward normals of the star-shaped surface r = radius(direction) at points (N, 3) on it."""
    def F(x):
        r = np.linalg.norm(x, axis=1)
        return r - radius(x / r[:, None])

    grad = np.empty_like(points)
    for i in range(3):
        e = np.zeros(3)
        e[i] = step
        grad[:, i] = (8 * (F(points + e) - F(points - e)) - (F(points + 2 * e) - F(points - 2 * e))) / (12 * step)
    return _unit(grad)


def parallel_radius(radius, delta: float, scale: float):
    """Radius function of the parallel surface at signed normal distance ``delta`` (outward positive)."""
    if delta == 0:
        return radius

    def offset(u):
        u = _unit(np.asarray(u, dtype=float))
        w = u.copy()
        for _ in range(200):
            x = radius(w)[:, None] * w
            y = x + delta * outward_normals(radius, x, 1e-4 * scale)
            yhat = _unit(y)
            change = u - yhat
            if np.max(np.abs(change)) < 1e-12:  # the finite-difference normals are good to ~1e-12
                return np.linalg.norm(y, axis=1)
            w = _unit(w + change)
        raise GeometryError(f"the parallel wall at offset {delta:g} does not converge: the offset exceeds the "
                            "surface's smallest radius of curvature; use a thinner shell")

    return offset
