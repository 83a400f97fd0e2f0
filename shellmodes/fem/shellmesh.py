"""Layered tetrahedral meshes of shells and balls between curved walls.

A region between walls ``R_0(d) <= r <= R_1(d) <= ...`` is described in
reference coordinates ``(d, q)``: a unit direction ``d`` and a radial
parameter ``q`` that runs from ``i`` on wall ``i`` to ``i + 1`` on wall
``i + 1``.  Inside region ``i`` the exact map is linear in ``q``,

    r(d, q) = R_i(d) + (q - i) (R_{i+1}(d) - R_i(d)),    x = r d,

so angular resolution (the icosphere level) and radial resolution (layers per
region) are independent and a thin shell gets many cells across without
needles.  Each layer is a band of triangular prisms split into three
tetrahedra by the global vertex numbering rule: the diagonal of every side
face joins the top node of the lower-numbered direction to the bottom node
of the higher-numbered one, so neighbouring prisms agree on it.

A ball (first wall ``None``) gets a core that does not degenerate at the
centre: a red-refined solid icosahedron (a block whose surface is the
icosphere of the same level) of reference radius ``core_fraction`` inside
the reference unit ball, then radial layers out to wall 1.  With ``R_min``
the smallest radius of wall 1 and f the core fraction, the block is a plain
scaling and the layers are linear in q, as between two walls:

    r(d, q) = R_min q                                         for q <= f,
    r(d, q) = f R_min + (q - f) / (1 - f) (R_1(d) - f R_min)   for f <= q <= 1.

When the block fills the core (no core layers) the map is the blend
``r = q (R_min + (R_1(d) - R_min) q^2)``: a scaling near the centre,
increasing in q (its q-derivative is at least R_min).  On strongly deformed
walls it converges more slowly at coarse levels (P2 eigenvalue rates 2.3-2.9
against 3.3-3.9 with layers, ellipsoid 1 : 1.2 : 1.5, levels 1-3), so give the
core layers when wall 1 is not a sphere.

Points are (N, 3) on entry and exit.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy.spatial import cKDTree

from shellmodes.errors import GeometryError, MeshError
from shellmodes.shapes.reference import icosahedron, icosphere

__all__ = ["ShellMesh", "shell_mesh", "constant_wall", "signed_volumes"]

WallFunction = Callable[[np.ndarray], np.ndarray]
# the six edges and four faces of a tetrahedron, in local vertex numbers
TET_EDGES = ((0, 1), (0, 2), (0, 3), (1, 2), (1, 3), (2, 3))
TET_FACES = ((0, 1, 2), (0, 1, 3), (0, 2, 3), (1, 2, 3))


def constant_wall(radius: float) -> WallFunction:
    """A spherical wall of fixed ``radius`` as a radius function of directions."""
    radius = float(radius)

    def wall(directions: np.ndarray) -> np.ndarray:
        return np.full(len(directions), radius)

    wall.radius = radius  # lets callers recognise a sphere
    return wall


def signed_volumes(points: np.ndarray, tets: np.ndarray) -> np.ndarray:
    """Six times the signed volume of each tetrahedron (positive: right-handed)."""
    a, b, c, d = (points[tets[:, i]] for i in range(4))
    return np.einsum("ij,ij->i", np.cross(b - a, c - a), d - a)


@dataclass(frozen=True, eq=False)
class ShellMesh:
    """A conforming straight-sided tetrahedral mesh with its exact reference map.

    Attributes
    ----------
    points
        (N, 3) vertex positions (images of the reference coordinates).
    tets
        (M, 4) vertex indices, positively oriented.
    regions
        (M,) region id, 0 for the innermost region.
    directions
        (N, 3) unit direction of each vertex (zero at the centre of a ball).
    radial
        (N,) radial parameter q (``i`` on wall ``i``).
    walls
        The wall radius functions, inner to outer (first ``None`` for a ball).
    cartesian_edges
        (K,) sorted keys ``a * N + b`` (a < b) of edges inside the ball's core
        block whose midpoints are Cartesian midpoints of the reference
        positions; every other edge is placed by the (d, q) rule.
    level, layers
        The icosphere level and layers per region used.
    """

    points: np.ndarray
    tets: np.ndarray
    regions: np.ndarray
    directions: np.ndarray
    radial: np.ndarray
    walls: tuple
    cartesian_edges: np.ndarray
    level: int
    layers: tuple[int, ...]
    core_fraction: float | None = None
    _core_scale: float | None = field(default=None, repr=False)

    @property
    def nregions(self) -> int:
        return len(self.walls) - 1

    @property
    def is_ball(self) -> bool:
        return self.walls[0] is None

    @property
    def h(self) -> float:
        """Largest straight edge length."""
        t = self.tets
        pairs = np.vstack([t[:, list(pair)] for pair in TET_EDGES])
        return float(np.max(np.linalg.norm(self.points[pairs[:, 0]] - self.points[pairs[:, 1]], axis=1)))

    def place(self, directions: np.ndarray, radial: np.ndarray) -> np.ndarray:
        """Exact map (d, q) -> x for (K, 3) unit directions and (K,) parameters."""
        directions = np.asarray(directions, dtype=float)
        radial = np.asarray(radial, dtype=float)
        # the centre of a ball has no direction; walls are never evaluated there
        centre = np.linalg.norm(directions, axis=1) == 0
        if np.any(centre):
            directions = directions.copy()
            directions[centre] = (0.0, 0.0, 1.0)
        r = np.zeros(len(radial))
        region = np.clip(np.floor(radial).astype(int), 0, self.nregions - 1)
        for i in range(self.nregions):
            sel = np.nonzero(region == i)[0]
            if len(sel) == 0:
                continue
            d, q = directions[sel], radial[sel]
            outer = _radii(self.walls[i + 1], d, i + 1)
            if i == 0 and self.is_ball:
                r[sel] = self._core_radius(q, outer)
            else:
                inner = _radii(self.walls[i], d, i)
                r[sel] = inner + (q - i) * (outer - inner)
        r[centre] = 0.0
        return r[:, None] * directions

    def _core_radius(self, q: np.ndarray, outer: np.ndarray) -> np.ndarray:
        """Radius in a ball's core (0 <= q <= 1) for wall-1 radii ``outer``."""
        R0 = self._core_scale
        f = self.core_fraction if self.layers[0] > 0 else 1.0
        if f >= 1.0:
            # block fills the core: smooth at the centre, increasing in q
            return q * (R0 + (outer - R0) * q**2)
        # linear scaling inside the block (a sphere of radius f R0), then linear in q out to the wall
        inner = f * R0
        return np.where(q <= f, R0 * q, inner + (q - f) / (1.0 - f) * (outer - inner))

    def edge_midpoints(self, edges: np.ndarray) -> np.ndarray:
        """Images of the reference midpoints of (K, 2) vertex pairs under the exact map.

        Layered edges: direction normalised, radial parameter averaged.  Edges
        inside the core block: Cartesian midpoint of the reference positions.
        """
        edges = np.sort(np.asarray(edges), axis=1)
        a, b = edges[:, 0], edges[:, 1]
        keys = a.astype(np.int64) * len(self.points) + b
        cart = np.isin(keys, self.cartesian_edges)
        da, db = self.directions[a], self.directions[b]
        qa, qb = self.radial[a], self.radial[b]
        d = np.where(cart[:, None], da * qa[:, None] + db * qb[:, None], da + db)
        norm = np.linalg.norm(d, axis=1)
        q = np.where(cart, 0.5 * norm, 0.5 * (qa + qb))
        d = d / np.where(norm > 0, norm, 1.0)[:, None]
        return self.place(d, q)

    def __repr__(self) -> str:
        kind = "ball" if self.is_ball else "shell"
        return (f"ShellMesh({kind}, regions={self.nregions}, level={self.level}, layers={self.layers}, "
                f"points={len(self.points)}, tets={len(self.tets)})")


def _radii(wall, directions: np.ndarray, index: int) -> np.ndarray:
    r = np.asarray(wall(directions), dtype=float).reshape(-1)
    if r.shape != (len(directions),):
        raise GeometryError(f"wall {index} returned {r.size} radii for {len(directions)} directions; "
                            "a wall must map (N, 3) directions to (N,) radii")
    return r


def as_wall(wall, index: int):
    if wall is None:
        if index != 0:
            raise GeometryError(f"wall {index} is None; only the first wall may be None (a ball)")
        return None
    if callable(wall):
        return wall
    try:
        return constant_wall(float(wall))
    except (TypeError, ValueError):
        raise GeometryError(f"wall {index} is {wall!r}; give a number or a function of directions") from None


def check_wall_order(walls: Sequence, level: int) -> float | None:
    """Check radii on a dense direction set; return the smallest radius of wall 1 for a ball."""
    dense, _ = icosphere(min(max(level + 2, 4), 6))
    radii = [None if w is None else _radii(w, dense, i) for i, w in enumerate(walls)]
    for i, r in enumerate(radii):
        if r is None:
            continue
        bad = np.nonzero(~np.isfinite(r) | (r <= 0))[0]
        if len(bad):
            k = bad[np.argmin(np.nan_to_num(r[bad], nan=-np.inf))]
            raise GeometryError(f"wall {i} has radius {r[k]:.6g} at direction {_fmt(dense[k])}; "
                                "radii must be positive and finite")
    for i in range(1, len(walls)):
        if radii[i - 1] is None:
            continue
        gap = radii[i] - radii[i - 1]
        k = int(np.argmin(gap))
        if gap[k] <= 0:
            what = "touches" if gap[k] == 0 else "crosses"
            raise GeometryError(
                f"wall {i} (radius {radii[i][k]:.6g}) {what} wall {i - 1} (radius {radii[i - 1][k]:.6g}) "
                f"at direction {_fmt(dense[k])}: thickness {gap[k]:.6g}; each wall must lie strictly "
                "outside the previous one")
    return None if walls[0] is not None else float(np.min(radii[1]))


def _fmt(d: np.ndarray) -> str:
    return "(" + ", ".join(f"{v:.4f}" for v in d) + ")"


def shell_mesh(
    interfaces: Sequence,
    level: int,
    layers_per_region: int | Sequence[int],
    core_fraction: float = 0.5,
) -> ShellMesh:
    """Tetrahedral mesh of nested regions between curved walls.

    Parameters
    ----------
    interfaces
        Wall radius functions ``R_i(directions (N, 3)) -> radii (N,)`` (or
        numbers for spheres) from inner to outer; the first may be ``None``
        for a ball.  ``len(interfaces) - 1`` regions.
    level
        Icosphere subdivision level of the directions (0 is the icosahedron).
    layers_per_region
        Radial layers in each region (one number for all).  For a ball's core
        these are the layers outside the central block; 0 lets the block fill
        the core.
    core_fraction
        Reference radius (0 < f < 1) of the core block of a ball when the core
        has layers.

    Returns
    -------
    ShellMesh

    Raises
    ------
    GeometryError
        Walls that touch or cross anywhere on a dense direction set (two
        icosphere levels finer than the mesh, at least level 4), non-positive
        or non-finite radii, bad layer counts.

    Examples
    --------
    >>> m = shell_mesh([1.0, 2.0], level=1, layers_per_region=2)
    >>> m.points.shape, m.tets.shape
    ((126, 3), (480, 4))
    """
    if len(interfaces) < 2:
        raise GeometryError(f"need at least two walls (one region), got {len(interfaces)}")
    walls = tuple(as_wall(w, i) for i, w in enumerate(interfaces))
    nreg = len(walls) - 1
    if isinstance(layers_per_region, (int, np.integer)):
        layers = (int(layers_per_region),) * nreg
    else:
        layers = tuple(int(n) for n in layers_per_region)
    if len(layers) != nreg:
        raise GeometryError(f"layers_per_region has {len(layers)} entries for {nreg} regions")
    ball = walls[0] is None
    for i, n in enumerate(layers):
        if n < 1 and not (ball and i == 0 and n == 0):
            raise GeometryError(f"region {i} has {n} layers; need at least 1 "
                                "(0 allowed only for a ball's core)")
    if not 0 <= int(level) <= 7:
        raise GeometryError(f"level {level} is outside 0..7")
    if ball and layers[0] > 0 and not 0.0 < core_fraction < 1.0:
        raise GeometryError(f"core_fraction {core_fraction} must lie strictly between 0 and 1")
    core_scale = check_wall_order(walls, level)

    directions, triangles = icosphere(level)
    nd = len(directions)
    # radial parameter of each node level, shared at interfaces
    if ball:
        start = core_fraction if layers[0] > 0 else 1.0
        qs = [start + (1.0 - start) * np.arange(layers[0]) / max(layers[0], 1)] if layers[0] else []
        first = 1
    else:
        qs, first = [], 0
    for i in range(first, nreg):
        qs.append(i + np.arange(layers[i]) / layers[i])
    qs.append(np.array([float(nreg)]))
    q_levels = np.concatenate(qs)

    if ball:
        block_p, block_t, surface_index = _core_block(level, directions)
        q0 = q_levels[0]
        interior = np.setdiff1d(np.arange(len(block_p)), surface_index)
        nb = len(interior)
    else:
        nb = 0
    nlev = len(q_levels)
    radial = np.concatenate([np.zeros(nb), np.repeat(q_levels, nd)])
    dirs = np.concatenate([np.zeros((nb, 3)), np.tile(directions, (nlev, 1))])

    tets, regions = [], []
    tri = np.sort(triangles, axis=1)  # the global numbering rule needs a < b < c
    for k in range(nlev - 1):
        lo, hi = nb + k * nd + tri, nb + (k + 1) * nd + tri
        a, b, c = lo.T
        a2, b2, c2 = hi.T
        layer_tets = np.vstack([np.column_stack([a, b, c, a2]), np.column_stack([b, c, a2, b2]),
                                np.column_stack([c, a2, b2, c2])])
        tets.append(layer_tets)
        region = min(int(np.floor(q_levels[k] + 1e-12)), nreg - 1)
        regions.append(np.full(len(layer_tets), region))
    cartesian = np.zeros(0, dtype=np.int64)
    if ball:
        # renumber block nodes: interior first, surface onto layer level 0
        new = np.empty(len(block_p), dtype=np.int64)
        new[interior] = np.arange(nb)
        new[surface_index] = nb + np.arange(nd)
        bt = new[block_t]
        X = block_p[interior] * q0
        r = np.linalg.norm(X, axis=1)
        dirs[:nb] = X / np.where(r > 0, r, 1.0)[:, None]
        radial[:nb] = r
        tets.insert(0, bt)
        regions.insert(0, np.zeros(len(bt), dtype=int))
        cartesian = _interior_edge_keys(bt, nb + nlev * nd)
    tets = np.vstack(tets).astype(np.int64)
    regions = np.concatenate(regions).astype(np.int32)

    mesh = ShellMesh(points=np.zeros((0, 3)), tets=tets, regions=regions, directions=dirs, radial=radial,
                     walls=walls, cartesian_edges=cartesian, level=int(level), layers=layers,
                     core_fraction=core_fraction if ball else None, _core_scale=core_scale)
    points = mesh.place(dirs, radial)
    # orientation from the reference configuration (nested unit-spaced spheres), where no
    # tetrahedron can be inverted; the physical one must then agree everywhere
    reference = dirs * (radial + (0.0 if ball else 1.0))[:, None]
    flip = signed_volumes(reference, tets) < 0
    tets[flip] = tets[flip][:, [1, 0, 2, 3]]
    vol = signed_volumes(points, tets)
    bad = np.nonzero(vol <= 1e-12 * np.max(np.abs(vol)))[0]
    if len(bad):
        k = bad[np.argmin(vol[bad])]
        raise MeshError(f"tetrahedron {k} of region {regions[k]} is inverted or flat "
                        f"(volume {vol[k] / 6:.3g}) at {_fmt(points[tets[k]].mean(axis=0))}: the walls "
                        f"vary too fast for level {level}; raise the level")
    object.__setattr__(mesh, "points", points)
    return mesh


def _interior_edge_keys(tets: np.ndarray, n: int) -> np.ndarray:
    """Keys of block edges that are not on the block's surface (Cartesian midpoint rule)."""
    faces = np.sort(np.vstack([tets[:, list(f)] for f in TET_FACES]), axis=1)
    uniq, counts = np.unique(faces, axis=0, return_counts=True)
    boundary = uniq[counts == 1]
    surface_keys = np.unique(np.concatenate([boundary[:, i] * n + boundary[:, j]
                                             for i, j in ((0, 1), (0, 2), (1, 2))]))
    e = np.sort(np.vstack([tets[:, list(pair)] for pair in TET_EDGES]), axis=1)
    keys = np.unique(e[:, 0] * n + e[:, 1])
    return np.setdiff1d(keys, surface_keys)


# Children of a red refinement: the four corner tetrahedra, then the inner
# octahedron split along one of its diagonals (Bey, Computing 55 (1995) 355).
_CORNERS = ((0, 4, 5, 6), (4, 1, 7, 8), (5, 7, 2, 9), (6, 8, 9, 3))
# local node numbers: 0-3 vertices, 4=01, 5=02, 6=03, 7=12, 8=13, 9=23
_OCTA = {  # diagonal -> four tetrahedra around it
    (4, 9): ((4, 9, 5, 6), (4, 9, 6, 8), (4, 9, 8, 7), (4, 9, 7, 5)),
    (5, 8): ((5, 8, 4, 6), (5, 8, 6, 9), (5, 8, 9, 7), (5, 8, 7, 4)),
    (6, 7): ((6, 7, 4, 5), (6, 7, 5, 9), (6, 7, 9, 8), (6, 7, 8, 4)),
}


def _core_block(level: int, sphere_points: np.ndarray):
    """Red-refined solid icosahedron whose surface is ``icosphere(level)``.

    Returns reference points inside the unit ball, tetrahedra, and for each
    icosphere vertex the block node that sits on it.
    """
    p, faces = icosahedron()
    p = np.vstack([p, np.zeros((1, 3))])
    t = np.column_stack([np.full(len(faces), 12), faces])
    on_surface = np.r_[np.ones(12, bool), False]
    for _ in range(level):
        pairs = np.sort(np.vstack([t[:, list(pair)] for pair in TET_EDGES]), axis=1)
        uniq, inv = np.unique(pairs, axis=0, return_inverse=True)
        inv = inv.ravel().reshape(6, -1).T + len(p)
        mid = 0.5 * (p[uniq[:, 0]] + p[uniq[:, 1]])
        surf = on_surface[uniq[:, 0]] & on_surface[uniq[:, 1]]
        # surface midpoints are pushed to the sphere exactly as icosphere() does
        mid[surf] /= np.linalg.norm(mid[surf], axis=1)[:, None]
        p = np.vstack([p, mid])
        on_surface = np.concatenate([on_surface, surf])
        local = np.column_stack([t, inv])  # 0-3 vertices, then 01, 02, 03, 12, 13, 23
        lengths = [np.linalg.norm(p[local[:, a]] - p[local[:, b]], axis=1) for a, b in _OCTA]
        best = np.argmin(np.column_stack(lengths), axis=1)
        children = [local[:, list(c)] for c in _CORNERS]
        for j, diag in enumerate(_OCTA):
            sel = best == j
            children.extend(local[sel][:, list(c)] for c in _OCTA[diag])
        t = np.vstack(children)
    surface_nodes = np.nonzero(on_surface)[0]
    # match block surface nodes to icosphere vertices (same arithmetic up to rounding)
    dist, nearest = cKDTree(p[surface_nodes]).query(sphere_points)
    if len(surface_nodes) != len(sphere_points) or np.max(dist) > 1e-9:
        raise MeshError(f"core block surface does not match icosphere level {level}")
    surface_index = surface_nodes[nearest]
    return p, t, surface_index
