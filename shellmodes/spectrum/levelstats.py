"""Level statistics of long spectra: Weyl's law and nearest-neighbour spacings.

Counting function.  For the Laplace-Beltrami operator on a compact surface of
area A, Euler characteristic chi and rim length L, the heat trace
Z(t) = sum_n exp(-lam_n t) behaves for small t as

    Z(t) ~ A / (4 pi t)  -/+  L / (8 sqrt(pi t))  +  chi / 6  +  O(sqrt t),

minus for a hard (Dirichlet) rim, plus for a free (Neumann) one (H. P. McKean
and I. M. Singer, J. Differential Geom. 1, 43 (1967), for closed surfaces and
the constant term; the rim term: M. Kac, Amer. Math. Monthly 73, 1 (1966);
K. Stewartson and R. T. Waechter, Proc. Camb. Phil. Soc. 69, 353 (1971)).
The matching smooth counting function is Weyl's law with its corrections,

    N(lam) ~ A lam / (4 pi)  -/+  L sqrt(lam) / (4 pi)  +  chi / 6.

Both are compared with the computed spectrum: the staircase N(lam) against
Weyl's N, and least-squares fits of Z(t) over times where the spectrum's
truncation is negligible, whose coefficients a, b, c are set beside
A/(4 pi), -/+ L/(8 sqrt pi) and chi/6 (:func:`heat_trace_fit`).

Spacings.  Levels are unfolded to unit mean spacing with a smooth fit
a lam + b sqrt(lam) + c of each class's own staircase (common practice:
unfolding by a smooth fit of the staircase), and the nearest-neighbour
spacing histogram is set against Poisson, P(s) = exp(-s) (integrable
dynamics), and the Wigner surmise P(s) = (pi s / 2) exp(-pi s^2 / 4)
(time-reversal-invariant chaotic dynamics; O. Bohigas, M. J. Giannoni and
C. Schmit, Phys. Rev. Lett. 52, 1 (1984); F. Haake, Quantum Signatures of
Chaos, ch. 4).  Levels of different symmetry classes do not repel each
other: a histogram over mixed classes tends to Poisson whatever the
dynamics, so the spacings are taken per class when the surface has mirror
planes through the origin (x = 0, y = 0, z = 0) that the mesh nodes respect,
each mode's class being its parities under those mirrors.  When a mode's
parity is not close to +1 or -1 (degenerate multiplets, e.g. on the sphere)
the classes are marked mixed and the histogram is said to be meaningless.
"""

from __future__ import annotations

import numpy as np

__all__ = ["weyl_count", "heat_trace_fit", "unfold", "spacing_summary", "mirror_classes", "level_statistics",
           "surface_topology", "surface_statistics", "poisson", "wigner"]

#: parities farther than this from +1 or -1 mark a mode's symmetry class as undefined
PARITY_TOLERANCE = 0.1


def poisson(s):
    """Poisson nearest-neighbour spacing density exp(-s)."""
    return np.exp(-np.asarray(s, dtype=float))


def wigner(s):
    """Wigner surmise for the orthogonal ensemble, (pi s / 2) exp(-pi s^2 / 4)."""
    s = np.asarray(s, dtype=float)
    return 0.5 * np.pi * s * np.exp(-0.25 * np.pi * s**2)


def _rim_sign(rim: str | None) -> float:
    return {None: 0.0, "dirichlet": -1.0, "neumann": 1.0}[rim]


def weyl_count(lam, area: float, euler: int, perimeter: float = 0.0, rim: str | None = None) -> np.ndarray:
    """Weyl's N(lam) = A lam / 4 pi -/+ L sqrt(lam) / 4 pi + chi / 6 (module docstring for sources).

    Examples
    --------
    >>> float(weyl_count(100.0, 4 * np.pi, 2))  # the unit sphere
    100.33333333333333
    """
    lam = np.maximum(np.asarray(lam, dtype=float), 0.0)
    return area * lam / (4 * np.pi) + _rim_sign(rim) * perimeter * np.sqrt(lam) / (4 * np.pi) + euler / 6.0


def heat_trace_fit(lam, area: float, perimeter: float = 0.0, rim: str | None = None, points: int = 40) -> dict:
    """The heat trace of the computed eigenvalues against its small-t expansion, term by term.

    Times run from t_min = log(1e6) / lam_max, where each missing mode above lam_max adds less
    than 1e-6, to 4 t_min.  Each coefficient is fitted with the expected lower-order terms
    subtracted (better conditioned than one fit of all): ``a`` from Z = a/t + b/sqrt(t) + c + e sqrt(t);
    ``b`` from Z - A/(4 pi t) = b/sqrt(t) + c + e sqrt(t) + d t; ``c`` from
    Z - A/(4 pi t) -/+ L/(8 sqrt(pi t)) = c + e sqrt(t) + d t.  Tail terms in sqrt(t) and t absorb
    the next orders of the expansion.
    """
    lam = np.sort(np.asarray(lam, dtype=float))
    top = lam[-1]
    t_min = np.log(1e6) / top
    t = np.geomspace(t_min, 4 * t_min, points)
    z = np.exp(-np.outer(t, lam)).sum(axis=1)
    one, root = np.ones_like(t), np.sqrt(t)

    def fit(columns, values):
        return np.linalg.lstsq(np.column_stack(columns), values, rcond=None)[0]

    expected_a = area / (4 * np.pi)
    expected_b = _rim_sign(rim) * perimeter / (8 * np.sqrt(np.pi))
    a = fit([1 / t, 1 / root, one, root], z)[0]
    b = fit([1 / root, one, root, t], z - expected_a / t)[0]
    c = fit([one, root, t], z - expected_a / t - expected_b / root)[0]
    return {"a": float(a), "b": float(b), "c": float(c), "expected_a": float(expected_a),
            "expected_b": float(expected_b), "t_min": float(t_min), "t_max": float(4 * t_min),
            "lam_max": float(top)}


def unfold(lam) -> np.ndarray:
    """Unfolded levels: a smooth a lam + b sqrt(lam) + c fitted to the staircase (i + 1/2 at lam_i)."""
    lam = np.sort(np.asarray(lam, dtype=float))
    x = np.maximum(lam, 0.0)
    design = np.column_stack([x, np.sqrt(x), np.ones_like(x)])
    coef, *_ = np.linalg.lstsq(design, np.arange(len(lam)) + 0.5, rcond=None)
    return design @ coef


def spacing_summary(levels, bins: int = 20, s_max: float = 4.0) -> dict:
    """Histogram of unfolded nearest-neighbour spacings and its distances to Poisson and Wigner.

    ``ks_poisson``/``ks_wigner``: largest distance between the spacings' empirical
    cumulative distribution and 1 - exp(-s) / 1 - exp(-pi s^2 / 4) (Kolmogorov-Smirnov statistic).
    """
    s = np.diff(np.sort(np.asarray(levels, dtype=float)))
    if len(s) < 2:
        return {"count": int(len(s))}
    s = s / np.mean(s)
    edges = np.linspace(0.0, s_max, bins + 1)
    density, _ = np.histogram(s, bins=edges, density=False)
    density = density / (len(s) * np.diff(edges))
    ordered = np.sort(s)
    upper = np.arange(1, len(s) + 1) / len(s)
    lower = np.arange(len(s)) / len(s)

    def ks(cdf):
        c = cdf(ordered)
        return float(max(np.max(upper - c), np.max(c - lower)))

    return {"count": int(len(s)), "edges": edges.tolist(), "density": density.tolist(),
            "ks_poisson": ks(lambda x: 1 - np.exp(-x)), "ks_wigner": ks(lambda x: 1 - np.exp(-0.25 * np.pi * x**2)),
            "small_fraction": float(np.mean(s < 0.25)),
            "small_fraction_poisson": float(1 - np.exp(-0.25)),
            "small_fraction_wigner": float(1 - np.exp(-0.25 * np.pi * 0.25**2))}


def mirror_classes(nodes, vectors, tolerance: float = 1e-8) -> tuple[list[str], np.ndarray | None]:
    """Mirror planes x=0, y=0, z=0 the nodes respect, and each mode's parities (+1/-1) under them.

    Returns ``(planes, parities)`` with parities of shape (modes, planes), NaN where a mode
    is not close to even or odd; ``(["..."], None)`` when no plane maps the nodes onto themselves.
    """
    from scipy.spatial import cKDTree

    nodes = np.asarray(nodes, dtype=float)
    tree = cKDTree(nodes)
    size = float(np.max(np.abs(nodes))) or 1.0
    planes, maps = [], []
    for axis, name in enumerate("xyz"):
        mirrored = nodes.copy()
        mirrored[:, axis] *= -1.0
        distance, index = tree.query(mirrored)
        if np.max(distance) <= tolerance * size:
            planes.append(f"{name}=0")
            maps.append(index)
    if not planes:
        return [], None
    norms = np.einsum("ij,ij->j", vectors, vectors)
    parities = np.column_stack([np.einsum("ij,ij->j", vectors[index], vectors) / norms for index in maps])
    parities = np.where(np.abs(np.abs(parities) - 1.0) <= PARITY_TOLERANCE, np.sign(parities), np.nan)
    return planes, parities


def level_statistics(lam, *, area: float, euler: int, perimeter: float = 0.0, rim: str | None = None,
                     nodes=None, vectors=None, bins: int = 20) -> dict:
    """Weyl comparison, heat-trace fit and spacing statistics (overall and per mirror class).

    ``lam`` are eigenvalues in 1/length^2 (not energies).  ``nodes`` and ``vectors`` (full
    nodal values, one column per mode) enable the per-class spacing statistics.
    """
    lam = np.sort(np.asarray(lam, dtype=float))
    staircase = np.arange(len(lam)) + 0.5  # N at the levels, midway up each step
    weyl = weyl_count(lam, area, euler, perimeter, rim)
    fit = heat_trace_fit(lam, area, perimeter, rim)
    out = {
        "modes": int(len(lam)), "area": float(area), "euler_characteristic": int(euler),
        "perimeter": float(perimeter), "rim": rim,
        "weyl": {"formula": "N(lam) = A lam / (4 pi) -/+ L sqrt(lam) / (4 pi) + chi / 6 (- Dirichlet, + Neumann)",
                 "source": "McKean and Singer, J. Diff. Geom. 1, 43 (1967); rim term Kac (1966), "
                           "Stewartson and Waechter (1971)",
                 "lam": lam.tolist(), "count": staircase.tolist(), "weyl": weyl.tolist(),
                 "mean_deviation": float(np.mean(staircase - weyl)),
                 "rms_deviation": float(np.sqrt(np.mean((staircase - weyl) ** 2)))},
        "heat_trace": {**fit, "expected_c": euler / 6.0},
    }
    classes = {"planes": [], "note": "no mirror plane through the origin maps the mesh onto itself"}
    groups = {"all": np.arange(len(lam))}
    if nodes is not None and vectors is not None and len(lam):
        planes, parities = mirror_classes(nodes, vectors)
        if planes:
            if np.isnan(parities).any():
                classes = {"planes": planes, "mixed": True,
                           "note": f"{int(np.isnan(parities).any(axis=1).sum())} modes have no definite parity "
                                   "(degenerate multiplets mix the classes): the spacing histograms are "
                                   "meaningless for level repulsion"}
            else:
                keys = ["".join("+" if p > 0 else "-" for p in row) for row in parities]
                groups = {k: np.flatnonzero(np.array(keys) == k) for k in sorted(set(keys))}
                classes = {"planes": planes, "mixed": False,
                           "note": "spacings per class of parities under " + ", ".join(planes)}
    if len(groups) == 1 and "mixed" not in classes and classes["planes"] == []:
        classes["note"] += ("; the spacings mix any symmetry classes the shape has, which drives the "
                            "histogram towards Poisson")
    out["classes"] = classes
    out["spacings"] = {name: {**spacing_summary(unfold(lam[members]), bins), "modes": int(len(members))}
                       for name, members in groups.items()}
    return out


def surface_topology(surface) -> tuple[int, float]:
    """Euler characteristic V - E + F of a curved surface's mesh, and the length of its rim.

    The rim is measured along the geometry nodes of each boundary edge (vertices and
    edge nodes, in order along the edge): exact at the nodes, so its error is that of a
    polyline through them.
    """
    mesh, basis, nodes = surface.mesh, surface.basis, surface.nodes
    euler = int(mesh.p.shape[1] - mesh.facets.shape[1] + mesh.t.shape[1])
    boundary = mesh.boundary_facets()
    if len(boundary) == 0:
        return euler, 0.0
    ends = basis.nodal_dofs[0][mesh.facets[:, boundary]]  # (2, B) vertex dofs
    a, b = nodes[ends[0]], nodes[ends[1]]
    chord = b - a
    if basis.facet_dofs.shape[0]:
        inner = nodes[basis.facet_dofs[:, boundary]]  # (k, B, 3)
        along = np.einsum("kbi,bi->kb", inner - a, chord) / np.einsum("bi,bi->b", chord, chord)
        inner = np.take_along_axis(inner, np.argsort(along, axis=0)[:, :, None], axis=0)
        path = np.concatenate([a[None], inner, b[None]], axis=0)
    else:
        path = np.stack([a, b])
    return euler, float(np.linalg.norm(np.diff(path, axis=0), axis=2).sum())


def surface_statistics(problem, solved) -> dict:
    """:func:`level_statistics` of a solved surface problem (eigenvalues, full nodal vectors).

    ``problem`` is an :class:`~shellmodes.eigen.planner.Problem` on a surface discretisation,
    ``solved`` what :func:`~shellmodes.eigen.planner.solve_plan` returned for it.
    """
    disc = problem.disc
    euler, perimeter = surface_topology(disc.raw)
    return level_statistics(solved.pairs.lam, area=float(problem.operators.extra["area"]), euler=euler,
                            perimeter=perimeter, rim=disc.rim, nodes=disc.nodes, vectors=solved.vectors)
