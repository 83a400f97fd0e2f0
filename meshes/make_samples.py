"""Generate the sample surface meshes shipped in ``shellmodes/samples/`` (``python meshes/make_samples.py``).

Cases name them ``file = "sample:pebble6.vtu"``, which works wherever the case file is copied.

The "pebble" is a demo shape of our own invention, not taken from any data
set: a smooth star-shaped surface r = R(theta, phi) * (unit direction) with

    R = 1 + 0.15 cos(2 theta) + 0.05 sin(theta)^3 cos(3 phi)

(theta polar, phi azimuth).  On the unit sphere cos(2 theta) = 2 z^2 - 1 and
sin(theta)^3 cos(3 phi) = x^3 - 3 x y^2, so R is a polynomial in the
direction's coordinates: the surface is smooth everywhere, poles included,
and R >= 0.8 > 0.  The first term stretches it along z (R = 1.15 at the
poles, 0.85 at the equator), the second gives it a threefold twist.

Files written (deterministic: no randomness; the bytes depend only on the
meshio version that writes them):

- ``pebble.stl``: flat triangles, binary STL, the icosahedron subdivided
  :data:`FLAT_LEVEL` times (1280 triangles, 64 kB), every vertex radially
  projected onto the surface.
- ``pebble6.vtu``: the same shape as quadratic ``triangle6`` cells from the
  icosahedron subdivided :data:`QUADRATIC_LEVEL` times (320 triangles);
  corners and edge nodes both lie exactly on the surface (edge nodes are the
  chord midpoints projected radially), so the curved triangles follow the
  shape to third order in the edge length.

Each file is read back and validated with :func:`shellmodes.meshfiles.surface.read_surface_mesh`
before the script reports success.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import meshio
import numpy as np

from shellmodes.meshfiles.surface import read_surface_mesh
from shellmodes.shapes.reference import icosphere

FLAT_LEVEL = 3
QUADRATIC_LEVEL = 2
HERE = Path(__file__).resolve().parent
#: where the samples live: package data of shellmodes
SAMPLES = HERE.parent / "shellmodes" / "samples"


def pebble_radius(directions: np.ndarray) -> np.ndarray:
    """R at the given unit directions (N, 3), written as a polynomial in x, y, z."""
    x, y, z = directions.T
    return 1.0 + 0.15 * (2.0 * z**2 - 1.0) + 0.05 * (x**3 - 3.0 * x * y**2)


def on_pebble(points: np.ndarray) -> np.ndarray:
    """Radial projection of points (N, 3), none at the origin, onto the pebble."""
    directions = points / np.linalg.norm(points, axis=1)[:, None]
    return directions * pebble_radius(directions)[:, None]


def pebble_flat(level: int = FLAT_LEVEL) -> tuple[np.ndarray, np.ndarray]:
    """Flat-triangle pebble: points (N, 3) and outward triangles (M, 3)."""
    p, t = icosphere(level)
    return on_pebble(p), t


def pebble_quadratic(level: int = QUADRATIC_LEVEL) -> tuple[np.ndarray, np.ndarray]:
    """Quadratic pebble: points (N, 3) and (M, 6) cells in meshio triangle6 order.

    Corners come first, then one node per edge, shared by its two triangles.
    """
    p, t = icosphere(level)
    half_edges = np.stack([t[:, [0, 1]], t[:, [1, 2]], t[:, [2, 0]]], axis=1)
    edges, inverse = np.unique(np.sort(half_edges, axis=2).reshape(-1, 2), axis=0, return_inverse=True)
    # The chord midpoint of two unit vectors is never the origin for the
    # short edges of a subdivided icosahedron, so projection is defined.
    mid = 0.5 * (p[edges[:, 0]] + p[edges[:, 1]])
    cells = np.column_stack([t, len(p) + inverse.reshape(-1, 3)])
    return on_pebble(np.vstack([p, mid])), cells


def write_samples(folder: Path) -> list[Path]:
    """Write the sample meshes into ``folder``, check them, and return their paths."""
    folder.mkdir(parents=True, exist_ok=True)
    flat_path = folder / "pebble.stl"
    points, triangles = pebble_flat()
    meshio.write(flat_path, meshio.Mesh(points, [("triangle", triangles)]), file_format="stl", binary=True)
    quadratic_path = folder / "pebble6.vtu"
    points, cells = pebble_quadratic()
    meshio.write(quadratic_path, meshio.Mesh(points, [("triangle6", cells)]), file_format="vtu")
    for path in (flat_path, quadratic_path):
        mesh = read_surface_mesh(path)
        if not mesh.closed:
            raise RuntimeError(f"{path}: sample mesh is not closed")
    return [flat_path, quadratic_path]


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=SAMPLES, help="folder to write into (default: shellmodes/samples)")
    args = parser.parse_args(argv)
    for path in write_samples(args.out):
        print(f"wrote {path} ({path.stat().st_size} bytes): {read_surface_mesh(path)!r}")


if __name__ == "__main__":
    main()
