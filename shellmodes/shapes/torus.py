"""Torus of revolution about z with ``major_radius`` R and ``minor_radius`` r.

Reference chart: the periodic (u, v) grid, u the angle about z, v the angle
around the tube; x = ((R + r cos v) cos u, (R + r cos v) sin u, r sin v).
Elements that straddle the seam are unwrapped before their nodes are placed.
"""

from __future__ import annotations

import numpy as np

from shellmodes.errors import GeometryError
from shellmodes.shapes.base import Shape, register
from shellmodes.shapes.reference import torus_grid


@register
class Torus(Shape):
    name = "torus"
    sphere_like = False

    def __init__(self, major_radius: float = 2.0, minor_radius: float = 1.0):
        self.R = float(major_radius)
        self.r = float(minor_radius)
        if not self.r < self.R:
            raise GeometryError(f"minor_radius {self.r} must be smaller than major_radius {self.R}")
        if self.R / self.r > 1000:
            raise GeometryError(f"minor_radius {self.r} is more than 1000 times smaller than major_radius "
                                f"{self.R}; such a needle-thin tube needs a ring model, not a surface mesh")
        self.base_edge = 2 * np.pi * self.r / 4

    def _grid(self, subdivisions):
        n_minor = 4 * 2**subdivisions
        n_major = max(3, int(round(n_minor * self.R / self.r)))
        return n_major, n_minor

    def reference(self, subdivisions):
        return torus_grid(*self._grid(subdivisions))

    def unwrap(self, corners):
        corners = corners.copy()
        for axis in (0, 1):
            c = corners[:, :, axis]
            wide = (c.max(axis=0) - c.min(axis=0)) > np.pi
            c[:, wide] = np.where(c[:, wide] < np.pi, c[:, wide] + 2 * np.pi, c[:, wide])
        return corners

    def project(self, points):
        u, v = points[:, 0], points[:, 1]
        rho = self.R + self.r * np.cos(v)
        return np.column_stack([rho * np.cos(u), rho * np.sin(u), self.r * np.sin(v)])

    def snap(self, points):
        rho = np.hypot(points[:, 0], points[:, 1])
        u = np.arctan2(points[:, 1], points[:, 0])
        v = np.arctan2(points[:, 2], rho - self.R)
        return self.project(np.column_stack([u, v, np.zeros_like(u)]))

    def exact_area(self):
        return 4.0 * np.pi**2 * self.R * self.r

    def parameters(self):
        return {"shape": self.name, "major_radius": self.R, "minor_radius": self.r}
