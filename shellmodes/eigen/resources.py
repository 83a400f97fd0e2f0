"""The memory guard: what a case will need, estimated from the case alone, against what there is.

:func:`check_resources` runs before any mesh or matrix is built.  From the
validated case it counts the unknowns (reference-mesh entity counts after the
case's subdivisions, Lagrange dofs per vertex, edge and face; prisms as surface
dofs times radial nodes), the matrix non-zeros, the basis data at quadrature
points, the Cholesky factor (nested-dissection estimate of
:func:`shellmodes.eigen.backends.lobpcg_amg.estimate_factor_memory` on a small
lattice of the same dimension and stencil, scaled by the nested-dissection
growth laws n log n in 2-D and n^(4/3) in 3-D: George 1973, Lipton, Rose and
Tarjan 1979), the eigen-iteration's working set (ARPACK's Lanczos basis and
work array, the blocked iteration's basis, a LOBPCG block, or a dense
fall-back) and the modes written out.  In an energy window (``modes.below``)
the number of modes is estimated by Weyl's law (H. Weyl, Math. Ann. 71 (1912)
441): N(lam) ~ area lam / (4 pi) on a surface, volume lam^(3/2) / (6 pi^2) in
3-D.

The estimate is meant to be right within a factor of about two; it exists to
refuse a typo that would take the machine (``subdivisions = 9`` at degree 4,
``layers = 100000000``, ``count = 100000``) with a one-line case error naming
the key to change, instead of allocating until the system gives out.

The memory available is, in this order of precedence, the smallest of the
limits that are set: the case key ``limits.memory_gib`` and the environment
variable ``SHELLMODES_MEMORY_LIMIT`` (GiB, or a number with a unit: ``512MiB``,
``8GiB``, ``2TB``); with neither, what the machine reports as available
(``MemAvailable`` in /proc/meminfo).
"""

from __future__ import annotations

import functools
import math
import os
import re
from dataclasses import dataclass

import numpy as np

from shellmodes.errors import CaseError, SolverError

__all__ = ["MemoryEstimate", "estimate_case", "check_resources", "memory_limit", "parse_memory",
           "check_growth", "check_count", "ENV_LIMIT"]

#: environment variable that sets the memory limit (GiB, or a number with a unit)
ENV_LIMIT = "SHELLMODES_MEMORY_LIMIT"
GIB = 2**30
_UNITS = {"": GIB, "b": 1, "k": 1e3, "kb": 1e3, "kib": 2**10, "m": 1e6, "mb": 1e6, "mib": 2**20,
          "g": 1e9, "gb": 1e9, "gib": GIB, "t": 1e12, "tb": 1e12, "tib": 2**40}
#: bytes per stored sparse entry: float64 value and int32 column index (CSR)
_CSR = 12
#: bytes per element-matrix entry while assembling (COO: float64 value and two int64 indices)
_COO = 24
#: the interpreter, numpy, scipy, scikit-fem and meshio loaded (measured here: about 0.15 GiB resident)
_PROGRAM = 0.15 * 2**30


def parse_memory(text: str) -> float:
    """Bytes from ``"8"`` (GiB), ``"512MiB"``, ``"2 GB"``; ValueError for anything else."""
    match = re.fullmatch(r"\s*([0-9]*\.?[0-9]+(?:[eE][+-]?[0-9]+)?)\s*([a-zA-Z]*)\s*", str(text))
    if not match or match.group(2).lower() not in _UNITS:
        raise ValueError(f"{text!r} is not a memory size; give GiB as a number or a number with a unit "
                         "(MiB, GiB, TiB, MB, GB, TB)")
    value = float(match.group(1)) * _UNITS[match.group(2).lower()]
    if not math.isfinite(value) or value <= 0:
        raise ValueError(f"{text!r} is not a positive memory size")
    return value


def memory_limit(case=None) -> tuple[float, str]:
    """Bytes the run may use and where that figure comes from."""
    from shellmodes.eigen.backends.lobpcg_amg import available_memory

    limits = []
    key = getattr(getattr(case, "limits", None), "memory_gib", None)
    if key is not None:
        limits.append((float(key) * GIB, "limits.memory_gib"))
    env = os.environ.get(ENV_LIMIT)
    if env is not None and env.strip():
        try:
            limits.append((parse_memory(env), ENV_LIMIT))
        except ValueError as exc:
            raise CaseError(f"environment variable {ENV_LIMIT}: {exc}",
                            getattr(case, "source", None)) from None
    if limits:
        return min(limits)
    return float(available_memory()), "memory available (MemAvailable)"


@dataclass(frozen=True)
class MemoryEstimate:
    """Estimated peak memory of a case, by part (bytes), and what drives it."""

    unknowns: int
    nonzeros: int
    modes: int
    parts: dict
    key: str
    window: float | None = None  # modes estimated in an energy window (Weyl's law), before any cap

    @property
    def total(self) -> float:
        return float(sum(self.parts.values()))

    def describe(self) -> str:
        shown = ", ".join(f"{name} {value / GIB:.3g}" for name, value in self.parts.items() if value > 0.01 * GIB)
        return f"{self.unknowns:,} unknowns, {self.modes:,} modes; GiB: {shown}"


# ------------------------------------------------------------------------------------------------ counts

def _subdivide(v: float, e: float, f: float, level: int) -> tuple[float, float, float]:
    """Vertex, edge and face counts after ``level`` halvings of every triangle (exact recurrence)."""
    for _ in range(level):
        v, e, f = v + e, 2 * e + 3 * f, 4 * f
    return v, e, f


def _icosphere(level: int) -> tuple[float, float, float]:
    return _subdivide(12.0, 30.0, 20.0, level)


def _triangle_dofs(v: float, e: float, f: float, p: int) -> tuple[float, float]:
    """Lagrange P_p dofs on a triangle mesh and the non-zeros of its stiffness pattern.

    Row widths: a face-interior dof couples with its face's np dofs, an edge dof with the two
    faces' 2 np - (p + 1), a vertex of valence w (mean 2E/V) with its star's
    (w + 1) + 2 w (p - 1) + w (p - 1)(p - 2) / 2.
    """
    interior = (p - 1) * (p - 2) / 2
    dofs = v + (p - 1) * e + interior * f
    npe = (p + 1) * (p + 2) / 2
    w = 2 * e / max(v, 1.0)
    nnz = (interior * f * npe + (p - 1) * e * (2 * npe - (p + 1))
           + v * ((w + 1) + 2 * w * (p - 1) + w * interior))
    return dofs, nnz


def _quadrature_points(dim: int, order: int) -> int:
    from skfem.quadrature import get_quadrature
    from skfem.refdom import RefTet, RefTri

    return int(get_quadrature(RefTri if dim == 2 else RefTet, order)[1].size)


@functools.lru_cache(maxsize=16)
def _fill_constant(dim: int, reach: int) -> float:
    """nnz(L) / law(n) for a lattice whose nodes couple within ``reach`` steps (nested dissection)."""
    import scipy.sparse as sp

    from shellmodes.eigen.backends.lobpcg_amg import estimate_factor_memory

    side = 48 + 2 * reach if dim == 2 else 10 + 2 * reach
    axes = [np.arange(side)] * dim
    points = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, dim).astype(float)
    line = sp.diags([1.0] * (2 * reach + 1), list(range(-reach, reach + 1)), shape=(side, side))
    pattern = line
    for _ in range(dim - 1):
        pattern = sp.kron(pattern, line)
    n = points.shape[0]
    factor = estimate_factor_memory(sp.csr_matrix(pattern), points)
    return factor.nnz / _law(dim, n)


def _law(dim: int, n: float) -> float:
    return n * max(math.log2(max(n, 2.0)), 1.0) if dim == 2 else n ** (4.0 / 3.0)


def _factor_bytes(dim: int, n: float, reach: int) -> float:
    """Estimated Cholesky factor of an n-unknown problem in ``dim`` dimensions (bytes)."""
    from shellmodes.eigen.backends.lobpcg_amg import BYTES_PER_ENTRY

    if n <= 0:
        return 0.0
    return BYTES_PER_ENTRY * _fill_constant(dim, max(1, min(int(reach), 4 if dim == 2 else 3))) * _law(dim, n)


def _weyl(case, measure: float, dim: int, e0, mass_ratio: float = 1.0) -> float:
    """Modes below ``modes.below`` by Weyl's law (area lam / 4 pi; volume lam^1.5 / 6 pi^2)."""
    below = case.modes.below
    lam = below / e0 if e0 is not None else below
    lam = max(float(lam), 0.0) * mass_ratio
    if dim == 2:
        return measure * lam / (4 * math.pi)
    return measure * lam**1.5 / (6 * math.pi**2)


def _eigen_bytes(n: float, modes: float, method: str, nnz: float) -> tuple[float, float]:
    """Working set of the eigen-iteration for ``modes`` modes of n unknowns, and the vectors kept."""
    from shellmodes.limits import BLOCK_THRESHOLD, DENSE_LIMIT

    k = min(n, modes + max(6, math.ceil(0.15 * modes)))
    kept = 8.0 * n * k
    if n <= DENSE_LIMIT or k >= n - 1:
        return 4 * 8.0 * n * n, kept  # dense K, M, eigh workspace and vectors
    if method == "lobpcg":
        block = k + max(4, math.ceil(0.25 * modes))
        return 12 * 8.0 * n * block + 10 * 8.0 * (3 * block) ** 2 + 3 * _CSR * nnz, kept
    if method == "block" or (method == "auto" and n >= BLOCK_THRESHOLD):
        basis = min(n, 2.2 * k + 64)
        return 3 * 8.0 * n * basis + 8.0 * basis**2 * 4, kept
    ncv = min(n, max(2 * k + 1, k + 32))
    return 8.0 * n * ncv + 8.0 * ncv * (ncv + 8) + kept, kept


def _slices_bytes(case, n: float, modes: float, factor: float) -> tuple[float, float]:
    """Working set of spectrum slicing: each running slice holds its LU factor (both triangles, about twice
    a Cholesky factor) and its Lanczos basis; the collected vectors are held once more while joined."""
    from shellmodes.limits import DENSE_LIMIT

    k = min(n, modes + max(6, math.ceil(0.15 * modes)))
    kept = 8.0 * n * k
    if n <= DENSE_LIMIT:
        return 4 * 8.0 * n * n, kept
    per_slice = 1.1 * case.modes.slice_modes + 8
    ncv = min(n, max(2 * per_slice + 1, per_slice + 32))
    running = 1 if case.modes.scheduler else min(case.modes.workers, math.ceil(modes / case.modes.slice_modes))
    return running * (8.0 * n * ncv + 8.0 * ncv * (ncv + 8) + 2 * factor) + kept, kept


def _slices(case, n: float) -> bool:
    """Whether the planner will slice the spectrum (asked, or by default from SLICE_FROM modes on)."""
    from shellmodes.limits import DENSE_LIMIT, SLICE_FROM

    modes = case.modes
    return modes.method == "slices" or (modes.method == "auto" and (modes.count or 0) >= SLICE_FROM
                                        and n > DENSE_LIMIT)


# ------------------------------------------------------------------------------------------------ cases

def _size_key(case) -> str:
    res = case.resolution
    return "resolution.edge_length" if res.edge_length is not None else "resolution.subdivisions"


def _mode_key(case) -> str:
    return "modes.count" if case.modes.count is not None else "modes.below"


def _estimate(case, sizes, parts, size_key: str) -> MemoryEstimate:
    """Package the parts; blame the modes when the eigen-iteration dominates, else the resolution."""
    dofs, nnz, modes, window = sizes
    mesh, assembly, factor, eigen, kept = parts
    named = {"program": _PROGRAM, "mesh and basis": mesh, "matrices": assembly, "factor": factor,
             "eigen-iteration": eigen, "modes written": 2 * kept}
    key = _mode_key(case) if eigen + 2 * kept > mesh + assembly + factor else size_key
    return MemoryEstimate(int(dofs), int(nnz), int(modes), named, key, window)


def _surface_estimate(case) -> MemoryEstimate:
    from shellmodes.case.model import build_shape, energy_scale, subdivision_level

    shape = build_shape(case)
    level = subdivision_level(case, shape)
    points, triangles = shape.reference(0)
    triangles = np.asarray(triangles)
    edges = np.unique(np.sort(triangles[:, [0, 1, 1, 2, 2, 0]].reshape(-1, 2), axis=1), axis=0)
    v, e, f = _subdivide(float(len(points)), float(len(edges)), float(len(triangles)), level)
    p = case.resolution.degree
    g = case.resolution.geometry_degree or p
    dofs, nnz = _triangle_dofs(v, e, f, p)
    order = case.resolution.quadrature_order or 2 * max(p, g) + 2
    nqp = _quadrature_points(2, order)
    npe, nge = (p + 1) * (p + 2) / 2, (g + 1) * (g + 2) / 2
    mesh = 8.0 * f * nqp * (4 * npe + 4 * nge + 20) + 8.0 * 3 * dofs
    assembly = _COO * f * npe**2 + 3 * _CSR * nnz
    factor = _factor_bytes(2, dofs, p)
    window = None
    if case.modes.count is not None:
        modes = float(case.modes.count)
    else:
        fine_points, fine_triangles = shape.reference(2 if shape.name != "mesh" else 0)
        x = shape.project(np.asarray(fine_points, dtype=float))[np.asarray(fine_triangles)]
        area = 0.5 * float(np.sum(np.linalg.norm(np.cross(x[:, 1] - x[:, 0], x[:, 2] - x[:, 0]), axis=1)))
        window = 1.2 * _weyl(case, area, 2, energy_scale(case, shape)[0]) + 10
        modes = min(dofs, window)
    method = case.modes.method if case.modes.method in ("lanczos", "block") else "auto"
    if _slices(case, dofs):
        eigen, kept = _slices_bytes(case, dofs, modes, factor)
    else:
        eigen, kept = _eigen_bytes(dofs, modes, method, nnz)
    return _estimate(case, (dofs, nnz, modes, window), (mesh, assembly, factor, eigen, kept), _size_key(case))


def _separates(case) -> bool:
    """Whether a prism shell will be solved by separation (concentric spheres, no potential or V(r))."""
    shell = case.shell
    if case.modes.method not in ("auto", "separable"):
        return False
    walls = [w for w in (shell.inner, *shell.interfaces, shell.outer) if w is not None]
    if not all(w.shape == "sphere" or (w.shape == "deformed_sphere" and not w.deformation) for w in walls):
        return False
    from shellmodes.case.model import energy_scale, radial_potential

    return case.potential is None or radial_potential(case, energy_scale(case)[0]) is not None


def _shell_volume(case) -> float:
    from shellmodes.case.model import wall_function

    shell = case.shell
    directions = np.array([[1, 0, 0], [0, 1, 0], [0, 0, 1], [-1, 0, 0], [0, -1, 0], [0, 0, -1]], dtype=float)
    outer = float(np.max(wall_function(shell.outer)(directions)))
    inner = 0.0 if shell.inner is None else float(np.min(wall_function(shell.inner)(directions)))
    return 4.0 / 3.0 * math.pi * (outer**3 - inner**3)


def _shell_estimate(case) -> MemoryEstimate | None:
    from shellmodes.case.model import energy_scale, shell_level

    shell, res = case.shell, case.resolution
    if shell.file is not None:
        return None  # the mesh file bounds the size; the 3-D solver path is chosen from its factor estimate
    level = shell_level(case)
    media = len(shell.interfaces) + 1
    layers = [shell.layers] * media if isinstance(shell.layers, int) else list(shell.layers)
    total_layers = float(sum(layers))
    p = res.degree
    v, e, f = _icosphere(level)
    if shell.cells == "prisms":
        q = shell.radial_degree or p
        n_s, nnz_s = _triangle_dofs(v, e, f, p)
        n_r = total_layers * q + 1
        nnz_r = total_layers * (q + 1) ** 2
        dofs, nnz = n_s * n_r, nnz_s * nnz_r
        nqp_s = _quadrature_points(2, res.quadrature_order or 2 * max(p, res.geometry_degree or p) + 2)
        npe_s = (p + 1) * (p + 2) / 2
        if _separates(case):  # surface problem, dense radial problems, Kronecker-product modes
            modes_s = float(case.modes.count or 1000)
            eigen_s, _ = _eigen_bytes(n_s, min(n_s, modes_s), "auto", nnz_s)
            mesh = 8.0 * f * nqp_s * (4 * npe_s + 20)
            assembly = _COO * f * npe_s**2 + 3 * _CSR * nnz_s + 8.0 * 4 * n_r**2
            factor = _factor_bytes(2, n_s, p) + eigen_s
            method = "separable"
        else:
            npe = npe_s * (q + 1)
            cells = f * total_layers
            mesh = 8.0 * cells * nqp_s * (q + 2) * 4 * npe
            assembly = _COO * cells * npe**2 + 3 * _CSR * nnz
            # deformed shells at scale: one surface factor per radial mode (spherical preconditioner), LOBPCG
            factor = min(_factor_bytes(3, dofs, max(p, q)), n_r * _factor_bytes(2, n_s, p))
            method = "lobpcg" if dofs >= 15_000 else "auto"
        reach_key = "shell.layers" if n_r > 4 * math.sqrt(n_s) else _size_key(case)
    else:
        tets = 3 * f * total_layers
        verts = v * (total_layers + 1)
        if shell.inner is None:  # a ball's core: a red-refined solid icosahedron
            tets += 20 * 8.0**level
            verts += 20 * 8.0**level / 5
        edges = verts + tets  # Euler's relation with two faces per tetrahedron
        dofs = verts if p == 1 else verts + edges
        nnz = verts + 2 * edges if p == 1 else 7.5 * (verts + 2 * edges)  # P2: measured ratio, common practice
        npe = 4 if p == 1 else 10
        nqp = _quadrature_points(3, res.quadrature_order or 2 * p + 1)
        mesh = 8.0 * tets * nqp * (4 * npe + 12)
        assembly = _COO * tets * npe**2 + 3 * _CSR * nnz
        factor = _factor_bytes(3, dofs, p)
        method = "auto"
        reach_key = "shell.layers" if total_layers > 4 * 2**level else _size_key(case)
    window = None
    if case.modes.count is not None:
        modes = float(case.modes.count)
    else:
        masses = [r.effective_mass for r in shell.media if r.effective_mass is not None]
        ratio = max([m / case.particle.effective_mass for m in masses] + [1.0])
        window = 1.2 * _weyl(case, _shell_volume(case), 3, energy_scale(case)[0], ratio) + 10
        modes = min(dofs, window)
    if method != "separable" and (case.modes.method == "slices" or (method == "auto" and _slices(case, dofs))):
        method = "slices"
        eigen, kept = _slices_bytes(case, dofs, modes, factor)
    else:
        eigen, kept = _eigen_bytes(dofs, modes, method, nnz)
    if method == "separable":
        eigen = kept
    if method == "auto" and shell.cells == "tetrahedra":
        # a factor too big for memory sends the run to LOBPCG with AMG instead: take the cheaper path
        lobpcg, _ = _eigen_bytes(dofs, modes, "lobpcg", nnz)
        if lobpcg + 2 * _CSR * nnz < eigen + factor:
            eigen, factor = lobpcg, 2 * _CSR * nnz
    return _estimate(case, (dofs, nnz, modes, window), (mesh, assembly, factor, eigen, kept), reach_key)


def estimate_case(case) -> MemoryEstimate | None:
    """Estimated peak memory of a case before anything is built (None for 3-D mesh files)."""
    return _shell_estimate(case) if case.shell is not None else _surface_estimate(case)


def check_resources(case, layers_key: str | None = None) -> MemoryEstimate | None:
    """Refuse a case whose estimated memory exceeds the limit (:class:`CaseError` naming the key).

    ``layers_key`` names the option to blame instead of ``shell.layers`` (e.g. ``--layers`` of a
    command that builds the shell itself).
    """
    estimate = estimate_case(case)
    if estimate is None:
        return None
    if estimate.window is not None and estimate.window > 0.5 * estimate.unknowns:
        raise CaseError(f"value {case.modes.below!r}: the window holds about {estimate.window:.3g} modes by Weyl's "
                        f"law, more than half of the {estimate.unknowns:,} unknowns; the upper half of a "
                        "discrete spectrum is not accurate; give a lower modes.below or refine the mesh",
                        case.source, "modes.below")
    limit, origin = memory_limit(case)
    if estimate.total <= limit:
        return estimate
    key = estimate.key
    value = _value_of(case, key)
    if layers_key is not None and key == "shell.layers":
        key = layers_key
    advice = ("ask for fewer modes" if key.startswith("modes.") else "use a coarser resolution")
    raise CaseError(f"value {value!r}: the run would need about {estimate.total / GIB:.3g} GiB "
                    f"({estimate.describe()}) but the limit is {limit / GIB:.3g} GiB ({origin}); {advice}, "
                    f"or raise limits.memory_gib or {ENV_LIMIT} if the machine has more", case.source, key)


def _value_of(case, key: str):
    table, _, name = key.partition(".")
    section = getattr(case, table, None)
    value = getattr(section, name, None) if section is not None else None
    if value is None and key == "resolution.subdivisions":
        return "default" if case.resolution.edge_length is None else case.resolution.edge_length
    return value


def check_count(count: int | None, n: int) -> None:
    """The one rule of every solver path: a run returns at least ``count`` modes or refuses.

    A count above the unknowns is refused (:class:`SolverError`, blamed on ``modes.count``);
    no path silently returns fewer modes than asked.
    """
    if count is not None and count > n:
        raise SolverError(f"{count} modes were requested but the discretisation has only {n} "
                          "degrees of freedom; refine the mesh or ask for fewer modes")


def check_growth(n: int, k: int, count: int | None, below: float | None, tolerance: float) -> None:
    """Stop an eigen-iteration whose wanted set keeps growing (huge ``below`` or multiplet tolerance).

    With a count, the set only grows to finish a multiplet: beyond ``2 count + 64`` modes the
    multiplet tolerance is grouping levels that are not degenerate.  With an energy window the set
    doubles until it passes ``below``: it stops where the vectors would no longer fit in memory.
    """
    if count is not None:
        if k > 2 * count + 64:
            error = SolverError(f"the last multiplet keeps growing past {k} modes for {count} asked: "
                                f"modes.multiplet_tolerance {tolerance:g} groups levels that are far apart; "
                                "use a smaller value (default 1e-4)")
            error.key = "modes.multiplet_tolerance"
            raise error
        return
    limit, origin = memory_limit()
    vectors = 8.0 * n * max(2 * k + 1, k + 32)
    if vectors > 0.5 * limit:
        error = SolverError(f"the energy window holds more than {k // 2} of {n} modes and {k} more would need "
                            f"{vectors / GIB:.3g} GiB of Krylov vectors (limit {limit / GIB:.3g} GiB, {origin}); "
                            "give a lower modes.below or a modes.count")
        error.key = "modes.below"
        raise error
