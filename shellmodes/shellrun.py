"""The pipeline for a shell or ball case: walls -> layered tetrahedra -> K, M -> modes -> spectrum.

The same case file, solver, spectrum and outputs as surfaces; only the
discretisation differs (:mod:`shellmodes.volume`).  Media carry their own
effective mass (the kinetic form (m0/m) grad u . grad v gives the
BenDaniel-Duke flux condition at interfaces) and potential offset.  For
spherically symmetric geometries each mode gets (n, l) from its angular
content; deformed ones get the parent (n, l) of the dominant harmonic.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np

from .case import Case, Wall
from .errors import CaseError, GeometryError, MeshError, ShellmodesError
from .harmonics import angles, real_sph_harm
from .run import compiled_potential, energy_scale, finish_spectrum, solve_case_modes
from .spectrum import build_multiplets, parent_degree

__all__ = ["run_shell", "wall_function", "build_volume", "radial_potential", "shell_level", "check_walls",
           "shell_mass_matrix"]


def wall_function(wall: Wall):
    """Radius of the wall along unit directions (N, 3) -> (N,)."""
    if wall.shape == "sphere":
        radius = float(wall.radius)
        return lambda d: np.full(len(d), radius)
    if wall.shape in ("ellipsoid", "spheroid"):
        axes = np.array(wall.axes if wall.shape == "ellipsoid" else
                        (wall.equatorial_radius, wall.equatorial_radius, wall.polar_radius), dtype=float)
        # the point t d lies on x^2/a^2 + y^2/b^2 + z^2/c^2 = 1 for t = 1/sqrt(sum (d_i/a_i)^2)
        return lambda d: 1.0 / np.sqrt(np.sum((d / axes) ** 2, axis=1))
    terms = [(t.l, t.m, t.amplitude) for t in (wall.deformation or ())]
    radius = float(wall.radius)

    def star(d):
        theta, phi = angles(d)
        factor = np.ones(len(d))
        for l, m, a in terms:
            factor = factor + a * real_sph_harm(l, m, theta, phi)
        return radius * factor

    return star


def _spherical(case: Case) -> bool:
    shell = case.shell
    if shell.file is not None or case.potential is not None:
        return False
    walls = [w for w in (shell.inner, *shell.interfaces, shell.outer) if w is not None]
    return all(w.shape == "sphere" or (w.shape == "star" and not w.deformation) for w in walls)


def shell_level(case: Case) -> int:
    """Icosphere subdivisions of a shell's directions (``resolution.subdivisions`` or from ``edge_length``)."""
    shell, res = case.shell, case.resolution
    level = res.subdivisions if res.subdivisions is not None else 2
    most = 8 if shell.cells == "prisms" else 7
    if res.edge_length is not None and shell.outer is not None:
        outer = float(np.max(wall_function(shell.outer)(np.eye(3))))
        level = max(0, int(np.ceil(np.log2(1.05 * outer / res.edge_length))))
        if level > most:
            raise CaseError(f"value {res.edge_length!r}: needs {level} subdivisions of the directions, at most "
                            f"{most} are allowed for shell {shell.cells}; use a larger edge_length", case.source,
                            "resolution.edge_length")
    if level > most:
        raise CaseError(f"value {level!r}: shell {shell.cells} allow at most {most} subdivisions", case.source,
                        "resolution.subdivisions")
    return level


def check_walls(case: Case) -> None:
    """The walls' radii and ordering, checked cheaply (no mesh): what a sweep validates per step."""
    from .volume.shellmesh import _check_walls

    shell = case.shell
    if shell.file is not None:
        return
    functions = [None if w is None else wall_function(w) for w in (shell.inner, *shell.interfaces, shell.outer)]
    try:
        _check_walls(functions, min(shell_level(case), 6))
    except GeometryError as exc:
        raise CaseError(str(exc), case.source, "shell") from None


def build_volume(case: Case):
    """The curved volume discretisation a shell case describes."""
    from .volume import discretise, read_volume_mesh, shell_mesh

    shell = case.shell
    res = case.resolution
    if shell.file is not None:
        path = Path(shell.file)
        if not path.is_absolute():
            path = case.base_dir / path
        try:
            return read_volume_mesh(path, degree=res.degree, require_regions=bool(shell.regions),
                                    quadrature_order=res.quadrature_order)
        except MeshError as exc:
            raise CaseError(exc.reason, exc.source or case.source, "shell.file") from None
    walls = [shell.inner, *shell.interfaces, shell.outer]
    functions = [None if w is None else wall_function(w) for w in walls]
    prisms = shell.cells == "prisms"
    level = shell_level(case)
    layers = shell.layers if isinstance(shell.layers, int) else list(shell.layers)
    try:
        if prisms:
            from .layering import case_fractions
            from .volume.prisms import prism_shell

            return prism_shell(functions, level, layers, degree=res.degree, radial_degree=shell.radial_degree,
                               geometry_degree=res.geometry_degree, quadrature_order=res.quadrature_order,
                               fractions=case_fractions(case, functions, energy_scale(case)[0]))
        mesh = shell_mesh(functions, level=level, layers_per_region=layers)
        return discretise(mesh, res.degree, quadrature_order=res.quadrature_order)
    except GeometryError as exc:
        raise CaseError(str(exc), case.source, "shell") from None
    except MeshError as exc:
        raise CaseError(exc.reason, case.source, "shell") from None


def _media(case: Case, disc, e0):
    """Per-region inverse mass m0/m and potential offset (lambda units), checked against the mesh."""
    shell, particle = case.shell, case.particle
    ids = disc.region_ids
    entries_by_id = {}
    named = {name: tag for tag, name in getattr(disc, "region_names", {}).items()}
    for i, region in enumerate(shell.regions):
        # default tag: the region's place (inside out), or the i-th tag present in a mesh file
        tag = region.tag if region.tag is not None else (ids[i] if shell.file is not None and i < len(ids) else i)
        if isinstance(tag, str):
            if tag not in named:
                present = ", ".join(sorted(named)) if named else "none (the mesh names no volume regions)"
                raise CaseError(f"value {tag!r}: no region of that name in the mesh; names present: {present}",
                                case.source, f"shell.regions[{i}].tag")
            tag = named[tag]
        if tag not in ids:
            raise CaseError(f"value {tag!r}: no such region in the mesh; regions present: "
                            f"{', '.join(map(str, ids))}", case.source, f"shell.regions[{i}].tag")
        entries_by_id[tag] = region
    missing = [r for r in ids if r not in entries_by_id]
    if shell.regions and missing:
        raise CaseError(f"the mesh has regions {', '.join(map(str, missing))} that shell.regions does not "
                        "describe; list every region", case.source, "shell.regions")
    offset_scale = _offset_scale(case, e0)
    inverse_mass, offsets, names = {}, {}, {}
    for r in ids:
        region = entries_by_id.get(r)
        mass = particle.effective_mass if region is None or region.effective_mass is None else region.effective_mass
        inverse_mass[r] = particle.effective_mass / mass
        offsets[r] = 0.0 if region is None else region.offset * offset_scale
        file_name = getattr(disc, "region_names", {}).get(r)
        names[r] = (region.name if region is not None and region.name else file_name or f"region {r}")
    return inverse_mass, offsets, names


def _offset_scale(case: Case, e0) -> float:
    """Factor turning a region offset into lambda units: offsets are in units.energy, whatever potential.unit is."""
    if case.units.energy == "1" or e0 is None:
        return 1.0
    return 1.0 / e0


def _labels(case, disc, vectors, M, lam):
    """(n, l) per mode, or None when there is no centre to expand about."""
    from .volume import radial_angular_labels

    if vectors.shape[1] == 0:
        return None
    radial_degree = 6
    # (l_max + 1)^2 (radial_degree + 1) fitting functions must stay below 1/8 of the nodes to be resolved,
    # and the count of modes bounds the degrees present (l <= sqrt(count) for a ladder of 2l+1 multiplets)
    resolvable = int(np.sqrt(disc.ndofs / (8.0 * (radial_degree + 1)))) - 1
    l_max = max(1, min(12, resolvable, int(np.sqrt(vectors.shape[1])) + 2))
    try:
        return radial_angular_labels(disc.nodes, vectors, M, l_max, radial_degree=radial_degree)
    except (ValueError, np.linalg.LinAlgError):
        return None


def _choose_path(case: Case, K, points):
    """Factorize (shift-invert) if the estimated Cholesky factor fits in memory, else LOBPCG with AMG.

    3-D factors fill in badly (DESIGN.md: 5.2 GB at 464k P2 unknowns), so the
    factor's size is estimated by nested dissection before anything is factored.
    """
    from .backends.lobpcg_amg import choose_eigen_path

    count = case.modes.count or 50
    try:
        path, estimate = choose_eigen_path(K, count, points=points)
    except (MemoryError, ValueError):  # the estimate itself is optional information
        return "shift-invert", None, "factor size not estimated"
    gib = estimate.bytes / 2**30
    if path == "shift-invert":
        reason = f"estimated Cholesky factor {gib:.2f} GiB fits in memory: shift-invert"
    else:
        reason = f"estimated Cholesky factor {gib:.2f} GiB exceeds half the free memory: LOBPCG with AMG"
    if case.modes.method != "auto":
        reason += f" (case asks for method {case.modes.method!r})"
    return path, estimate, reason


def _dirichlet_walls(case: Case, disc=None) -> list[str]:
    """Walls held at zero; a ball (from walls or a mesh file without an inner boundary) has no inner wall."""
    shell = case.shell
    walls = [w for w, c in (("inner", shell.inner_condition), ("outer", shell.outer_condition)) if c == "dirichlet"]
    ball = shell.inner is None if shell.file is None else not len(getattr(disc, "walls", {}).get("inner", ()))
    return [w for w in walls if w != "inner"] if ball else walls


def radial_potential(case: Case, e0):
    """The case's potential as a function of r alone (lambda units), or None when it uses x, y, z or angles."""
    from .expression import ExpressionError, compile_expression

    if case.potential is None:
        return None
    try:
        compile_expression(case.potential.expression, variables=("r",))
    except ExpressionError:
        return None
    full = compiled_potential(case, e0)

    def potential(r):
        r = np.asarray(r, dtype=float)
        zero = np.zeros_like(r)
        return full(x=zero, y=zero, z=zero, r=r, theta=zero, phi=zero)

    return potential


def _separable(case: Case, disc, potential) -> bool:
    """Whether the prism case separates (concentric spheres, no potential or V(r)), or fails when asked to."""
    fits = (case.potential is None or potential is not None) and disc.concentric_spheres()
    if case.modes.method == "separable" and not fits:
        why = ("the walls are not concentric spheres about the origin" if not disc.concentric_spheres()
               else "the potential depends on more than r")
        raise CaseError(f"value 'separable': {why}; use 'auto'", case.source, "modes.method")
    return fits and case.modes.method in ("auto", "separable")


def _solve_separable(case: Case, disc, inverse_mass, offsets, lower, scale, potential=None):
    """Eigenpairs of a prism shell between concentric spheres by separation, with (n, l) per mode."""
    import warnings

    from threadpoolctl import threadpool_limits

    from .solve import DoubtfulResultWarning, Eigenpairs, lowest_modes
    from .volume.prisms import kronecker_factors
    from .volume.separable import separable_modes

    modes = case.modes
    Ks, Ms, A, B, C = kronecker_factors(disc, inverse_mass, offsets, potential)
    radial_free = disc.free_radial(_dirichlet_walls(case))
    e0 = energy_scale(case)[0]
    below = None if modes.below is None else (modes.below / e0 if e0 is not None else modes.below)

    def surface(k):
        # the unit sphere's multiplets close at (L + 1)^2 modes: asking that many needs one Lanczos run
        k = min(Ks.shape[0], int(np.ceil(np.sqrt(k))) ** 2)
        return lowest_modes(Ks, Ms, count=k, lower_bound=0.0, scale=1.0, backend=modes.backend,
                            multiplet_tolerance=modes.multiplet_tolerance, residual_limit=modes.residual_limit)

    shift = lower - scale
    with warnings.catch_warnings(record=True) as caught, threadpool_limits(limits=1):
        warnings.simplefilter("always")
        try:
            found = separable_modes(Ks, Ms, A, B, C, radial_free, count=modes.count, below=below,
                                    multiplet_tolerance=modes.multiplet_tolerance, scale=abs(shift),
                                    surface_solver=surface, centre=disc.ball)
        except ShellmodesError as exc:
            raise CaseError(str(exc), case.source, "modes.count" if modes.count else "modes.below") from None
    messages = [str(w.message) for w in caught]
    worst = float(np.max(found.residuals)) if len(found.lam) else 0.0
    if worst > modes.residual_limit:
        messages.append(f"largest relative residual {worst:.2e} exceeds the limit {modes.residual_limit:.1e} "
                        f"(mode {int(np.argmax(found.residuals))}); do not trust these modes without checking")
        warnings.warn(messages[-1], DoubtfulResultWarning, stacklevel=3)
    if len(found.lam) == 0 and below is not None:
        # the lowest level pairs the constant surface mode (mu = 0, exactly: Ks 1 = 0) with the lowest radial one
        import scipy.linalg as sla

        f = np.ix_(radial_free, radial_free)
        lowest = float(sla.eigh(A[f], C[f], eigvals_only=True)[0])
        shown = lowest * e0 if e0 is not None else lowest
        messages.append(f"{case.source}: no mode lies below modes.below = {modes.below!r}; the lowest is "
                        f"{shown:.6g}" + ("" if case.units.energy == "1" else f" {case.units.energy}"))
        warnings.warn(messages[-1], UserWarning, stacklevel=3)
    pairs = Eigenpairs(lam=found.lam, vectors=found.vectors, residuals=found.residuals,
                       orthogonality=found.orthogonality, shift=shift, backend="separable", requested=modes.count,
                       timings={"eigensolve": found.timings["eigensolve"],
                                "surface_modes": found.timings["surface_modes"]}, method="separable")
    l = parent_degree(found.surface_lam)
    volume = float(np.ones(disc.n_surface) @ (Ms @ np.ones(disc.n_surface))) * float(np.sum(C))
    nfree = disc.n_surface * (len(radial_free) - disc.ball) + disc.ball  # a ball's centre copies are one dof
    return pairs, messages, found.radial_index + 1, l, volume, nfree


#: free unknowns from which deformed prism shells use LOBPCG with the spherical preconditioner
#: instead of factorizing K - shift M: high-order prisms fill in badly (P4 x Q8, 71,694 unknowns:
#: 151 s with CHOLMOD shift-invert on this machine)
PRISM_ITERATIVE_FROM = 15_000


def _spherical_start(case, disc, inverse_mass, offsets, shift, scale, space):
    """Preconditioner and start vectors for a deformed prism shell or ball from its mean-radius spherical one."""
    from threadpoolctl import threadpool_limits

    from .volume.ball import BallPreconditioner
    from .volume.separable import SphericalPreconditioner, separable_modes, spherical_reference

    Ks, Ms, A, B, C = spherical_reference(disc, inverse_mass, offsets)
    radial_free = space.radial_free
    with threadpool_limits(limits=1):
        kind = BallPreconditioner if disc.ball else SphericalPreconditioner
        precondition = kind(Ks, Ms, A, B, C, radial_free, shift, backend=case.modes.backend)
        count = case.modes.count or 40
        reference = separable_modes(Ks, Ms, A, B, C, radial_free, count=int(1.3 * count) + 4,
                                    multiplet_tolerance=case.modes.multiplet_tolerance, scale=abs(shift),
                                    centre=disc.ball)
    l = parent_degree(reference.surface_lam)
    return {"preconditioner": precondition, "start": space.coordinates(reference.vectors),
            "reference": (reference.radial_index + 1, l)}


def _reference_labels(reference, vectors, M, start):
    """Per mode the (n, l) of the reference multiplet holding most of its weight, and that weight.

    Weights are squared M-overlaps with the reference states, as fractions of the mode's total
    over the reference set (the reference states are orthonormal in their own mass matrix).
    """
    n_ref, l_ref = reference
    overlap = (vectors.T @ (M @ start)) ** 2
    overlap /= np.maximum(overlap.sum(axis=1, keepdims=True), np.finfo(float).tiny)
    keys = sorted(set(zip(n_ref.tolist(), l_ref.tolist())))
    weights = np.column_stack([overlap[:, (n_ref == a) & (l_ref == b)].sum(axis=1) for a, b in keys])
    best = np.argmax(weights, axis=1)
    return (np.array([keys[k][0] for k in best]), np.array([keys[k][1] for k in best]),
            weights[np.arange(len(best)), best])


def run_shell(case: Case):
    """Solve a shell or ball case and return its :class:`~shellmodes.spectrum.Spectrum`."""
    from .volume import assemble_volume, free_dofs, restricted

    t_start = time.perf_counter()
    disc = build_volume(case)
    t_mesh = time.perf_counter() - t_start
    e0, origin = energy_scale(case)
    inverse_mass, offsets, names = _media(case, disc, e0)
    prisms = case.shell.cells == "prisms"
    if prisms:
        potential = radial_potential(case, e0)
        if _separable(case, disc, potential):
            return _finish_separable(case, disc, inverse_mass, offsets, names, e0, origin, t_start, t_mesh, potential)
    expression = compiled_potential(case, e0)
    function = None
    if expression is not None:
        def function(x, y, z):
            points = np.column_stack([np.ravel(x), np.ravel(y), np.ravel(z)])
            theta, phi = angles(points)
            values = expression(x=points[:, 0], y=points[:, 1], z=points[:, 2], r=np.linalg.norm(points, axis=1),
                                theta=theta, phi=phi)
            return values.reshape(np.shape(x))
    t0 = time.perf_counter()
    dirichlet = _dirichlet_walls(case, disc)
    space = None
    if prisms:
        from .volume.ball import free_space
        from .volume.prisms import assemble_prisms

        try:
            K, M = assemble_prisms(disc, inverse_mass, offsets, function)
        except GeometryError as exc:
            raise CaseError(str(exc), case.source, "shell") from None
        space = free_space(disc, dirichlet)  # a ball's centre copies merge into one unknown
        free = space.representative
    else:
        K, M = assemble_volume(disc, inverse_mass, offsets, function)
        free = free_dofs(disc, dirichlet) if dirichlet else np.arange(disc.ndofs)
    if space is not None and space.centre:
        Kf, Mf = space.restrict(K), space.restrict(M)
    else:
        Kf, Mf = (restricted(K, free), restricted(M, free)) if len(free) < disc.ndofs else (K, M)
    t_assembly = time.perf_counter() - t0
    lower = min([0.0, *offsets.values()])
    if function is not None:
        lower = min(lower, float(np.min(function(*disc.nodes.T))))
    outer_radius = float(np.max(np.linalg.norm(disc.nodes, axis=1)))
    scale = 1.0 / outer_radius**2
    options = {}
    large = case.modes.method == "auto" and len(free) >= PRISM_ITERATIVE_FROM
    if prisms and (case.modes.method == "lobpcg" or large):
        path, estimate = "lobpcg-spherical", None
        reason = (f"deformed prisms, {len(free)} unknowns: LOBPCG preconditioned by the exact inverse of the "
                  "mean-radius spherical shell (fast diagonalisation), started from its modes")
        options = _spherical_start(case, disc, inverse_mass, offsets, lower - scale, scale, space)
        case = case.model_copy(update={"modes": case.modes.model_copy(update={"method": "lobpcg"})})
    else:
        path, estimate, reason = _choose_path(case, Kf, disc.nodes[free])
    if path == "lobpcg-amg" and case.modes.method == "auto":
        case = case.model_copy(update={"modes": case.modes.model_copy(update={"method": "lobpcg"})})
    pairs, warn_text = solve_case_modes(case, Kf, Mf, lower, scale, e0,
                                        **{k: v for k, v in options.items() if k in ("preconditioner", "start")})
    lam = pairs.lam
    vectors = np.zeros((disc.ndofs, len(lam)))
    if space is not None and space.centre:
        vectors = space.expand(pairs.vectors)
    else:
        vectors[free] = pairs.vectors
    energies = lam * e0 if e0 is not None else lam.copy()
    symmetric = _spherical(case)
    columns = {}
    if "reference" in options:  # parent (n, l): the spherical reference states each mode overlaps most
        n, l, weight = _reference_labels(options["reference"], pairs.vectors, Mf, options["start"])
        mode_l = l
        columns = {"n": [int(v) for v in n], "dominant_l": [int(v) for v in l], "l_weight": [float(v) for v in weight]}
        label_text = "parent (n, l) of the mean-radius spherical shell, by overlap (deformed)"
    else:
        labels = _labels(case, disc, vectors, M, lam)
        mode_l = None if labels is None else labels.l
        if labels is not None:
            columns = {"n": [int(v) for v in labels.n], "dominant_l": [int(v) for v in labels.l],
                       "l_weight": [float(labels.content[i, labels.l[i]]) for i in range(len(lam))]}
        label_text = None if labels is None else ("(n, l) from angular content"
                                                  + ("" if symmetric else " (parent labels, deformed)"))
    multiplets = build_multiplets(lam, energies, case.modes.multiplet_tolerance, scale, mode_l=mode_l)
    volume = float(np.ones(disc.ndofs) @ (M @ np.ones(disc.ndofs)))
    timings = {"mesh": t_mesh, "assembly": t_assembly, "eigensolve": pairs.timings["eigensolve"]}
    solver_path = {"path": path, "reason": reason,
                   "estimated_factor_bytes": None if estimate is None else int(estimate.bytes)}
    return _package(case, disc, pairs, e0, origin, multiplets, vectors, names, inverse_mass, offsets, dirichlet,
                    len(free), volume, symmetric, solver_path, label_text, timings, t_start, warn_text, columns)


def _package(case, disc, pairs, e0, origin, multiplets, vectors, names, inverse_mass, offsets, dirichlet, nfree,
             volume, symmetric, solver_path, label_text, timings, t_start, warn_text, columns):
    """The spectrum of a solved shell: mesh record, log lines, VTU cells."""
    import warnings

    from .errors import DoubtfulResultWarning
    from .layering import coarse_barrier_warnings
    from .volume import export_cells

    for message in coarse_barrier_warnings(disc, pairs.lam, inverse_mass, offsets):
        warn_text = [*warn_text, message]
        warnings.warn(message, DoubtfulResultWarning, stacklevel=3)

    prisms = case.shell.cells == "prisms"
    cell_name = "prisms" if prisms else "tetrahedra"
    nelements = disc.nelements if prisms else int(disc.mesh.nelements)
    mesh_info = {"kind": "shell", "source": disc.source, "cells": cell_name, "degree": disc.degree,
                 "elements": int(nelements), "dofs": int(disc.ndofs), "free_dofs": int(nfree), "h": disc.h,
                 "volume": volume,
                 "regions": {str(r): {"name": names[r], "inverse_mass": inverse_mass[r], "offset": offsets[r]}
                             for r in disc.region_ids},
                 "dirichlet_walls": dirichlet, "spherically_symmetric": symmetric, "solver_path": solver_path}
    if prisms:
        mesh_info.update(radial_degree=disc.radial_degree, geometry_degree=disc.geometry_degree,
                         surface_dofs=disc.n_surface, radial_dofs=disc.n_radial)
    if label_text is not None:
        mesh_info["labels"] = label_text
    timings = {**timings, "total": time.perf_counter() - t_start}
    degree = f"degree {disc.degree}" + (f" x radial {disc.radial_degree}" if prisms else "")
    lines = [f"shell: {disc!r}", f"mesh: {degree}, {nelements} {cell_name}, {disc.ndofs} dofs "
             f"({nfree} free), h = {disc.h:.4g}, volume = {volume:.10g}",
             f"path: {pairs.backend} / {getattr(pairs, 'method', 'lanczos')} for {nfree} unknowns; "
             f"{solver_path['reason']}"]
    if prisms:
        from .volume.prisms import export_prisms

        points, cells, cell_data = export_prisms(disc)
    else:
        points, cells, cell_data = export_cells(disc)
    export = {"points": points, "cells": cells, "cell_data": cell_data}
    return finish_spectrum(case, pairs, e0, origin, multiplets, vectors, disc.nodes, mesh_info, timings, lines,
                           warn_text, export, mode_columns=columns)


def _finish_separable(case, disc, inverse_mass, offsets, names, e0, origin, t_start, t_mesh, potential):
    lower = min([0.0, *offsets.values()])
    if potential is not None:
        lower = min(lower, float(np.min(potential(np.linalg.norm(disc.nodes[::disc.n_surface], axis=1)))))
    scale = 1.0 / float(np.max(disc.wall_values[-1])) ** 2
    t0 = time.perf_counter()
    pairs, warn_text, n, l, volume, nfree = _solve_separable(case, disc, inverse_mass, offsets, lower, scale,
                                                             potential)
    lam = pairs.lam
    energies = lam * e0 if e0 is not None else lam.copy()
    multiplets = build_multiplets(lam, energies, case.modes.multiplet_tolerance, scale, mode_l=l)
    columns = {"n": [int(v) for v in n], "dominant_l": [int(v) for v in l], "l_weight": [1.0] * len(lam)}
    solver_path = {"path": "separable", "estimated_factor_bytes": None,
                   "reason": ("concentric spherical walls and no potential or V(r) only: the prism matrices are "
                              "Kronecker sums, "
                              f"so {pairs.timings['surface_modes']} surface modes and their radial problems give "
                              "the modes exactly")}
    timings = {"mesh": t_mesh, "assembly": 0.0, "eigensolve": time.perf_counter() - t0}
    return _package(case, disc, pairs, e0, origin, multiplets, pairs.vectors, names, inverse_mass, offsets,
                    _dirichlet_walls(case), nfree, volume, True, solver_path,
                    "(n, l) exact: radial index and the surface mode's l", timings, t_start, warn_text, columns)


def shell_mass_matrix(case: Case):
    """Consistent mass matrix on every dof of a shell case (what sweep tracking needs)."""
    disc = build_volume(case)
    if case.shell.cells == "prisms":
        import scipy.sparse as sp

        from .volume.prisms import assemble_prisms, kronecker_factors

        if disc.concentric_spheres():
            Ks, Ms, A, B, C = kronecker_factors(disc, {})
            return sp.kron(Ms, C).tocsr()
        return assemble_prisms(disc, {})[1].tocsr()
    from .volume import assemble_volume

    return assemble_volume(disc, {r: 1.0 for r in disc.region_ids})[1].tocsr()
