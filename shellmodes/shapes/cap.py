"""Spherical cap 0 <= theta <= theta0 of a sphere: an open surface with a rim.

Reference: a regular hexagon split into six triangles and subdivided.  In the
sector facing the hexagon's edge normal n_k the gauge rho = (q . n_k)/apothem
is linear and equals 1 on the hexagon boundary.  The hexagon is first mapped
onto the unit disk by d = q (1 + (rho/|q| - 1) rho^8): on the boundary d =
q/|q| (the rim lands exactly on the circle), near the centre d = q + O(|q|^9),
so the map is smooth enough there for degree-4 elements to keep their rate
(a plain radial stretch q rho/|q| is only Lipschitz at the centre and was
measured to cap the eigenvalue order near 3).  Then theta = theta0 |d| and
x = R (sin(theta) d/|d|, cos(theta)).
"""

from __future__ import annotations

import numpy as np

from shellmodes.errors import GeometryError
from shellmodes.shapes.base import Shape, register
from shellmodes.shapes.reference import subdivide

_APOTHEM = np.sqrt(3.0) / 2.0


@register
class Cap(Shape):
    name = "cap"
    closed = False
    sphere_like = False

    def __init__(self, radius: float = 1.0, half_angle: float = 90.0):
        self.radius = float(radius)
        self.half_angle = float(half_angle)
        if not 0.0 < self.half_angle < 180.0:
            raise GeometryError(f"half_angle {self.half_angle} must lie strictly between 0 and 180 degrees")
        self.theta0 = np.radians(self.half_angle)
        self.base_edge = self.radius * self.theta0

    def reference(self, subdivisions):
        ang = np.arange(6) * np.pi / 3
        p = np.vstack([[0.0, 0.0, 0.0], np.column_stack([np.cos(ang), np.sin(ang), np.zeros(6)])])
        t = np.array([[0, 1 + k, 1 + (k + 1) % 6] for k in range(6)])
        for _ in range(subdivisions):
            p, t = subdivide(p, t)
        return p, t

    def project(self, points):
        q = points[:, :2]
        normals = np.column_stack([np.cos(np.arange(6) * np.pi / 3 + np.pi / 6),
                                   np.sin(np.arange(6) * np.pi / 3 + np.pi / 6)])
        rho = np.clip(np.max(q @ normals.T, axis=1) / _APOTHEM, 0.0, 1.0)
        norm = np.linalg.norm(q, axis=1)
        ratio = np.divide(rho, norm, out=np.ones_like(rho), where=norm > 0)
        d = q * (1.0 + (ratio - 1.0) * rho**8)[:, None]
        r = np.linalg.norm(d, axis=1)
        theta = r * self.theta0
        direction = np.divide(d, r[:, None], out=np.zeros_like(d), where=r[:, None] > 0)
        s = np.sin(theta)
        return self.radius * np.column_stack([s * direction[:, 0], s * direction[:, 1], np.cos(theta)])

    def snap(self, points):
        return self.radius * points / np.linalg.norm(points, axis=1)[:, None]

    def exact_area(self):
        return 2.0 * np.pi * self.radius**2 * (1.0 - np.cos(self.theta0))

    def parameters(self):
        return {"shape": self.name, "radius": self.radius, "half_angle": self.half_angle}
