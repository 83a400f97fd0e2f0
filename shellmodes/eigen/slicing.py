"""Spectrum slicing: thousands of modes of K u = lam M u, each slice with its own shift.

The interval from a shift below the spectrum up to the requested energy (or
up to the energy below which ``count`` modes lie) is cut at boundaries
b_0 < b_1 < ... < b_s.  Each slice [b_j, b_j+1) gets its own shift at its
midpoint, its own factorization of K - shift M and its own shift-invert
Lanczos window.  Completeness is proved by counting: by Sylvester's law of
inertia the number of eigenvalues below sigma equals the number of negative
pivots of an LDL^T factorization of K - sigma M (B. N. Parlett, The Symmetric
Eigenvalue Problem, 1980, sec. 3.3; spectrum slicing with inertia counts:
T. Ericsson and A. Ruhe, Math. Comp. 35, 1251 (1980)).  So slice j must hold
exactly N(b_j+1) - N(b_j) modes: none missed, none counted twice.

Boundaries are moved into gaps: before counting at a planned boundary the
eigenvalues nearest to it are found with the same factorization, and the
boundary goes to the middle of the widest gap among them that separates two
multiplets (relative gap above ``multiplet_tolerance``).  A multiplet is
therefore never cut, and no count is taken with a shift next to an eigenvalue
(where a pivot's sign would be decided by rounding).

The LDL^T factor: scipy's SuperLU in symmetric mode (``diag_pivot_thresh=0``,
one symmetric fill-reducing ordering for rows and columns).  With diagonal
pivots only, P A P^T = L U with L unit lower triangular and U = D L^T, so the
signs of diag(U) are those of D.  Every factorization checks that the row and
column orderings are equal, i.e. that no off-diagonal pivot was taken; if one
was, the count is refused (:class:`~shellmodes.errors.SolverError`) rather
than guessed.  The factor serves both the count and the shift-invert solves.
Without pivoting the factorization of an indefinite matrix may lose accuracy
near a singular shift; the boundaries sit in gaps, and every slice's count is
checked against the modes it found, so a wrong count is reported, not hidden.

Slices run as Dask tasks: local worker processes by default
(``dask.distributed.LocalCluster``, one thread each), or on any running Dask
scheduler by its address; ``workers = 1`` runs them in this process.
"""

from __future__ import annotations

import importlib.util
import logging
import time
from dataclasses import asdict, dataclass, field

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp
import scipy.sparse.linalg as sla

from shellmodes.eigen.resources import check_count
from shellmodes.eigen.solve import Eigenpairs, _m_orthonormalise, check_found, group_multiplets, relative_residuals
from shellmodes.errors import ProblemError, SolverError
from shellmodes.limits import DENSE_LIMIT, SLICE_MODES, SLICE_PARALLEL_FROM

__all__ = ["SliceRecord", "SlicedEigenpairs", "sliced_modes", "slice_lines", "inertia"]

log = logging.getLogger(__name__)

#: local worker processes start only from this much work on (see limits.SLICE_PARALLEL_FROM); a module
#: name so that tests can force the cluster on a small problem
PARALLEL_FROM = SLICE_PARALLEL_FROM
#: extrapolating the counting function to the top of the requested modes aims this much beyond them
#: (a run of 2,000 modes aiming 10 % beyond solved 2,220 modes, its last slice 348 of them)
TOP_MARGIN = 1.02
#: eigenvalues looked at around a planned boundary before moving it into a gap
_NEAR = 16


@dataclass(frozen=True)
class SliceRecord:
    """One slice: its interval, shift, inertia count, modes found and cost."""

    index: int
    lower: float
    upper: float
    planned_upper: float
    shift: float
    expected: int
    found: int
    max_residual: float
    orthogonality: float
    seconds: float
    factor_seconds: float
    boundary_seconds: float
    #: CPU times of the solving threads (beside the wall times: contention shows as the difference)
    cpu_seconds: float = 0.0
    boundary_cpu_seconds: float = 0.0
    worker: str = ""

    def as_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True, eq=False)
class SlicedEigenpairs(Eigenpairs):
    """:class:`~shellmodes.eigen.solve.Eigenpairs` with the per-slice records."""

    slices: tuple = field(default_factory=tuple)
    counts: tuple = field(default_factory=tuple)


@dataclass(frozen=True)
class _Boundary:
    planned: float
    value: float
    count: int
    seconds: float
    cpu_seconds: float = 0.0


class _Factor:
    """LDL^T of K - sigma M by symmetric-mode SuperLU: ``negatives`` and ``solve``."""

    def __init__(self, K, M, sigma: float):
        A = (K - sigma * M).tocsc()
        t0 = time.perf_counter()
        try:
            lu = sla.splu(A, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                          options={"SymmetricMode": True})
        except RuntimeError as exc:  # an exactly zero pivot: sigma is an eigenvalue to machine precision
            raise SolverError(f"the factorization of K - sigma M failed at sigma = {sigma:.12g} ({exc}); "
                              "the shift lies on an eigenvalue") from None
        self.seconds = time.perf_counter() - t0
        if not np.array_equal(lu.perm_r, lu.perm_c):
            raise SolverError(f"the factorization at sigma = {sigma:.12g} took an off-diagonal pivot, so its "
                              "pivot signs do not give the inertia; the count is refused")
        self.negatives = int(np.count_nonzero(lu.U.diagonal() < 0.0))
        self.sigma = sigma
        self.solve = lu.solve
        self.n = A.shape[0]

    def nearest(self, K, M, k: int, v0, tol: float = 1e-13) -> tuple[np.ndarray, np.ndarray]:
        """The k eigenpairs nearest to sigma, ascending (shift-invert Lanczos on this factor)."""
        op = sla.LinearOperator((self.n, self.n), matvec=self.solve, matmat=self.solve, dtype=float)
        k = min(k, self.n - 2)
        ncv = min(self.n, max(2 * k + 1, k + 32))
        try:
            lam, U = sla.eigsh(K, k=k, M=M, sigma=self.sigma, which="LM", OPinv=op, v0=v0, ncv=ncv,
                               tol=tol, maxiter=max(1000, 20 * k))
        except sla.ArpackNoConvergence as exc:
            raise SolverError(f"the Lanczos iteration at shift {self.sigma:.6g} did not converge for {k} modes "
                              f"({len(exc.eigenvalues)} converged)") from None
        order = np.argsort(lam)
        return lam[order], U[:, order]


def inertia(K, M, sigma: float) -> int:
    """Number of eigenvalues of K u = lam M u below ``sigma`` (negative pivots of LDL^T of K - sigma M).

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> inertia(sp.diags([1.0, 2.0, 3.0, 4.0]), sp.identity(4), 2.5)
    2
    """
    K, M = sp.csc_matrix(K), sp.csc_matrix(M)
    if K.shape[0] <= DENSE_LIMIT:
        return int(np.count_nonzero(la.eigvalsh(K.toarray(), M.toarray()) < sigma))
    return _Factor(K, M, sigma).negatives


def _start(n: int, seed: int) -> np.ndarray:
    return np.random.default_rng(seed).standard_normal(n)


def _gap_for(lam: np.ndarray, target: float, tolerance: float, scale: float, upward: bool) -> float | None:
    """A boundary in a multiplet gap among ascending ``lam`` near ``target``, or None if there is none.

    ``upward``: the lowest gap above ``target`` (nothing at or below ``target`` is left above the
    boundary); otherwise the middle of the gap nearest to ``target``.
    """
    if len(lam) < 2:
        return None
    groups = group_multiplets(lam, tolerance, scale)
    if len(groups) < 2:
        return None
    lows = np.array([lam[g[-1]] for g in groups[:-1]])
    highs = np.array([lam[g[0]] for g in groups[1:]])
    middles = 0.5 * (lows + highs)
    if upward:
        above = np.flatnonzero(highs > target)
        if len(above) == 0:
            return None
        j = above[0]
        return float(0.5 * (max(lows[j], target) + highs[j]))
    inside = np.flatnonzero((lows <= target) & (target <= highs))
    if len(inside):  # already in a gap: keep it unless it lies too close to an eigenvalue
        j = inside[0]
        margin = 0.25 * (highs[j] - lows[j])
        return float(np.clip(target, lows[j] + margin, highs[j] - margin))
    return float(middles[np.argmin(np.abs(middles - target))])


def _boundary(K, M, planned: float, tolerance: float, scale: float, upward: bool, seed: int) -> _Boundary:
    """Move a planned boundary into a multiplet gap and count the eigenvalues below it."""
    t0, c0 = time.perf_counter(), time.thread_time()
    n = K.shape[0]
    if n <= DENSE_LIMIT:
        lam = la.eigvalsh(K.toarray(), M.toarray())
        order = np.argsort(np.abs(lam - planned))
        for k in (min(n, _NEAR), n):
            value = _gap_for(np.sort(lam[order[:k]]), planned, tolerance, scale, upward)
            if value is not None:
                break
        if value is None:
            value = float(lam[-1] + scale)
        return _Boundary(planned, value, int(np.count_nonzero(lam < value)), time.perf_counter() - t0,
                         time.thread_time() - c0)
    try:
        factor = _Factor(K, M, planned)
    except SolverError:  # planted exactly on an eigenvalue: look from just beside it
        factor = _Factor(K, M, planned + 1e-8 * max(abs(planned), scale))
    k = _NEAR
    while True:
        # only the gaps are wanted here: eigenvalues to ~1e-9, far finer than multiplet_tolerance
        lam, _ = factor.nearest(K, M, k, _start(n, seed), tol=1e-9)
        value = _gap_for(lam, planned, tolerance, scale, upward)
        if value is not None or k >= n - 2:
            break
        k = min(n - 2, 2 * k)
    if value is None:
        raise SolverError(f"no gap between multiplets near {planned:.6g} among {k} eigenvalues; "
                          "raise modes.multiplet_tolerance")
    count = _Factor(K, M, value).negatives
    return _Boundary(planned, value, count, time.perf_counter() - t0, time.thread_time() - c0)


def _solve_slice(K, M, index: int, lower: _Boundary, upper: _Boundary, floor: float, seed: int):
    """All eigenpairs in [lower, upper) from one shift at the middle; count checked against the inertia."""
    import os
    import socket

    t0, c0 = time.perf_counter(), time.thread_time()
    a, b = lower.value, upper.value
    expected = upper.count - lower.count
    n = K.shape[0]
    # the first slice is solved from its bottom (below the spectrum: the k lowest, as a single shift
    # would), the others from their middle (the k nearest reach both ends first)
    sigma = a if lower.count == 0 else 0.5 * (a + b)
    t_factor = 0.0
    if expected <= 0:
        lam, U = np.zeros(0), np.zeros((n, 0))
    elif n <= DENSE_LIMIT:
        lam, U = la.eigh(K.toarray(), M.toarray(), subset_by_value=(a, b))
    else:
        factor = _Factor(K, M, sigma)
        t_factor = factor.seconds
        k = min(n - 2, expected + max(8, int(np.ceil(0.1 * expected))))
        for _attempt in range(3):
            lam, U = factor.nearest(K, M, k, _start(n, seed + index))
            inside = (lam >= a) & (lam < b)
            # the k nearest reach beyond the slice: nothing inside was skipped
            reach = np.max(np.abs(lam - sigma)) if len(lam) else 0.0
            if reach > max(b - sigma, sigma - a) or k >= n - 2:
                break
            k = min(n - 2, k + max(16, expected // 2))
        lam, U = lam[inside], U[:, inside]
    try:
        U, orth = _m_orthonormalise(U, M) if len(lam) else (U, 0.0)
    except la.LinAlgError:  # dependent vectors (a mode found twice): the inertia count check reports it
        orth = float("inf")
    residuals = relative_residuals(K, M, lam, U, floor) if len(lam) else np.zeros(0)
    record = SliceRecord(index=index, lower=a, upper=b, planned_upper=upper.planned, shift=sigma,
                         expected=int(expected), found=int(len(lam)),
                         max_residual=float(np.max(residuals)) if len(lam) else 0.0, orthogonality=float(orth),
                         seconds=time.perf_counter() - t0, factor_seconds=t_factor,
                         cpu_seconds=time.thread_time() - c0, boundary_cpu_seconds=upper.cpu_seconds,
                         boundary_seconds=upper.seconds, worker=f"{socket.gethostname()}:{os.getpid()}")
    return record, lam, U, residuals


# -- planning ----------------------------------------------------------------------------------------

def _counting_guess(points: list[tuple[float, int]], target: float) -> float:
    """Energy at which the counting function through ``points`` reaches ``target`` (power-law steps)."""
    points = sorted(points)
    lam0 = points[0][0]
    for (x0, n0), (x1, n1) in zip(points, points[1:]):
        if n1 >= target:
            if n1 == n0:
                return x1
            if n0 > 0 and x0 > lam0:  # power law between the two, measured from the bottom
                p = np.log(n1 / n0) / np.log((x1 - lam0) / (x0 - lam0))
                return float(lam0 + (x0 - lam0) * (target / n0) ** (1.0 / p))
            return float(x0 + (x1 - x0) * (target - n0) / (n1 - n0))
    (x0, n0), (x1, n1) = points[-2], points[-1]
    if n1 <= 0:
        return lam0 + 4.0 * (x1 - lam0)
    if n0 > 0:
        p = max(0.5, np.log(n1 / n0) / np.log((x1 - lam0) / (x0 - lam0)))
    else:
        p = 1.0
    # 2 % beyond the target: enough to reach it in one or two more counts, little work wasted above it
    return float(lam0 + (x1 - lam0) * (TOP_MARGIN * target / n1) ** (1.0 / p))


def _plan(K, M, bottom: float, top: float | None, count: int | None, scale: float, slice_modes: int):
    """Planned interior boundaries and the top energy, from inertia counts at a few trial energies."""
    points = [(bottom, 0)]
    if top is None:  # find an energy with at least `count` modes below it
        trial = bottom + scale * (count + 1)
        for _ in range(40):
            n_below = inertia(K, M, trial)
            points.append((trial, n_below))
            if n_below >= count:
                break
            trial = max(_counting_guess(points, count), trial + scale)
        else:
            raise SolverError(f"could not find an energy with {count} modes below it")
        top = trial
        total = points[-1][1]
    else:
        total = inertia(K, M, top)
        points.append((top, total))
    slices = max(1, int(np.ceil(min(total, count or total) / slice_modes)))
    want = (count or total)
    inner = [_counting_guess(points, want * j / slices) for j in range(1, slices)]
    inner = [x for x in inner if bottom < x < top]
    return sorted(inner), top, total


# -- running -----------------------------------------------------------------------------------------

class _Serial:
    """Runs tasks in this process, in submission order (the same interface as the Dask runner)."""

    name = "serial"

    def scatter(self, value):
        return value

    def submit(self, fn, *args):
        return fn(*args)

    def result(self, item):
        return item

    def close(self):
        pass


class _Dask:
    def __init__(self, workers: int, scheduler: str | None, timeout: float):
        try:
            from dask.distributed import Client, LocalCluster
        except ImportError:
            raise ProblemError("slices on a Dask scheduler need dask.distributed "
                               "(pip install 'shellmodes[sweep]')", "modes.scheduler") from None
        self.cluster = None
        # distributed logs its start-up at INFO on its own handlers: keep the terminal to our lines
        logging.getLogger("distributed").setLevel(max(logging.WARNING, log.getEffectiveLevel()))
        try:
            if scheduler:
                self.client = Client(scheduler, timeout=timeout, set_as_default=False)
                self.name = f"dask scheduler {scheduler}"
            else:
                self.cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                            dashboard_address=":0", scheduler_kwargs={"dashboard": False},
                                            memory_limit=0)
                self.client = Client(self.cluster, set_as_default=False)
                self.name = f"{workers} local dask worker processes"
        except Exception as exc:  # a service that is not a scheduler fails in many ways (as in sweeps)
            reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
            if scheduler:
                raise ProblemError(f"cannot reach the Dask scheduler at {scheduler!r} within {timeout:g} s "
                                   f"({reason}); check the address, or drop modes.scheduler",
                                   "modes.scheduler") from None
            raise ProblemError(f"cannot start {workers} local Dask worker processes ({reason}); "
                               "set modes.workers = 1 to solve the slices in this process", "modes.workers") from None

    def scatter(self, value):
        return self.client.scatter(value, broadcast=True)

    def submit(self, fn, *args):
        return self.client.submit(fn, *args, pure=False)

    def result(self, item):
        return item.result()

    def close(self):
        self.client.close()
        if self.cluster is not None:
            self.cluster.close()


def _task(fn, *args):
    """Run a slice task with one BLAS thread (the workers share the cores)."""
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1):
        return fn(*args)


def sliced_modes(K, M, count: int | None = None, below: float | None = None, *, lower_bound: float = 0.0,
                 scale: float = 1.0, multiplet_tolerance: float = 1e-4, residual_limit: float = 1e-6,
                 slice_modes: int = SLICE_MODES, workers: int = 1, scheduler: str | None = None,
                 boundaries=None, timeout: float = 5.0) -> SlicedEigenpairs:
    """Lowest ``count`` eigenpairs (or all below ``below``) by spectrum slicing with inertia counts.

    Parameters are those of :func:`shellmodes.eigen.solve.lowest_modes`, and

    slice_modes
        Modes per slice aimed at (the boundaries then move into gaps).
    workers
        Local Dask worker processes; 1 runs every slice in this process, and so does a small
        problem (below :data:`PARALLEL_FROM` dofs x modes).
    scheduler
        Address of a running Dask scheduler (``tcp://host:port``); overrides ``workers``.
    boundaries
        Interior boundaries to plan with instead of the computed ones (they are still
        moved into gaps); for studies and tests.

    Returns
    -------
    SlicedEigenpairs
        ``slices`` holds one :class:`SliceRecord` per slice, ``counts`` the inertia
        count at every boundary.

    Raises
    ------
    SolverError
        A slice's modes do not match its inertia count, or no convergence.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> K = sp.diags([5.0, 1.0, 3.0, 3.0, 2.0]).tocsr(); M = sp.identity(5, format="csr")
    >>> p = sliced_modes(K, M, 3, boundaries=[3.0])
    >>> p.lam.tolist(), [s.found for s in p.slices]
    ([1.0, 2.0, 3.0, 3.0], [2, 3])
    >>> [s.upper for s in p.slices]  # the boundary planted on the double 3.0 moved into the gap below it
    [2.75, 6.0]
    """
    if (count is None) == (below is None):
        raise ValueError("give exactly one of count and below")
    K, M = sp.csr_matrix(K), sp.csr_matrix(M)
    n = K.shape[0]
    check_count(count, n)
    t0 = time.perf_counter()
    bottom = float(lower_bound - scale)
    floor = abs(bottom) if bottom else 1.0
    if inertia(K, M, bottom) != 0:
        raise SolverError(f"eigenvalues lie below the shift {bottom:.6g} = lower_bound - scale: the lower bound "
                          "of the spectrum is wrong")
    remote = _Dask(workers, scheduler, timeout) if scheduler else None  # an unreachable address fails first
    try:
        planned, top, total = _plan(K, M, bottom, below, count, scale, slice_modes)
    except BaseException:
        if remote is not None:
            remote.close()
        raise
    if boundaries is not None:
        planned = sorted(float(b) for b in boundaries if bottom < b < top)
    t_plan = time.perf_counter() - t0
    parallel = scheduler or (workers > 1 and n * (count or total) >= PARALLEL_FROM and len(planned) > 0)
    if parallel and not scheduler and importlib.util.find_spec("distributed") is None:
        log.warning("dask.distributed is not installed (pip install 'shellmodes[sweep]'): slices run in this process")
        parallel = False
    runner = remote or (_Dask(workers, None, timeout) if parallel else _Serial())
    try:
        Kr, Mr = runner.scatter(K), runner.scatter(M)
        seed = 20261203
        inner = [runner.submit(_task, _boundary, Kr, Mr, b, multiplet_tolerance, scale, False, seed + j)
                 for j, b in enumerate(planned)]
        inner.append(runner.submit(_task, _boundary, Kr, Mr, top, multiplet_tolerance, scale, True, seed))
        stops = [runner.result(b) for b in inner]
        # moved boundaries may cross or meet: keep them strictly increasing
        kept, last = [], bottom
        for b in stops:
            if b.value > last and (not kept or b.count >= kept[-1].count):
                kept.append(b)
                last = b.value
        edges = [_Boundary(bottom, bottom, 0, 0.0)] + kept
        tasks = [runner.submit(_task, _solve_slice, Kr, Mr, j, lo, hi, floor, seed)
                 for j, (lo, hi) in enumerate(zip(edges, edges[1:]))]
        results = [runner.result(t) for t in tasks]
    finally:
        runner.close()
    records = [r[0] for r in results]
    for rec in records:
        log.info("slice %d: [%.8g, %.8g) shift %.6g, inertia count %d, found %d, max residual %.2e, "
                 "%.2f s (factorization %.2f s)%s", rec.index, rec.lower, rec.upper, rec.shift, rec.expected,
                 rec.found, rec.max_residual, rec.seconds, rec.factor_seconds,
                 "" if rec.planned_upper == rec.upper else f", upper boundary moved from {rec.planned_upper:.8g}")
    wrong = [r for r in records if r.found != r.expected]
    if wrong:
        r = wrong[0]
        raise SolverError(f"slice {r.index} [{r.lower:.8g}, {r.upper:.8g}): the inertia count says {r.expected} "
                          f"modes, the eigen-iteration found {r.found}; modes would be missed or repeated")
    lam = np.concatenate([r[1] for r in results]) if results else np.zeros(0)
    U = np.hstack([r[2] for r in results]) if results else np.zeros((n, 0))
    residuals = np.concatenate([r[3] for r in results]) if results else np.zeros(0)
    keep = len(lam)
    if count is not None and keep > count:
        groups = group_multiplets(lam, multiplet_tolerance, scale)
        keep = next(g for g in groups if count - 1 in g)[-1] + 1
    if below is not None:
        keep = int(np.count_nonzero(lam < below))
        if keep:
            groups = group_multiplets(lam, multiplet_tolerance, scale)
            keep = next(g for g in groups if keep - 1 in g)[-1] + 1
    lam, U, residuals = lam[:keep], U[:, :keep], residuals[:keep]
    elapsed = time.perf_counter() - t0
    log.info("solved %d modes in %d slices (%s) in %.2f s", keep, len(records), runner.name, elapsed)
    check_found(count, residuals, residual_limit)
    orth = max((r.orthogonality for r in records), default=0.0)
    counts = tuple(e.count for e in edges)
    details = {"solver": {"slices": [r.as_dict() for r in records], "inertia_counts": list(counts)},
               "log": slice_lines(records)}
    return SlicedEigenpairs(lam=lam, vectors=U, residuals=residuals, orthogonality=orth, shift=bottom,
                            backend="superlu-ldl", requested=count,
                            timings={"eigensolve": elapsed, "planning": t_plan}, method="slices", details=details,
                            slices=tuple(records), counts=counts)


def slice_lines(records) -> list[str]:
    """One run.log line per slice: interval, shift, inertia count, modes found, residual, times, worker."""
    return [f"slice {r.index}: [{r.lower:.10g}, {r.upper:.10g}) shift {r.shift:.6g}, inertia count {r.expected}, "
            f"found {r.found}, max residual {r.max_residual:.2e}, {r.seconds:.2f} s (CPU {r.cpu_seconds:.2f} s, "
            f"factorization {r.factor_seconds:.2f} s, boundary {r.boundary_seconds:.2f} s) on {r.worker}"
            for r in records]
