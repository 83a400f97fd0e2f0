"""Parallel walls: the shell wall at constant normal distance from a star-shaped surface."""

from __future__ import annotations

import numpy as np
import pytest

from shellmodes.case.model import wall_function
from shellmodes.case.schema import Wall


def test_parallel_spheroid_wall_at_the_axes():
    # at the equator and the poles the normal is radial: the offset adds to the semi-axes exactly
    f = wall_function(Wall(shape="spheroid", equatorial_radius=1.5, polar_radius=1.0, offset=0.1))
    np.testing.assert_allclose(f(np.array([[1.0, 0, 0], [0, 1.0, 0], [0, 0, 1.0], [0, 0, -1.0]])),
                               [1.6, 1.6, 1.1, 1.1], rtol=1e-11)


@pytest.mark.parametrize("wall", [
    Wall(shape="ellipsoid", axes=(1.5, 1.2, 1.0), offset=-0.15),
    Wall(shape="deformed_sphere", radius=1.0, deformation=({"l": 2, "m": 0, "amplitude": 0.2},
                                                {"l": 3, "m": 1, "amplitude": 0.1}), offset=0.1),
])
def test_parallel_wall_is_at_constant_normal_distance(wall):
    # distance from each wall point to the base surface: nearest of a coarse sample, then refined by
    # scipy.optimize.minimize over the direction (a radial offset would miss by |offset| (1 - cos alpha),
    # ~1e-3 here, alpha the angle between normal and radius)
    from scipy.optimize import minimize

    base = wall_function(wall.model_copy(update={"offset": None}))
    rng = np.random.default_rng(3)
    u = rng.standard_normal((12, 3))
    u /= np.linalg.norm(u, axis=1)[:, None]
    points = wall_function(wall)(u)[:, None] * u
    sample = rng.standard_normal((20_000, 3))
    sample /= np.linalg.norm(sample, axis=1)[:, None]
    surface = base(sample)[:, None] * sample

    def distance(direction, p):
        d = direction / np.linalg.norm(direction)
        return np.linalg.norm(base(d[None])[0] * d - p)

    for p in points:
        start = sample[np.argmin(np.linalg.norm(surface - p, axis=1))]
        best = minimize(distance, start, args=(p,), method="Nelder-Mead",
                        options={"xatol": 1e-12, "fatol": 1e-14, "maxiter": 4000})
        assert best.fun == pytest.approx(abs(wall.offset), abs=1e-8)  # optimiser tolerance
