"""The solver planner: what will be done to find the modes, and why, as a plain record.

:func:`plan_solver` looks at a :class:`Problem` (a discretisation with its
media, potential and walls) and the case's ``[modes]`` table and returns a
:class:`SolverPlan`: the path, the eigen-iteration, the factorization, the
shift, the reason and the factor estimate.  It never edits the case.
:func:`solve_plan` carries a plan out and returns
:class:`~shellmodes.eigen.solve.Eigenpairs` with their residuals.  The plan is
recorded in ``run.log`` and in ``spectrum.json`` (``solver.plan``).

Paths
-----
``separable``
    Layered prisms between concentric spheres with no potential or V(r):
    the matrices are Kronecker sums and separate into surface and radial
    problems (:mod:`shellmodes.eigen.separable`); nothing is assembled.
``lobpcg-spherical``
    Deformed prism shells from :data:`PRISM_ITERATIVE_FROM` unknowns (or when
    asked): LOBPCG preconditioned by the exact inverse of the mean-radius
    spherical shell, started from its modes.
``lobpcg-amg``
    3-D problems whose Cholesky factor would not fit (or when asked):
    LOBPCG with algebraic multigrid.
``slices``
    Many modes (from :data:`~shellmodes.limits.SLICE_FROM` where a
    factorization is planned, or when asked): the spectrum cut into slices,
    each with its own shift, LDL^T factorization and Lanczos window, every
    slice's modes checked against inertia counts (:mod:`shellmodes.eigen.slicing`).
    return Solved(pairs, problem.expand(pairs.vectors), [])


``mpi``
    The assembled problem on the MPI ranks of the run (``modes.method =
    "mpi"``, or ``"auto"`` in a leader session of more than one rank when the
    problem is not separable): SLEPc Krylov-Schur shift-invert with a MUMPS
    Cholesky factor, or CG with algebraic multigrid where the factor's
    per-rank estimate does not fit (:mod:`shellmodes.eigen.backends.slepc_mpi`).
``shift-invert``
    Everything else: a sparse Cholesky factor of K - sigma M with sigma
    strictly below the spectrum, and ARPACK Lanczos, the blocked iteration
    from :data:`~shellmodes.limits.BLOCK_THRESHOLD` unknowns, or a dense solve
    below :data:`~shellmodes.limits.DENSE_LIMIT`.
"""

from __future__ import annotations

import time
import warnings
from dataclasses import asdict, dataclass, field
from functools import cached_property

import numpy as np
from threadpoolctl import threadpool_limits

from shellmodes.case.model import Media
from shellmodes.case.schema import Modes
from shellmodes.eigen.solve import Eigenpairs, lowest_modes, resolve_method
from shellmodes.errors import DoubtfulResultWarning, GeometryError, ProblemError
from shellmodes.fem.discretisation import Discretisation, Operators
from shellmodes.harmonics import parent_degree
from shellmodes.limits import DENSE_LIMIT, PRISM_ITERATIVE_FROM, SLICE_FROM, WINDOW_START_COUNT

__all__ = ["Problem", "SolverPlan", "Solved", "plan_solver", "solve_plan"]



@dataclass(eq=False)
class Problem:
    """A discretisation with its media, potential and walls: K u = lam M u on the free dofs.

    The operators are assembled on first use (:attr:`operators`), so a plan that
    does not need them (the separable path) never pays for them.
    """

    disc: Discretisation
    media: Media
    potential: object = None  # compiled expression in lambda units, or None
    radial: object = None  # the potential as a function of r alone, where it is one
    fixed: tuple = ()
    #: spherically symmetric (concentric spherical walls, no potential): labels are exact quantum numbers
    symmetric: bool = False
    timings: dict = field(default_factory=dict)

    @cached_property
    def space(self):
        """The unknowns (free dofs, or a ball's merged centre; see ``fem.discretisation.SelectedDofs``)."""
        return self.disc.free_space(self.fixed)

    @property
    def free(self) -> np.ndarray:
        """A representative dof of every unknown."""
        return self.space.representative

    @property
    def nfree(self) -> int:
        return self.space.size

    @cached_property
    def operators(self) -> Operators:
        """K, M on every dof (assembled now if not yet).

        Raises
        ------
        ProblemError
            The potential is not finite on the mesh (key ``potential.expression``) or a
            curved cell folds (key ``shell``).
        """
        try:
            operators = self.disc.assemble(self.media, self.potential)
        except GeometryError as exc:
            raise ProblemError(str(exc), "shell") from None
        except ValueError as exc:
            if self.potential is None:
                raise
            raise ProblemError(str(exc), "potential.expression") from None
        self.timings["assembly"] = operators.seconds
        return operators

    @cached_property
    def K(self):
        """K on the free dofs."""
        return self._free(self.operators.K)

    @cached_property
    def M(self):
        """M on the free dofs."""
        return self._free(self.operators.M)

    def _free(self, A):
        return self.space.restrict(A)

    def expand(self, U: np.ndarray) -> np.ndarray:
        """Vectors on every dof (zero on fixed walls) from vectors on the unknowns."""
        return self.space.expand(U)

    @property
    def separable(self) -> bool:
        """Concentric spherical prism walls and no potential or V(r) only."""
        return (getattr(self.disc, "separates", lambda: False)()
                and (self.potential is None or self.radial is not None))


@dataclass(frozen=True)
class SolverPlan:
    """What the solver will do, and why (see the module docstring for the paths)."""

    path: str
    method: str
    backend: str
    lower_bound: float
    scale: float
    unknowns: int
    reason: str
    factor_estimate_bytes: int | None = None
    #: what a path measured or estimated to choose (the MPI path: per-rank needs and budget)
    details: dict = field(default_factory=dict)

    @property
    def shift(self) -> float:
        """sigma = lower bound - scale: strictly below every eigenvalue."""
        return float(self.lower_bound - self.scale)

    def as_dict(self) -> dict:
        return {**asdict(self), "shift": self.shift}

    def describe(self) -> str:
        how = ", ".join(dict.fromkeys(x for x in (self.method, self.backend) if x != self.path))
        return f"path: {self.path}{f' ({how})' if how else ''} for {self.unknowns} unknowns; {self.reason}"


def plan_solver(problem: Problem, modes: Modes) -> SolverPlan:
    """Choose the path for ``problem`` under the case's ``[modes]`` table (never edits the case).

    Raises
    ------
    ProblemError
        A method that does not apply to this problem (``key`` = ``modes.method``).
    """
    disc, method = problem.disc, modes.method
    if method == "mpi":  # before anything is assembled
        from shellmodes.eigen.mpi import INSTALL_HINT, available

        if not available():
            raise ProblemError(f"value 'mpi': {INSTALL_HINT}", "modes.method")
    if method == "separable" and not problem.separable:
        if disc.kind != "prisms":
            why = "it needs shell cells = 'prisms'"
        elif not disc.separates():
            why = "the walls are not concentric spheres about the origin"
        else:
            why = "the potential depends on more than r"
        raise ProblemError(f"value 'separable': {why}; use 'auto'", "modes.method")
    if problem.separable and method in ("auto", "separable"):
        radial_free = disc.free_radial(problem.fixed)
        unknowns = disc.raw.n_surface * (len(radial_free) - disc.ball) + disc.ball  # a ball's centre: one dof
        scale = 1.0 / float(np.max(disc.raw.wall_values[-1])) ** 2
        lower = problem.media.lowest_offset
        if problem.radial is not None:
            lower = min(lower, float(np.min(problem.radial(np.linalg.norm(disc.nodes[::disc.raw.n_surface],
                                                                          axis=1)))))
        return SolverPlan("separable", "separable", "separable", lower, scale, unknowns,
                          "concentric spherical walls and no potential or V(r) only: the prism matrices are "
                          "Kronecker sums, so surface modes and their radial problems give the modes exactly")
    if method == "mpi" or (method == "auto" and problem.nfree > DENSE_LIMIT and _leader_of_ranks()):
        return _plan_mpi(problem, modes)
    operators = problem.operators
    lower, scale, n = operators.lower_bound, disc.spectral_scale(operators), problem.nfree
    if disc.kind == "prisms" and (method == "lobpcg" or (method == "auto" and n >= PRISM_ITERATIVE_FROM)):
        return SolverPlan("lobpcg-spherical", "lobpcg", "spherical-reference", lower, scale, n,
                          f"deformed prisms, {n} unknowns: LOBPCG preconditioned by the exact inverse of the "
                          "mean-radius spherical shell (fast diagonalisation), started from its modes")
    if disc.kind == "surface" and _wants_slices(n, modes):
        return _slices_plan(modes, lower, scale, n, None)
    if disc.kind == "surface":
        resolved = resolve_method(n, method, modes.count)
        return SolverPlan("shift-invert" if method != "lobpcg" else "lobpcg-amg", resolved,
                          _backend_name(n, resolved, modes.backend), lower, scale, n,
                          _method_reason(n, resolved, method))
    return _plan_volume(problem, modes, lower, scale)


def _leader_of_ranks() -> bool:
    """Rank 0 of a run on more than one MPI rank (a leader session is open)."""
    from shellmodes.eigen.mpi import active_session

    leader = active_session()
    return leader is not None and leader.size > 1


def _plan_mpi(problem: Problem, modes: Modes) -> SolverPlan:
    """The MPI path: the inner solver from the per-rank factor estimate, before any rank allocates.

    Raises
    ------
    ProblemError
        The problem does not fit on these ranks even without a factor (the per-rank memory guard).
    """
    from shellmodes.eigen.backends.slepc_mpi import plan_for

    operators = problem.operators
    lower, scale, n = operators.lower_bound, problem.disc.spectral_scale(operators), problem.nfree
    record = plan_for(problem.K, problem.M, lower - scale, modes.count or WINDOW_START_COUNT)
    if record["kind"] is None:
        raise ProblemError(record["reason"], "modes.count" if modes.count else "modes.below")
    reason = f"{record['ranks']} MPI ranks: {record['reason']}"
    if modes.method != "mpi":
        reason += " (method 'auto' on several ranks)"
    method = "dense" if record["kind"] == "dense" else "krylov-schur"
    return SolverPlan("mpi", method, record["kind"], lower, scale, n, reason, record["factor_bytes"], record)


def _plan_volume(problem: Problem, modes: Modes, lower: float, scale: float) -> SolverPlan:
    """Factorize (shift-invert) if the estimated Cholesky factor fits in memory, else LOBPCG with AMG.

    3-D factors fill in badly (5.2 GB at 464k P2 unknowns, benchmarks/README.md), so
    the factor's size is estimated by nested dissection before anything is factored.
    """
    from shellmodes.eigen.backends.lobpcg_amg import choose_eigen_path

    n, method = problem.nfree, modes.method
    count = modes.count or WINDOW_START_COUNT
    try:
        path, estimate = choose_eigen_path(problem.K, count, points=problem.disc.nodes[problem.free])
    except (MemoryError, ValueError):  # the estimate itself is optional information
        path, estimate, reason = "shift-invert", None, "factor size not estimated"
    else:
        gib = estimate.bytes / 2**30
        reason = (f"estimated Cholesky factor {gib:.2f} GiB fits in memory: shift-invert" if path == "shift-invert"
                  else f"estimated Cholesky factor {gib:.2f} GiB exceeds half the free memory: LOBPCG with AMG")
    if method == "slices" or (path == "shift-invert" and _wants_slices(n, modes)):
        return _slices_plan(modes, lower, scale, n, estimate, reason)
    if method == "lobpcg" or (path == "lobpcg-amg" and method == "auto"):
        resolved = resolve_method(n, "lobpcg", modes.count)
    else:
        resolved = resolve_method(n, method, modes.count)
    if method != "auto":
        reason += f" (case asks for method {method!r})"
    return SolverPlan("lobpcg-amg" if resolved == "lobpcg" else path, resolved,
                      _backend_name(n, resolved, modes.backend), lower, scale, n, reason,
                      None if estimate is None else int(estimate.bytes))


def _wants_slices(n: int, modes: Modes) -> bool:
    """Slices when asked, or by default for :data:`~shellmodes.limits.SLICE_FROM` modes and more (not dense)."""
    return modes.method == "slices" or (modes.method == "auto" and (modes.count or 0) >= SLICE_FROM
                                        and n > DENSE_LIMIT)


def _slices_plan(modes: Modes, lower: float, scale: float, n: int, estimate, why: str | None = None) -> SolverPlan:
    where = f"{modes.workers} local worker(s)" if not modes.scheduler else f"the Dask scheduler {modes.scheduler}"
    asked = ("case asks for method 'slices'" if modes.method == "slices"
             else f"{modes.count} modes (slices from {SLICE_FROM} on)")
    reason = (f"{asked}: spectrum slicing, about {modes.slice_modes} modes per slice, each with its own shift, "
              f"LDL^T factorization and Lanczos window, every slice checked by inertia counts, on {where}")
    return SolverPlan("slices", "slices", "superlu-ldl", lower, scale, n,
                      reason + (f"; {why}" if why else ""), None if estimate is None else int(estimate.bytes))


def _backend_name(n: int, method: str, backend: str) -> str:
    from shellmodes.eigen.backends import get_backend

    if method == "dense":
        return "dense"
    if method == "lobpcg":
        return "amg"
    try:
        return get_backend(backend)[0]
    except ValueError as exc:
        raise ProblemError(str(exc), "modes.backend") from None


def _method_reason(n: int, resolved: str, asked: str) -> str:
    if asked != "auto":
        return f"case asks for method {asked!r}"
    if resolved == "dense":
        return f"{n} unknowns: a dense solve is cheaper"
    if resolved == "block":
        return f"{n} unknowns: blocked shift-invert iteration"
    return f"{n} unknowns: shift-invert Lanczos"


# -------------------------------------------------------------------------------------------- execution
@dataclass(frozen=True, eq=False)
class Solved:
    """Eigenpairs on the free dofs, full vectors, warnings, and what a labeller may use."""

    pairs: Eigenpairs
    vectors: np.ndarray  # on every dof
    messages: list
    labels: dict = field(default_factory=dict)  # path-specific label data (exact or reference (n, l))


def solve_plan(plan: SolverPlan, problem: Problem, modes: Modes, count: int | None = None,
               below: float | None = None) -> Solved:
    """Carry out ``plan`` for ``count`` modes or all below the eigenvalue ``below``.

    Warnings raised on the way are collected (``messages``) and re-issued.
    BLAS threads are limited to one: ARPACK's Lanczos is single-vector work, and
    OpenBLAS threads spin when the cores are shared (measured on a 2-core
    machine under load: 1 thread was 4-6x faster than 2).
    """
    runner = {"separable": _separable, "lobpcg-spherical": _lobpcg_spherical, "mpi": _mpi,
              "slices": _sliced}.get(plan.path, _assembled)
    with warnings.catch_warnings(record=True) as caught, threadpool_limits(limits=1):
        warnings.simplefilter("always")
        solved = runner(plan, problem, modes, count, below)
    messages = [str(w.message) for w in caught]
    for w in caught:
        warnings.warn(w.message, w.category, stacklevel=2)
    return Solved(solved.pairs, solved.vectors, messages + solved.messages, solved.labels)


def _assembled(plan, problem, modes, count, below, **options) -> Solved:
    pairs = lowest_modes(problem.K, problem.M, count=count, below=below, lower_bound=plan.lower_bound,
                         scale=plan.scale, backend=modes.backend, multiplet_tolerance=modes.multiplet_tolerance,
                         residual_limit=modes.residual_limit, method=plan.method, **options)
    return Solved(pairs, problem.expand(pairs.vectors), [])


def _sliced(plan, problem, modes, count, below) -> Solved:
    from shellmodes.eigen.slicing import sliced_modes

    pairs = sliced_modes(problem.K, problem.M, count, below, lower_bound=plan.lower_bound, scale=plan.scale,
                         multiplet_tolerance=modes.multiplet_tolerance, residual_limit=modes.residual_limit,
                         slice_modes=modes.slice_modes, workers=modes.workers, scheduler=modes.scheduler)
    return Solved(pairs, problem.expand(pairs.vectors), [])


def _mpi(plan, problem, modes, count, below) -> Solved:
    from shellmodes.eigen.backends.slepc_mpi import mpi_lowest_modes

    pairs = mpi_lowest_modes(problem.K, problem.M, count, below, lower_bound=plan.lower_bound, scale=plan.scale,
                             multiplet_tolerance=modes.multiplet_tolerance, residual_limit=modes.residual_limit,
                             plan=dict(plan.details))
    return Solved(pairs, problem.expand(pairs.vectors), [])


def _lobpcg_spherical(plan, problem, modes, count, below) -> Solved:
    from shellmodes.eigen.separable import (
        BallPreconditioner,
        SphericalPreconditioner,
        separable_modes,
        spherical_reference,
    )

    disc = problem.disc
    raw = disc.raw
    Ks, Ms, A, B, C = spherical_reference(raw, problem.media.inverse_mass, problem.media.offsets)
    space = problem.space
    kind = BallPreconditioner if disc.ball else SphericalPreconditioner
    precondition = kind(Ks, Ms, A, B, C, space.radial_free, plan.shift, backend=modes.backend)
    reference = separable_modes(Ks, Ms, A, B, C, space.radial_free,
                                count=int(1.3 * (count or WINDOW_START_COUNT)) + 4,
                                multiplet_tolerance=modes.multiplet_tolerance, scale=abs(plan.shift),
                                centre=disc.ball)
    start = space.coordinates(reference.vectors)
    solved = _assembled(plan, problem, modes, count, below, preconditioner=precondition, start=start)
    n, l, weight = _reference_labels((reference.radial_index + 1, parent_degree(reference.surface_lam)),
                                     solved.pairs.vectors, problem.M, start)
    return Solved(solved.pairs, solved.vectors, [], {"n": n, "l": l, "weight": weight,
                                                     "rule": "parent (n, l) of the mean-radius spherical "
                                                             "shell, by overlap (deformed)"})


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


def _separable(plan, problem, modes, count, below) -> Solved:
    from shellmodes.eigen.separable import separable_modes

    disc = problem.disc
    Ks, Ms, A, B, C = disc.kronecker_factors(problem.media, problem.radial)
    radial_free = disc.free_radial(problem.fixed)

    def surface(k):
        # the unit sphere's multiplets close at (L + 1)^2 modes: asking that many needs one Lanczos run
        k = min(Ks.shape[0], int(np.ceil(np.sqrt(k))) ** 2)
        return lowest_modes(Ks, Ms, count=k, lower_bound=0.0, scale=1.0, backend=modes.backend,
                            multiplet_tolerance=modes.multiplet_tolerance, residual_limit=modes.residual_limit)

    t0 = time.perf_counter()
    found = separable_modes(Ks, Ms, A, B, C, radial_free, count=count, below=below,
                            multiplet_tolerance=modes.multiplet_tolerance, scale=abs(plan.shift),
                            surface_solver=surface, centre=disc.ball)
    messages = []
    worst = float(np.max(found.residuals)) if len(found.lam) else 0.0
    if worst > modes.residual_limit:
        messages.append(f"largest relative residual {worst:.2e} exceeds the limit {modes.residual_limit:.1e} "
                        f"(mode {int(np.argmax(found.residuals))}); do not trust these modes without checking")
        warnings.warn(messages[-1], DoubtfulResultWarning, stacklevel=3)
    pairs = Eigenpairs(lam=found.lam, vectors=found.vectors, residuals=found.residuals,
                       orthogonality=found.orthogonality, shift=plan.shift, backend="separable", requested=count,
                       timings={"eigensolve": time.perf_counter() - t0,
                                "surface_modes": found.timings["surface_modes"]}, method="separable")
    volume = float(np.ones(disc.raw.n_surface) @ (Ms @ np.ones(disc.raw.n_surface))) * float(np.sum(C))
    return Solved(pairs, pairs.vectors, messages,
                  {"n": found.radial_index + 1, "l": parent_degree(found.surface_lam),
                   "weight": np.ones(len(found.lam)), "rule": "(n, l) exact: radial index and the surface mode's l",
                   "volume": volume})
