"""Sphere-like analytic shapes on a subdivided icosahedron.

- sphere: radial projection x -> R x/|x|;
- ellipsoid (and spheroid): axis scaling of the unit-sphere point;
- star: radial map r(theta, phi) = R (1 + sum a_lm Y_lm) of the direction,
  real harmonics as in :mod:`shellmodes.harmonics`.
"""

from __future__ import annotations

import numpy as np

from shellmodes.errors import GeometryError
from shellmodes.harmonics import angles, real_sph_harm
from shellmodes.shapes.areas import ellipsoid_area, spheroid_area
from shellmodes.shapes.base import Shape, register
from shellmodes.shapes.reference import icosphere

# edge of the icosahedron inscribed in the unit sphere: 4 / sqrt(10 + 2 sqrt 5)
_ICOSA_EDGE = 4.0 / np.sqrt(10.0 + 2.0 * np.sqrt(5.0))


def _unit(points):
    return points / np.linalg.norm(points, axis=1)[:, None]


class _Icospherical(Shape):
    scale = 1.0

    @property
    def base_edge(self):
        return _ICOSA_EDGE * self.scale

    def reference(self, subdivisions):
        return icosphere(subdivisions)


@register
class Sphere(_Icospherical):
    """Sphere of ``radius`` about the origin."""

    name = "sphere"

    def __init__(self, radius: float = 1.0):
        self.radius = float(radius)
        self.scale = self.radius

    def project(self, points):
        return self.radius * _unit(points)

    def exact_area(self):
        return 4.0 * np.pi * self.radius**2

    def parameters(self):
        return {"shape": self.name, "radius": self.radius}


@register
class Ellipsoid(_Icospherical):
    """Triaxial ellipsoid with semi-axes ``axes`` = (a, b, c) along x, y, z."""

    name = "ellipsoid"

    def __init__(self, axes=(1.0, 1.0, 1.0)):
        self.axes = np.asarray(axes, dtype=float)
        self.scale = float(np.max(self.axes))

    def project(self, points):
        return _unit(points) * self.axes

    def snap(self, points):
        # radial projection onto x^2/a^2 + y^2/b^2 + z^2/c^2 = 1
        s = np.sqrt(np.sum((points / self.axes) ** 2, axis=1))
        return points / s[:, None]

    def exact_area(self):
        return float(ellipsoid_area(*self.axes))

    def parameters(self):
        return {"shape": self.name, "axes": self.axes.tolist()}


@register
class Spheroid(Ellipsoid):
    """Spheroid with ``equatorial_radius`` (x, y) and ``polar_radius`` (z)."""

    name = "spheroid"

    def __init__(self, equatorial_radius: float = 1.0, polar_radius: float = 1.0):
        self.equatorial_radius = float(equatorial_radius)
        self.polar_radius = float(polar_radius)
        super().__init__((equatorial_radius, equatorial_radius, polar_radius))

    def exact_area(self):
        return float(spheroid_area(self.equatorial_radius, self.polar_radius))

    def parameters(self):
        return {"shape": self.name, "equatorial_radius": self.equatorial_radius,
                "polar_radius": self.polar_radius}


@register
class Star(_Icospherical):
    """Star-shaped surface r = R (1 + sum a_lm Y_lm(theta, phi)).

    Parameters
    ----------
    radius
        R.
    deformation
        Iterable of (l, m, amplitude) triples, real harmonics.
    """

    name = "deformed_sphere"

    def __init__(self, radius: float = 1.0, deformation=()):
        self.radius = float(radius)
        self.deformation = tuple((int(l), int(m), float(a)) for l, m, a in deformation)
        for l, m, _ in self.deformation:
            if l < 0 or abs(m) > l:
                raise GeometryError(f"deformation term l={l}, m={m}: need l >= 0 and -l <= m <= l")
        self.scale = self.radius * (1.0 + sum(abs(a) for *_, a in self.deformation))
        theta, phi = angles(icosphere(5)[0])
        factor = self.factor(theta, phi)
        if np.min(factor) <= 0.05:
            raise GeometryError(
                f"deformation makes the radius factor 1 + sum a_lm Y_lm reach {np.min(factor):.3g}; "
                "it must stay above 0.05 everywhere (reduce the amplitudes)")

    def factor(self, theta, phi):
        out = np.ones_like(theta)
        for l, m, a in self.deformation:
            out = out + a * real_sph_harm(l, m, theta, phi)
        return out

    def project(self, points):
        d = _unit(points)
        theta, phi = angles(d)
        return (self.radius * self.factor(theta, phi))[:, None] * d

    def parameters(self):
        return {"shape": self.name, "radius": self.radius,
                "deformation": [list(t) for t in self.deformation]}
