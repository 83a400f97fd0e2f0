"""The pipeline for one case: case -> shape -> curved mesh -> problem -> solve -> spectrum.

``run_case`` does everything the ``shellmodes run`` command does except
writing files (:func:`shellmodes.outputs.write_outputs`) and printing.
"""

from __future__ import annotations

import logging
import platform
import time
import warnings
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from . import _version
from .case import Case
from .errors import CaseError, GeometryError, MeshError, ShellmodesError
from .expression import ExpressionError, compile_expression
from .problem import assemble_surface
from .shapes import make_shape
from .solve import lowest_modes
from .spectrum import Spectrum, build_multiplets
from .surface import curved_surface, lagrange_element, lattice_cells
from .units import ENERGY_UNITS, INERTIA_UNITS, LENGTH_UNITS, MASS_UNITS, joule_to, kinetic_scale_joule

__all__ = ["run_case", "build_shape", "discretise", "energy_scale", "versions", "subdivision_level",
           "solve_case_modes", "finish_spectrum",
           "DEFAULT_SUBDIVISIONS", "MAX_SUBDIVISIONS"]

log = logging.getLogger(__name__)


def versions() -> dict:
    import meshio
    import scipy
    import skfem

    return {"shellmodes": _version.__version__, "python": platform.python_version(), "numpy": np.__version__,
            "scipy": scipy.__version__, "scikit-fem": skfem.__version__, "meshio": meshio.__version__}


def build_shape(case: Case):
    """The :class:`~shellmodes.shapes.Shape` a case describes."""
    spec = case.surface.model_dump()
    name = spec.pop("shape")
    spec.pop("rim", None)
    try:
        if name == "star":
            spec["deformation"] = [(d["l"], d["m"], d["amplitude"]) for d in spec["deformation"]]
        if name == "mesh":
            path = Path(spec["file"])
            if not path.is_absolute():
                path = case.base_dir / path
            snap = spec.pop("snap")
            target = None
            if snap is not None:
                snap_name = snap.pop("shape")
                params = {k: v for k, v in snap.items() if v is not None}
                if snap_name == "star":
                    params["deformation"] = [(d["l"], d["m"], d["amplitude"])
                                             for d in snap.get("deformation") or ()]
                target = make_shape(snap_name, **params)
            return make_shape("mesh", file=path, snap=target)
        return make_shape(name, **spec)
    except GeometryError as exc:
        raise CaseError(str(exc), case.source, "surface") from None
    except MeshError as exc:
        raise CaseError(exc.reason, exc.source or case.source, "surface.file") from None
    except TypeError as exc:
        raise CaseError(f"incomplete parameters for shape {name!r} ({exc})", case.source, "surface") from None


def discretise(case: Case, shape=None):
    """Curved Lagrange surface of the case's degree and refinement."""
    shape = build_shape(case) if shape is None else shape
    res = case.resolution
    level = subdivision_level(case, shape)
    points, triangles = shape.reference(level)
    element_nodes = getattr(shape, "quadratic_nodes", None) if level == 0 else None
    if shape.name == "mesh" and shape.snap_shape is None and res.degree > 1 and (
            element_nodes is None or res.degree != 2):
        warnings.warn(f"{case.source}: degree {res.degree} elements on the flat triangles of "
                      f"{shape.file}: the geometry limits eigenvalue accuracy to O(h^2); give quadratic "
                      "cells with degree 2 or set surface.snap", UserWarning, stacklevel=2)
    return curved_surface(points, triangles, res.degree, project=shape.project,
                          quadrature_order=res.quadrature_order, element_nodes=element_nodes,
                          unwrap=shape.unwrap, geometry_degree=res.geometry_degree)


#: subdivisions when a case gives neither subdivisions nor edge_length
DEFAULT_SUBDIVISIONS = 3
#: most halvings of a reference mesh (the icosahedron at 9 has 5.2 million triangles)
MAX_SUBDIVISIONS = 9


def subdivision_level(case: Case, shape) -> int:
    """Halvings of the shape's reference mesh that the case's resolution asks for."""
    res = case.resolution
    if res.edge_length is not None:
        level = shape.subdivisions_for(res.edge_length)
        if level > MAX_SUBDIVISIONS:
            raise CaseError(f"value {res.edge_length!r}: needs {level} subdivisions of the reference mesh, "
                            f"at most {MAX_SUBDIVISIONS} are allowed (base edge {shape.base_edge:.4g}); "
                            "use a larger edge_length", case.source, "resolution.edge_length")
        return level
    if res.subdivisions is not None:
        return res.subdivisions
    return 0 if shape.name == "mesh" else DEFAULT_SUBDIVISIONS


def energy_scale(case: Case, shape=None) -> tuple[float | None, str]:
    """E0 (energy of lam = 1 per length unit squared) in the case's energy unit, and its origin."""
    units, particle = case.units, case.particle
    if units.energy == "1":
        return None, "dimensionless: energies are the eigenvalues lambda"
    if particle.moment_of_inertia is not None:
        inertia = particle.moment_of_inertia * INERTIA_UNITS[particle.inertia_unit]
        radius = case.surface.radius
        # E = hbar^2 lam R^2 / (2 I); lam R^2 is dimensionless, so the length unit cancels
        from scipy.constants import hbar

        e0 = hbar**2 * radius**2 / (2.0 * inertia)
        return float(joule_to(e0, units.energy)), f"rigid rotor, I = {inertia:.6g} kg m^2"
    mass = (particle.mass if particle.mass is not None else 1.0) * MASS_UNITS[particle.mass_unit]
    mass *= particle.effective_mass
    length = LENGTH_UNITS[units.length]
    e0 = kinetic_scale_joule(mass, length)
    return float(joule_to(e0, units.energy)), f"hbar^2/(2 m L^2), m = {mass:.6g} kg, L = {length:.6g} m"


def compiled_potential(case: Case, e0):
    """The case's potential as a function of x, y, z, r, theta, phi in lambda units (V / E0), or None."""
    if case.potential is None:
        return None
    compiled = compile_expression(case.potential.expression)

    def expr(**kw):
        try:
            return compiled(**kw)
        except ExpressionError as exc:  # not finite somewhere in the domain
            raise CaseError(str(exc), case.source, "potential.expression") from None

    unit = case.potential.unit
    if unit == "1":
        return expr
    # V given in an energy unit: divide by E0 expressed in that same unit
    e0_here = e0 * ENERGY_UNITS[case.units.energy] / ENERGY_UNITS[unit] if case.units.energy != "1" else None
    if e0_here is None:
        raise CaseError("a potential with a physical unit needs a physical units.energy", case.source,
                        "potential.unit")
    return lambda **kw: expr(**kw) / e0_here


def _export_cells(surface):
    degree = surface.degree
    t = surface.basis.element_dofs
    if degree == 2:
        return [("triangle6", t.T.copy())]
    sub = lattice_cells(lagrange_element(degree), degree)
    cells = t[sub.T]  # (3, k^2, Nel)
    return [("triangle", cells.transpose(2, 1, 0).reshape(-1, 3))]


def solve_case_modes(case: Case, K, M, lower_bound: float, scale: float, e0, **solver_options):
    """The lowest modes of an assembled case (count or energy window), warnings collected.

    ``solver_options`` go to :func:`~shellmodes.solve.lowest_modes` (a LOBPCG
    preconditioner and start vectors).  Returns ``(pairs, warning_messages)``;
    warnings are re-issued to the caller.
    """
    modes = case.modes
    below = None if modes.below is None else (modes.below / e0 if e0 is not None else modes.below)
    # BLAS threads: ARPACK's Lanczos is single-vector work, and OpenBLAS threads spin when the cores
    # are shared; measured on this 2-core machine under load, 1 thread was 4-6x faster than 2.
    with warnings.catch_warnings(record=True) as caught, threadpool_limits(limits=1):
        warnings.simplefilter("always")
        try:
            pairs = lowest_modes(K, M, count=modes.count, below=below, lower_bound=lower_bound, scale=scale,
                                 backend=modes.backend, multiplet_tolerance=modes.multiplet_tolerance,
                                 residual_limit=modes.residual_limit, method=modes.method, **solver_options)
        except ValueError as exc:  # an unknown or unavailable back-end; anything else is not the user's doing
            if "back-end" not in str(exc):
                raise
            raise CaseError(str(exc), case.source, "modes.backend") from None
        except ShellmodesError as exc:
            key = getattr(exc, "key", None) or ("modes.count" if modes.count else "modes.below")
            raise CaseError(str(exc), case.source, key) from None
    messages = [str(w.message) for w in caught]
    for w in caught:
        warnings.warn(w.message, w.category, stacklevel=3)
    if len(pairs.lam) == 0:
        with threadpool_limits(limits=1):
            lowest = lowest_modes(K, M, count=1, lower_bound=lower_bound, scale=scale, backend=modes.backend).lam[0]
        shown = lowest * e0 if e0 is not None else lowest
        text = (f"{case.source}: no mode lies below modes.below = {modes.below!r}; the lowest is "
                f"{shown:.6g}" + ("" if case.units.energy == "1" else f" {case.units.energy}"))
        warnings.warn(text, UserWarning, stacklevel=3)
        messages.append(text)
    return pairs, messages


def finish_spectrum(case: Case, pairs, e0, origin, multiplets, vectors, nodes, mesh_info, timings, lines,
                    warn_text, export, angular=None, mode_columns=None) -> Spectrum:
    """Package solved modes with their units, mesh, solver and timing records."""
    modes = case.modes
    lam = pairs.lam
    energies = lam * e0 if e0 is not None else lam.copy()
    solver_info = {"backend": pairs.backend, "method": getattr(pairs, "method", None), "shift": pairs.shift,
                   "requested": modes.count, "below": modes.below, "returned": int(len(lam)),
                   "orthogonality_error": pairs.orthogonality, "multiplet_tolerance": modes.multiplet_tolerance,
                   "max_residual": float(np.max(pairs.residuals)) if len(lam) else None,
                   "residual_definition": "||K u - lam M u|| / (max(|lam|, |shift|) ||M u||)"}
    units = {"length": case.units.length, "energy": case.units.energy, "energy_per_lambda": e0,
             "energy_scale": origin, "eigenvalue": f"1/{case.units.length}^2" if case.units.length != "1" else "1"}
    lines = [f"case: {case.source}", *lines,
             f"solver: {pairs.backend} ({solver_info['method']}), shift {pairs.shift:.4g}, {len(lam)} modes "
             f"(requested {modes.count if modes.count else 'below ' + str(modes.below)})",
             "timings [s]: " + ", ".join(f"{k} {v:.3f}" for k, v in timings.items()),
             "versions: " + ", ".join(f"{k} {v}" for k, v in versions().items())]
    lines += [f"warning: {w}" for w in warn_text]
    info = {"units": units, "mesh": mesh_info, "solver": solver_info, "versions": versions(),
            "case": case.model_dump(mode="json"), "timings": timings, "warnings": warn_text,
            "log": "\n".join(lines)}
    log.info("%s", lines[1] if len(lines) > 1 else "")
    return Spectrum(eigenvalues=lam, energies=energies, residuals=pairs.residuals, vectors=vectors,
                    nodes=nodes, multiplets=multiplets, info=info, export=export, angular=angular,
                    mode_columns=mode_columns or {})


def run_case(case: Case) -> Spectrum:
    """Solve one case (a surface or a shell) and return its :class:`Spectrum`.

    Raises
    ------
    ShellmodesError
        Invalid geometry, mesh or request (exit status 2 from the CLI).

    Examples
    --------
    >>> from shellmodes.case import case_from_dict
    >>> s = run_case(case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 2,
    ...     "subdivisions": 2}, "modes": {"count": 4}}))
    >>> [m.size for m in s.multiplets]
    [1, 3]
    """
    from .resources import check_resources

    check_resources(case)  # the memory guard: refuse before any mesh or matrix is built
    if case.shell is not None:
        from .shellrun import run_shell

        return run_shell(case)
    t_start = time.perf_counter()
    shape = build_shape(case)
    surface = discretise(case, shape)
    t_mesh = time.perf_counter() - t_start
    e0, origin = energy_scale(case, shape)
    rim = getattr(case.surface, "rim", None)
    try:
        problem = assemble_surface(surface, compiled_potential(case, e0), rim=rim if not shape.closed else None)
    except ValueError as exc:
        raise CaseError(str(exc), case.source, "potential.expression") from None
    pairs, warn_text = solve_case_modes(case, problem.K, problem.M, problem.lower_bound, problem.spectral_scale,
                                        e0)
    lam = pairs.lam
    energies = lam * e0 if e0 is not None else lam.copy()
    radius_eq2 = problem.area / (4 * np.pi) if (shape.closed and shape.sphere_like) else None
    multiplets = build_multiplets(lam, energies, case.modes.multiplet_tolerance, problem.spectral_scale,
                                  radius_eq2)
    vectors = problem.expand(pairs.vectors)
    angular = _angular(shape, surface, problem, vectors, multiplets)
    mesh_info = {"kind": "surface", "shape": shape.parameters(), "degree": surface.degree,
                 "geometry_degree": surface.geometry_degree, "elements": int(surface.mesh.nelements),
                 "dofs": int(surface.ndofs), "free_dofs": int(problem.ndofs), "h": surface.h,
                 "area": problem.area, "exact_area": shape.exact_area(), "closed": bool(shape.closed),
                 "rim": problem.rim}
    timings = {"mesh": t_mesh, "assembly": problem.timings["assembly"], "eigensolve": pairs.timings["eigensolve"],
               "total": time.perf_counter() - t_start}
    lines = [f"shape: {shape!r}",
             f"mesh: degree {surface.degree}, {surface.mesh.nelements} elements, {surface.ndofs} dofs, "
             f"h = {surface.h:.4g}, area = {problem.area:.10g}"]
    export = {"points": surface.nodes, "cells": _export_cells(surface)}
    spectrum = finish_spectrum(case, pairs, e0, origin, multiplets, vectors, surface.nodes, mesh_info, timings,
                               lines, warn_text, export, angular)
    rows = perturbation_rows(shape, spectrum)
    if rows:
        spectrum.info["perturbation"] = rows
    return spectrum


def perturbation_rows(shape, spectrum) -> list[dict]:
    """First-order perturbation theory beside the finite-element splitting, one row per parent l.

    For a star-shaped surface r = R (1 + sum a_lm Y_lm) the modes of parent l
    (those whose multiplets carry label l, when there are exactly 2l+1 of them)
    are compared, sorted, with the 2l+1 first-order levels of
    :func:`shellmodes.perturbation.first_order_levels` (eps = 1, the amplitudes
    as given).  ``ratio`` is the finite-element splitting over the first-order
    one; it tends to 1 as the amplitudes shrink (differences O(a^2)).
    """
    if shape.name != "star" or not shape.deformation:
        return []
    from .perturbation import first_order_levels

    e0 = spectrum.info["units"]["energy_per_lambda"] or 1.0
    rows = []
    labels = np.array([-1 if l is None else l for l in spectrum.mode_l])
    for l in sorted(set(labels[labels > 0].tolist())):
        members = np.flatnonzero(labels == l)
        if len(members) != 2 * l + 1:
            continue
        fe = np.sort(spectrum.eigenvalues[members])
        pt = first_order_levels([tuple(t) for t in shape.deformation], 1.0, shape.radius, l)
        fe_split, pt_split = float(fe[-1] - fe[0]), float(pt[-1] - pt[0])
        rows.append({"l": int(l), "fe_eigenvalues": fe.tolist(), "first_order_eigenvalues": pt.tolist(),
                     "fe_splitting": fe_split * e0, "first_order_splitting": pt_split * e0,
                     "ratio": fe_split / pt_split if pt_split else None,
                     "max_difference": float(np.max(np.abs(fe - pt))) * e0})
    return rows


def _angular(shape, surface, problem, vectors, multiplets):
    """Angular content of each mode on sphere-like closed surfaces (radial map to the unit sphere)."""
    if not (shape.closed and shape.sphere_like) or vectors.shape[1] == 0:
        return None
    from .angular import angular_content

    top = max((m.l for m in multiplets if m.l is not None), default=0)
    # (l_max + 1)^2 harmonics must stay well below the number of nodes to be resolved
    resolvable = int(np.sqrt(surface.ndofs / 8.0)) - 1
    l_max = max(0, min(top + 3, resolvable))
    axisymmetric = shape.name in ("sphere", "spheroid") or (
        shape.name == "star" and all(m == 0 for _, m, _ in shape.deformation))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # l_max is chosen within the resolvable range above
        return angular_content(surface.nodes, vectors, problem.M, l_max, center=shape.center,
                               axisymmetric=axisymmetric)
