"""User meshes read through :mod:`shellmodes.meshfiles.surface` (meshio formats).

Degree-2 geometry comes from quadratic (triangle6) cells when the file has
them; with ``snap`` set to an analytic shape every geometry node (of any
degree) is snapped onto that exact surface.  Otherwise the geometry is the
flat triangulation, which caps eigenvalue accuracy at O(h^2) whatever the
element degree (measured: see docs/MEASURED.md), and a warning says so.
"""

from __future__ import annotations

import numpy as np

from shellmodes.shapes.base import Shape, register


@register
class MeshFileShape(Shape):
    name = "mesh"

    def __init__(self, file, snap: Shape | None = None):
        from shellmodes.meshfiles.surface import read_surface_mesh
        self.file = str(file)
        self.data = read_surface_mesh(file)
        self.snap_shape = snap
        self.closed = bool(self.data.closed)
        p, t = self.data.points, self.data.triangles
        edges = np.unique(np.sort(np.vstack([t[:, [0, 1]], t[:, [1, 2]], t[:, [2, 0]]]), axis=1), axis=0)
        euler = len(p) - len(edges) + len(t)
        self.sphere_like = self.closed and euler == 2
        self.base_edge = float(np.max(np.linalg.norm(p[edges[:, 0]] - p[edges[:, 1]], axis=1)))

    def reference(self, subdivisions):
        if subdivisions:
            from shellmodes.shapes.reference import subdivide
            p, t = self.data.points, self.data.triangles
            for _ in range(subdivisions):
                p, t = subdivide(p, t)
            return p, t
        return self.data.points, self.data.triangles

    def project(self, points):
        return points if self.snap_shape is None else self.snap_shape.snap(points)

    @property
    def quadratic_nodes(self):
        return None if self.snap_shape is not None else self.data.quadratic_nodes

    def exact_area(self):
        return None if self.snap_shape is None else self.snap_shape.exact_area()

    def parameters(self):
        out = {"shape": self.name, "file": self.file}
        if self.snap_shape is not None:
            out["snap"] = self.snap_shape.parameters()
        return out
