"""The one pipeline: case -> discretisation -> problem -> solver plan -> eigenpairs -> labels -> spectrum.

:func:`run_case` does everything ``shellmodes run`` does except writing files
(:func:`shellmodes.io.outputs.write_outputs`) and printing.  Surfaces, shells and
balls go through the same steps; they differ only in their discretisation
(:mod:`shellmodes.fem.discretisation`) and their labeller (:mod:`shellmodes.spectrum.labelling`).
Errors of the lower layers that name a case key (:class:`~shellmodes.errors.ProblemError`)
become :class:`~shellmodes.errors.CaseError` with the case file here.
"""

from __future__ import annotations

import logging
import time
import warnings

import numpy as np

from shellmodes.case.model import (
    EnergyScale,
    compiled_potential,
    energy_scale,
    media,
    radial_potential,
    spherically_symmetric,
    versions,
)
from shellmodes.case.schema import Case
from shellmodes.eigen.planner import Problem, Solved, SolverPlan, plan_solver, solve_plan
from shellmodes.errors import CaseError, ProblemError, ShellmodesError
from shellmodes.fem.discretisation import Discretisation, build_discretisation, fixed_walls
from shellmodes.io import progress
from shellmodes.spectrum.labelling import Labels, label_modes
from shellmodes.spectrum.multiplets import Spectrum

__all__ = ["run_case", "build_problem", "solve_case"]

log = logging.getLogger(__name__)


def build_problem(case: Case, disc: Discretisation, scale: EnergyScale) -> Problem:
    """The discretised problem of a case: media, potential and walls on ``disc`` (assembled lazily)."""
    if case.surface is not None:
        from shellmodes.case.model import Media

        problem_media = Media.uniform(disc.region_ids)
        symmetric = False
        radial = None
    else:
        problem_media = media(case, disc, scale)
        symmetric = spherically_symmetric(case)
        radial = radial_potential(case, scale) if disc.kind == "prisms" else None
    return Problem(disc, problem_media, compiled_potential(case, scale), radial, tuple(fixed_walls(case, disc)),
                   symmetric=symmetric)


def solve_case(case: Case, problem: Problem, scale: EnergyScale) -> tuple[SolverPlan, Solved]:
    """Plan and solve the case's ``[modes]`` request on ``problem``; an empty energy window warns."""
    modes = case.modes
    below = None if modes.below is None else scale.eigenvalue(modes.below)
    try:
        plan = plan_solver(problem, modes)
        progress.stage(f"assembling and solving ({plan.path}, {problem.disc.ndofs} unknowns)")
        solved = solve_plan(plan, problem, modes, count=modes.count, below=below)
        if len(solved.pairs.lam) == 0:
            lowest = float(solve_plan(plan, problem, modes, count=1).pairs.lam[0])
            text = (f"{case.source}: no mode lies below modes.below = {modes.below!r}; the lowest is "
                    f"{lowest * scale.factor:.6g}" + ("" if case.units.energy == "1" else f" {case.units.energy}"))
            warnings.warn(text, UserWarning, stacklevel=2)
            solved.messages.append(text)
    except ProblemError as exc:
        raise CaseError(exc.reason, case.source, exc.key) from None
    except CaseError:
        raise
    except ShellmodesError as exc:
        key = getattr(exc, "key", None) or ("modes.count" if modes.count else "modes.below")
        raise CaseError(str(exc), case.source, key) from None
    return plan, solved


def run_case(case: Case) -> Spectrum:
    """Solve one case (a surface, a shell or a ball) and return its :class:`Spectrum`.

    Raises
    ------
    ShellmodesError
        Invalid geometry, mesh or request (exit status 2 from the CLI).

    Examples
    --------
    >>> from shellmodes.case.schema import case_from_dict
    >>> s = run_case(case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 2,
    ...     "subdivisions": 2}, "modes": {"count": 4}}))
    >>> [m.size for m in s.multiplets]
    [1, 3]
    """
    from shellmodes.eigen.extras import check_extras
    from shellmodes.eigen.resources import check_resources

    check_extras(case)  # optional parts the case names (back-end, AMG, scheduler): before anything is built
    check_resources(case)  # the memory guard: refuse before any mesh or matrix is built
    t_start = time.perf_counter()
    scale = energy_scale(case)
    progress.stage("building the mesh")
    disc = build_discretisation(case)
    t_mesh = time.perf_counter() - t_start
    problem = build_problem(case, disc, scale)
    t_solve = time.perf_counter()
    plan, solved = solve_case(case, problem, scale)
    t_solve = time.perf_counter() - t_solve - problem.timings.get("assembly", 0.0)
    energies = scale.energies(solved.pairs.lam)
    progress.note_count_raised(case.modes.count, len(solved.pairs.lam), case.source)
    progress.stage("labelling the multiplets")
    labels = label_modes(problem, plan, solved, scale, case.modes.multiplet_tolerance)
    solved.messages.extend(labels.messages)
    timings = {"mesh": t_mesh, "assembly": problem.timings.get("assembly", 0.0), "eigensolve": t_solve,
               "total": time.perf_counter() - t_start}
    return _spectrum(case, problem, plan, solved, labels, scale, energies, timings)


def _measure(problem: Problem, solved: Solved) -> float:
    """Area of a surface or volume of a shell: 1^T M 1 (by factors on the separable path)."""
    if "volume" in solved.labels:
        return float(solved.labels["volume"])
    if "area" in problem.operators.extra:
        return float(problem.operators.extra["area"])
    ones = np.ones(problem.disc.ndofs)
    return float(ones @ (problem.operators.M @ ones))


#: run.log's words for each discretisation (no Python reprs reach the user)
_CELLS = {"surface": "curved triangles on a surface", "tetrahedra": "curved tetrahedra in a 3-D shell or ball",
          "prisms": "layered curved prisms in a 3-D shell or ball"}


def _spectrum(case: Case, problem: Problem, plan: SolverPlan, solved: Solved, labels: Labels, scale: EnergyScale,
              energies: np.ndarray, timings: dict) -> Spectrum:
    """Package solved and labelled modes with their units, mesh, plan and timing records."""
    disc, pairs, modes = problem.disc, solved.pairs, case.modes
    measure_name = "area" if disc.kind == "surface" else "volume"
    measure = _measure(problem, solved)
    mesh_info = {**disc.mesh_info(), "free_dofs": problem.nfree, measure_name: measure,
                 **disc.problem_info(problem)}
    if labels.rule is not None and disc.kind != "surface":
        mesh_info["labels"] = labels.rule
    solver_info = {"backend": pairs.backend, "method": pairs.method, "shift": pairs.shift,
                   "requested": modes.count, "below": modes.below, "returned": int(len(pairs.lam)),
                   "orthogonality_error": pairs.orthogonality, "multiplet_tolerance": modes.multiplet_tolerance,
                   "max_residual": float(np.max(pairs.residuals)) if len(pairs.lam) else None,
                   "residual_definition": "||K u - lam M u|| / (max(|lam|, |shift|) ||M u||)",
                   "plan": plan.as_dict()}
    units = {"length": case.units.length, "energy": case.units.energy, "energy_per_lambda": scale.per_lambda,
             "energy_scale": scale.origin,
             "eigenvalue": f"1/{case.units.length}^2" if case.units.length != "1" else "1"}
    run_versions = versions()
    lines = [f"case: {case.source}", f"cells: {_CELLS.get(disc.kind, disc.kind)}",
             f"{disc.describe()}, {measure_name} = {measure:.10g}" + (
                 f" ({problem.nfree} free)" if problem.nfree < disc.ndofs else ""),
             plan.describe(),
             f"solver: {pairs.backend} ({pairs.method}), shift {pairs.shift:.4g}, {len(pairs.lam)} modes "
             f"(requested {modes.count if modes.count else 'below ' + str(modes.below)})",
             "timings [s]: " + ", ".join(f"{k} {v:.3f}" for k, v in timings.items()),
             "versions: " + ", ".join(f"{k} {v}" for k, v in run_versions.items())]
    solver_info.update(pairs.details.get("solver", {}))  # a path's own records (MPI: per-rank memory and time)
    lines[-2:-2] = pairs.details.get("log", [])
    lines += [f"warning: {w}" for w in solved.messages]
    info = {"units": units, "mesh": mesh_info, "solver": solver_info, "versions": run_versions,
            "case": case.model_dump(mode="json"), "timings": timings, "warnings": solved.messages,
            "log": "\n".join(lines)}
    log.info("%s", lines[2])
    spectrum = Spectrum(eigenvalues=pairs.lam, energies=energies, residuals=pairs.residuals, vectors=solved.vectors,
                        nodes=disc.nodes, multiplets=labels.multiplets, info=info, export=disc.export().as_dict(),
                        angular=labels.angular, mode_columns=labels.columns, problem=problem, plan=plan)
    spectrum.info.update(labels.info)
    if case.output.statistics:
        from shellmodes.spectrum.levelstats import surface_statistics

        spectrum.info["statistics"] = surface_statistics(problem, solved)
    return spectrum
