"""Sphere test problems of any size for the benchmarks.

The icosphere of :mod:`shellmodes.shapes.reference` only halves edges, so its
sizes jump by four; here every face of the icosahedron is cut into nu^2
triangles (a frequency-nu geodesic grid), which gives 10 nu^2 + 2 vertices and
degree-k Lagrange spaces of k^2 10 nu^2 + 2 nodes, so a size can be hit
within a fraction of a percent.
"""

from __future__ import annotations

import time

import numpy as np

from shellmodes.fem.forms import assemble_surface
from shellmodes.fem.surface import curved_surface
from shellmodes.shapes.reference import icosahedron


def geodesic_sphere(nu: int) -> tuple[np.ndarray, np.ndarray]:
    """Frequency-``nu`` geodesic triangulation of the unit sphere: (N, 3) points, (M, 3) triangles."""
    p, faces = icosahedron()
    i, j = np.meshgrid(np.arange(nu + 1), np.arange(nu + 1), indexing="ij")
    keep = i + j <= nu
    i, j = i[keep], j[keep]
    local = {(a, b): n for n, (a, b) in enumerate(zip(i.tolist(), j.tolist()))}
    up = [(local[a, b], local[a + 1, b], local[a, b + 1]) for a, b in local if a + b < nu]
    down = [(local[a + 1, b], local[a + 1, b + 1], local[a, b + 1]) for a, b in local if a + b < nu - 1]
    cells = np.array(up + down)
    a, b, c = (p[faces[:, k]] for k in range(3))  # (20, 3) each
    pts = (a[:, None] + (i / nu)[None, :, None] * (b - a)[:, None] + (j / nu)[None, :, None] * (c - a)[:, None])
    tri = (cells[None] + len(i) * np.arange(len(faces))[:, None, None]).reshape(-1, 3)
    pts = pts.reshape(-1, 3)
    # points on shared edges are computed once per face; weld them
    _, first, inverse = np.unique(np.round(pts, 9), axis=0, return_index=True, return_inverse=True)
    pts = pts[first]
    tri = inverse.ravel()[tri]
    return pts / np.linalg.norm(pts, axis=1)[:, None], tri


def frequency_for(dofs: int, degree: int) -> int:
    """The geodesic frequency whose degree-k space is closest to ``dofs`` nodes."""
    return max(1, int(round(np.sqrt((dofs - 2) / (10.0 * degree**2)))))


def sphere_problem(dofs: int, degree: int = 2):
    """Assembled (K, M) for the unit sphere with about ``dofs`` unknowns, and build timings."""
    t0 = time.perf_counter()
    points, triangles = geodesic_sphere(frequency_for(dofs, degree))
    surface = curved_surface(points, triangles, degree,
                             project=lambda x: x / np.linalg.norm(x, axis=1)[:, None])
    t_mesh = time.perf_counter() - t0
    problem = assemble_surface(surface)
    return problem, {"mesh": t_mesh, "assembly": problem.timings["assembly"]}


def sphere_ladder(count: int) -> np.ndarray:
    """l(l+1) for the first ``count`` sphere modes, each (2l+1)-fold (exact)."""
    l = np.floor(np.sqrt(np.arange(count))).astype(int)
    return (l * (l + 1)).astype(float)


def max_relative_error(lam: np.ndarray, count: int) -> float:
    """Largest |lam - l(l+1)| / l(l+1) over the nonzero modes among the first ``count``."""
    exact = sphere_ladder(count)
    if len(lam) < count:
        raise ValueError(f"only {len(lam)} eigenvalues for {count} modes")
    lam = np.sort(lam)[:count]
    return float(np.max(np.abs(lam[1:] - exact[1:]) / exact[1:]))


def peak_memory_gib() -> float:
    """High-water resident memory of this process (VmHWM), in GiB."""
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 2**20
    import resource

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20
