"""The eigenproblem on many MPI ranks: SLEPc Krylov-Schur shift-invert on PETSc matrices.

``K u = lam M u`` (K, M symmetric, M positive definite) is distributed by
rows over the MPI ranks (PETSc's default contiguous row blocks) and solved by
SLEPc's Krylov-Schur with spectral transformation shift-and-invert about the
project's shift ``lower_bound - scale`` (strictly below the spectrum, so
``K - shift M`` is positive definite).  The inner solves use MUMPS's parallel
Cholesky factor, or, when the estimated factor does not fit in the memory a
rank has, conjugate gradients preconditioned with PETSc's algebraic multigrid
(GAMG) to a relative residual of 1e-12: :func:`plan_inner` decides from the
per-rank estimates, before anything is allocated.  Eigenvectors are gathered
on rank 0, which checks them exactly as the serial path does
(:func:`shellmodes.eigen.solve.checked_pairs`: M-orthonormalisation and
relative residuals) and extends the set to the end of the last multiplet
(:func:`shellmodes.eigen.solve.multiplet_end`).

Two ways to run:

- **leader and helpers** (the command line under ``mpiexec``): rank 0 runs the
  whole pipeline in a :func:`shellmodes.eigen.mpi.session`; the other ranks
  wait in :func:`serve` and receive only their rows of K and M, so a helper
  never holds the whole problem;
- **every rank alike** (a Python script under ``mpiexec`` calling
  :func:`shellmodes.pipeline.run_case` on every rank with ``modes.method =
  "mpi"``): every rank assembles the whole problem, takes its own rows without
  communication, and receives every pair.

Needs petsc4py, slepc4py and mpi4py (``scripts/setup-mpi.sh`` installs them
from the system packages).  References: Hernandez, Roman and Vidal, ACM TOMS
31 (2005) 351 (SLEPc); Stewart, SIAM J. Matrix Anal. Appl. 23 (2001) 601
(Krylov-Schur); Amestoy et al., SIAM J. Matrix Anal. Appl. 23 (2001) 15 (MUMPS).
"""

from __future__ import annotations

import logging
import resource
import time

import numpy as np
import scipy.sparse as sp

from shellmodes.eigen.mpi import active_session, modules, next_job, per_rank_budget, wake_helpers
from shellmodes.errors import SolverError

__all__ = ["plan_inner", "plan_for", "mpi_lowest_modes", "serve", "FACTOR_OVERHEAD", "ITERATIVE_RTOL", "EPS_TOL"]

log = logging.getLogger(__name__)

#: the largest rank's share of the MUMPS factor and its work space, over an even share of the
#: estimated factor: MUMPS adds 20 % work space by default (ICNTL(14) = 20, MUMPS user's guide,
#: recalled from memory) and its fronts do not split evenly; 1.5 is an assumption, logged beside
#: the measured use
FACTOR_OVERHEAD = 1.5
#: relative residual of the preconditioned CG solves when no factor fits (as the serial AMG back-end)
ITERATIVE_RTOL = 1e-12
#: SLEPc's convergence tolerance (relative error estimate of an eigenpair); the serial Lanczos uses 1e-13
EPS_TOL = 1e-12
#: the seed of the start vector, the serial path's (:func:`shellmodes.eigen.solve.lowest_modes`)
SEED = 20261202
GIB = 2.0**30


def _modules():
    return modules()


def _peak_bytes() -> int:
    """Peak resident memory of this process (Linux reports ru_maxrss in KiB)."""
    return int(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss) * 1024


def _ranges(n: int, size: int) -> np.ndarray:
    """Row offsets of PETSc's default split: the first ``n % size`` ranks get one row more."""
    counts = np.full(size, n // size, dtype=np.int64)
    counts[: n % size] += 1
    return np.concatenate([[0], np.cumsum(counts)])


def serve() -> None:
    """A helper rank's loop: take part in every solve the leader starts, until it closes its session."""
    MPI, _, _ = _modules()
    comm = MPI.COMM_WORLD
    while True:
        job = next_job(comm)
        if job is None:
            return
        Kl, Ml = _receive_rows(comm, job["n"])
        _solve_rounds(comm, Kl, Ml, job, gather_to_all=False)


# ---------------------------------------------------------------------------------------------- rows

def _send_rows(comm, K, M, ranges):
    """Rank 0 sends every other rank its rows of K and M (CSR arrays, no pickling of the bulk)."""
    _, PETSc, _ = _modules()
    for r in range(1, comm.Get_size()):
        lo, hi = int(ranges[r]), int(ranges[r + 1])
        for A in (K, M):
            block = A[lo:hi]
            parts = (block.indptr.astype(PETSc.IntType), block.indices.astype(PETSc.IntType),
                     np.ascontiguousarray(block.data, dtype=np.float64))
            comm.send([len(p) for p in parts], dest=r, tag=11)
            for tag, part in enumerate(parts, start=12):
                comm.Send(part, dest=r, tag=tag)


def _receive_rows(comm, n):
    _, PETSc, _ = _modules()
    ranges = _ranges(n, comm.Get_size())
    r = comm.Get_rank()
    rows = int(ranges[r + 1] - ranges[r])
    out = []
    for _ in range(2):
        sizes = comm.recv(source=0, tag=11)
        parts = [np.empty(sizes[0], dtype=PETSc.IntType), np.empty(sizes[1], dtype=PETSc.IntType),
                 np.empty(sizes[2], dtype=np.float64)]
        for tag, part in enumerate(parts, start=12):
            comm.Recv(part, source=0, tag=tag)
        out.append(sp.csr_matrix((parts[2], parts[1], parts[0]), shape=(rows, n)))
    return out


# ---------------------------------------------------------------------------------------------- the plan

def plan_inner(K, M, sigma: float, k: int, ranks: int, budget: int) -> dict:
    """The inner solver for ``k`` modes on ``ranks`` ranks of ``budget`` bytes each, and why.

    The per-rank need of the direct path is the largest rank's share of the
    estimated Cholesky factor (nested dissection,
    :func:`~shellmodes.eigen.backends.lobpcg_amg.estimate_factor_memory`,
    times :data:`FACTOR_OVERHEAD`), its rows of K, M and K - shift M, and its
    rows of the Krylov basis; the iterative path needs no factor, but the
    multigrid hierarchy costs about as much again as the operator (common
    practice).  ``kind`` is ``"mumps-cholesky"``, ``"cg-gamg"``, or None when
    neither fits.
    """
    from shellmodes.eigen.backends.lobpcg_amg import estimate_factor_memory

    K, M = sp.csr_matrix(K), sp.csr_matrix(M)
    n = K.shape[0]
    t0 = time.perf_counter()
    estimate = estimate_factor_memory((K - sigma * M).tocsr())
    t_estimate = time.perf_counter() - t0
    rows = -(-n // ranks)
    basis = 8 * rows * (2 * k + 32)  # the Krylov basis on one rank
    matrices = 12 * (K.nnz + M.nnz) // ranks + 12 * K.nnz // ranks  # K, M and K - shift M rows in PETSc
    factor = int(FACTOR_OVERHEAD * estimate.bytes / ranks)
    need_direct = factor + basis + matrices
    need_iterative = basis + 2 * matrices
    if need_direct <= budget:
        kind = "mumps-cholesky"
        reason = (f"estimated Cholesky factor {estimate.bytes / GIB:.2f} GiB, {factor / GIB:.2f} GiB on the "
                  f"largest of {ranks} ranks with work space, fits the {budget / GIB:.2f} GiB per rank: "
                  "Krylov-Schur shift-invert with MUMPS Cholesky")
    elif need_iterative <= budget:
        kind = "cg-gamg"
        reason = (f"estimated Cholesky factor {estimate.bytes / GIB:.2f} GiB needs {need_direct / GIB:.2f} GiB "
                  f"per rank of {ranks}, more than the {budget / GIB:.2f} GiB a rank has: Krylov-Schur "
                  f"shift-invert by conjugate gradients with algebraic multigrid (GAMG) to {ITERATIVE_RTOL:g}")
    else:
        kind = None
        reason = (f"the eigenproblem ({n} unknowns, {k} modes) needs about {need_iterative / GIB:.2f} GiB "
                  f"on each of {ranks} ranks even without a factor, more than the {budget / GIB:.2f} GiB "
                  "a rank has; run on more ranks or nodes, or ask for fewer modes")
    return {"kind": kind, "reason": reason, "ranks": ranks, "factor_bytes": int(estimate.bytes),
            "direct_need": int(need_direct), "iterative_need": int(need_iterative), "per_rank_budget": int(budget),
            "estimate_seconds": t_estimate}


def plan_for(K, M, sigma: float, count: int | None, memory_budget: int | None = None) -> dict:
    """:func:`plan_inner` for the ranks of this run (collective when every rank runs alike).

    In a leader session the budget is the one measured when it opened;
    otherwise every rank reports its memory now.  ``memory_budget`` replaces it.
    """
    from shellmodes.eigen.solve import first_size
    from shellmodes.limits import DENSE_LIMIT

    MPI, _, _ = _modules()
    n = K.shape[0]
    leader = active_session()
    comm = leader.comm if leader is not None else MPI.COMM_WORLD
    if n <= DENSE_LIMIT:
        return {"kind": "dense", "ranks": 1, "factor_bytes": None,
                "reason": f"{n} unknowns: a dense solve on rank 0 is exact and cheaper than distributing"}
    if memory_budget is None:
        memory_budget = leader.budget if leader is not None else per_rank_budget(comm)
    k = min(first_size(n, count), n - 2)
    if leader is not None or comm.Get_size() == 1:
        return plan_inner(K, M, sigma, k, comm.Get_size(), int(memory_budget))
    plan = plan_inner(K, M, sigma, k, comm.Get_size(), int(memory_budget)) if comm.Get_rank() == 0 else None
    return comm.bcast(plan, root=0)


# ---------------------------------------------------------------------------------------------- the solve

class _RankSolver:
    """One rank's PETSc matrices and SLEPc solver; the factor is kept across rounds."""

    def __init__(self, comm, Kl, Ml, n, sigma, kind, seed):
        _, PETSc, SLEPc = _modules()
        self.PETSc, self.SLEPc = PETSc, SLEPc
        self.comm = comm
        rows = Kl.shape[0]
        self.lo = int(_ranges(n, comm.Get_size())[comm.Get_rank()])
        self.mats = []
        for A in (Kl, Ml):
            mat = PETSc.Mat().createAIJ(size=((rows, n), (rows, n)), comm=PETSc.COMM_WORLD,
                                        csr=(A.indptr.astype(PETSc.IntType), A.indices.astype(PETSc.IntType),
                                             np.ascontiguousarray(A.data, dtype=np.float64)))
            mat.setOption(PETSc.Mat.Option.SYMMETRIC, True)
            mat.assemble()
            self.mats.append(mat)
        eps = SLEPc.EPS().create(PETSc.COMM_WORLD)
        eps.setOperators(*self.mats)
        eps.setProblemType(SLEPc.EPS.ProblemType.GHEP)
        eps.setType(SLEPc.EPS.Type.KRYLOVSCHUR)
        eps.setTarget(sigma)
        eps.setWhichEigenpairs(SLEPc.EPS.Which.TARGET_MAGNITUDE)
        st = eps.getST()
        st.setType(SLEPc.ST.Type.SINVERT)
        st.setShift(sigma)
        st.setMatStructure(PETSc.Mat.Structure.SUBSET)  # M's pattern lies inside K's (same elements)
        ksp = st.getKSP()
        pc = ksp.getPC()
        if kind == "mumps-cholesky":
            ksp.setType("preonly")
            pc.setType("cholesky")
            pc.setFactorSolverType("mumps")
        else:
            ksp.setType("cg")
            pc.setType("gamg")
            ksp.setTolerances(rtol=ITERATIVE_RTOL, atol=0.0, max_it=5000)
        self.eps, self.pc, self.kind = eps, pc, kind
        # the same seeded start vector as the serial path, whatever the number of ranks
        start = np.random.default_rng(seed).standard_normal(n)[self.lo:self.lo + rows]
        self.start = self.mats[0].createVecRight()
        self.start.setArray(start)
        self.factor_seconds = None

    def solve(self, k: int):
        """Collective: ``(lam, local rows of the vectors (rows, k), converged)``."""
        n = self.mats[0].getSize()[0]
        eps = self.eps
        eps.setDimensions(nev=k, ncv=min(n, max(2 * k + 1, k + 32)))
        eps.setTolerances(EPS_TOL, max(1000, 20 * k))
        eps.setInitialSpace([self.start])
        if self.factor_seconds is None:
            t0 = time.perf_counter()
            eps.setUp()
            self.factor_seconds = time.perf_counter() - t0
        eps.solve()
        converged = eps.getConverged()
        found = min(converged, k)
        vec = self.mats[0].createVecRight()
        lam = np.empty(found)
        local = np.empty((vec.getLocalSize(), found))
        for i in range(found):
            lam[i] = eps.getEigenpair(i, vec).real
            local[:, i] = vec.getArray()
        order = np.argsort(lam)
        return lam[order], local[:, order], converged

    def mumps_mbytes(self) -> float | None:
        """MUMPS's memory for this rank's part of the factor in MB (INFO(16), allocated; MUMPS guide)."""
        if self.kind != "mumps-cholesky":
            return None
        try:
            return float(self.pc.getFactorMatrix().getMumpsInfo(16))
        except Exception:  # an older binding without the MUMPS accessors: the record is optional
            return None

    def destroy(self):
        self.eps.destroy()
        for mat in self.mats:
            mat.destroy()
        self.start.destroy()


def _gather_columns(comm, local, n, to_all):
    """The full (n, k) vectors from each rank's rows, on rank 0 (or on every rank)."""
    MPI, _, _ = _modules()
    k = local.shape[1]
    counts = np.diff(_ranges(n, comm.Get_size())) * k
    send = np.ascontiguousarray(local.T)  # (k, rows): one block per rank in the flat receive buffer
    flat = np.empty(n * k) if (to_all or comm.Get_rank() == 0) else None
    displs = np.concatenate([[0], np.cumsum(counts)[:-1]])
    spec = [flat, counts, displs, MPI.DOUBLE]
    if to_all:
        comm.Allgatherv(send, spec)
    else:
        comm.Gatherv(send, spec if flat is not None else None, root=0)
    if flat is None:
        return None
    ranges = _ranges(n, comm.Get_size())
    U = np.empty((n, k))
    for r in range(comm.Get_size()):
        lo, hi = int(ranges[r]), int(ranges[r + 1])
        U[lo:hi] = flat[displs[r]:displs[r] + counts[r]].reshape(k, hi - lo).T
    return U



def _solve_rounds(comm, Kl, Ml, job, gather_to_all, decide=None):
    """Collective rounds of solves (rank 0, or every rank alike, decides each round's size).

    Returns ``(lam, U, rounds, records)``; U and records only where gathered
    (rank 0, or every rank with ``gather_to_all``).
    """
    t0 = time.perf_counter()
    solver = _RankSolver(comm, Kl, Ml, job["n"], job["sigma"], job["kind"], job["seed"])
    n, k = job["n"], job["k"]
    lam = U = None
    rounds = []
    while True:
        k = comm.bcast(k, root=0)
        if k is None:
            break
        t_round = time.perf_counter()
        lam, local, converged = solver.solve(k)
        U = _gather_columns(comm, local, n, gather_to_all)
        rounds.append({"k": k, "converged": int(converged), "seconds": time.perf_counter() - t_round})
        if decide is None:  # a helper of a leader: rank 0 decides
            continue
        if converged < k:
            k = None  # reported by the caller, after every rank has left the loop
        else:
            keep, k_next = decide(lam, k)
            k = None if keep is not None else k_next
    record = {"rank": comm.Get_rank(), "rows": int(Kl.shape[0]), "nnz": int(Kl.nnz + Ml.nnz),
              "factor_seconds": solver.factor_seconds, "solve_seconds": time.perf_counter() - t0,
              "mumps_mbytes": solver.mumps_mbytes(), "peak_bytes": _peak_bytes()}
    solver.destroy()
    records = comm.allgather(record) if gather_to_all else comm.gather(record, root=0)
    return lam, U, rounds, records


def mpi_lowest_modes(K, M, count: int | None = None, below: float | None = None, *, lower_bound: float = 0.0,
                     scale: float = 1.0, multiplet_tolerance: float = 1e-4, residual_limit: float = 1e-6,
                     plan: dict | None = None, memory_budget: int | None = None, seed: int = SEED):
    """Lowest eigenpairs of K u = lam M u on the MPI ranks of this run; the same record as the serial path.

    Parameters are those of :func:`shellmodes.eigen.solve.lowest_modes`;
    ``plan`` is :func:`plan_for`'s record (made here when not given, with
    ``memory_budget`` bytes per rank if given).  On rank 0 of a leader
    session, or on every rank otherwise, returns
    :class:`~shellmodes.eigen.solve.Eigenpairs` whose ``details`` hold the
    plan and, per rank, its rows, time and peak memory.

    Raises
    ------
    SolverError
        petsc4py/slepc4py/mpi4py missing, the problem does not fit even
        without a factor, or no convergence.
    """
    from shellmodes.eigen.resources import check_count
    from shellmodes.eigen.solve import checked_pairs, first_size, lowest_modes, multiplet_end

    MPI, _, _ = _modules()
    n = K.shape[0]
    if (count is None) == (below is None):
        raise ValueError("give exactly one of count and below")
    check_count(count, n)
    sigma = float(lower_bound - scale)
    if plan is None:
        plan = plan_for(K, M, sigma, count, memory_budget)
    if plan["kind"] == "dense":  # as the serial path: a dense solve on rank 0 is exact and cheaper
        return lowest_modes(K, M, count, below, lower_bound=lower_bound, scale=scale,
                            multiplet_tolerance=multiplet_tolerance, residual_limit=residual_limit, method="dense")
    if plan["kind"] is None:  # refused before any rank allocated anything
        raise SolverError(plan["reason"])
    K, M = sp.csr_matrix(K), sp.csr_matrix(M)
    leader = active_session()
    comm = leader.comm if leader is not None else MPI.COMM_WORLD
    size = comm.Get_size()
    job = {"n": n, "k": min(first_size(n, count), n - 2), "sigma": sigma, "kind": plan["kind"], "seed": seed}
    t0 = time.perf_counter()
    ranges = _ranges(n, size)
    if leader is not None:  # wakes the helpers, which then wait for their rows
        leader.busy = True
        wake_helpers(comm, job)
        _send_rows(comm, K, M, ranges)
    r = comm.Get_rank()
    Kl, Ml = K[int(ranges[r]):int(ranges[r + 1])], M[int(ranges[r]):int(ranges[r + 1])]
    t_share = time.perf_counter() - t0

    def decide(lam, k_now):
        keep, k_next = multiplet_end(lam, n, k_now, count, below, multiplet_tolerance, scale)
        if keep is None and min(k_next, n - 2) <= k_now:  # no room for more: keep what there is
            return len(lam), k_now
        return keep, min(k_next, n - 2)

    log.info("mpi: solving %d unknowns on %d ranks (%s)", n, size, plan["kind"])
    lam, U, rounds, records = _solve_rounds(comm, Kl, Ml, job, gather_to_all=leader is None, decide=decide)
    if leader is not None:
        leader.busy = False
    if rounds[-1]["converged"] < rounds[-1]["k"]:
        raise SolverError(f"the distributed Krylov-Schur iteration did not converge for {rounds[-1]['k']} modes "
                          f"({rounds[-1]['converged']} converged); reduce the count or refine the mesh")
    keep, _ = decide(lam, rounds[-1]["k"])
    elapsed = time.perf_counter() - t0
    distribution = "rows sent from rank 0" if leader is not None else "every rank took its rows of its own copy"
    lines = [f"mpi: {size} ranks, {plan['reason']}",
             f"mpi: {distribution} in {t_share:.2f} s; factor estimate {plan['estimate_seconds']:.2f} s; "
             f"rounds (modes asked): {', '.join(str(x['k']) for x in rounds)}"]
    for rec in records:
        mumps = "" if rec["mumps_mbytes"] is None else f", MUMPS factor {rec['mumps_mbytes'] / 1024:.2f} GiB"
        setup = "" if rec["factor_seconds"] is None else f" (set-up and factor {rec['factor_seconds']:.2f} s)"
        lines.append(f"mpi: rank {rec['rank']}: {rec['rows']} rows, {rec['nnz']} stored entries of K and M, "
                     f"solve {rec['solve_seconds']:.2f} s{setup}, peak memory {rec['peak_bytes'] / GIB:.2f} GiB"
                     f"{mumps}")
    for line in lines:
        log.info("%s", line)
    solver = {"ranks": size, "inner_solver": plan["kind"], "plan_reason": plan["reason"],
              "estimated_factor_bytes": plan["factor_bytes"], "per_rank_budget_bytes": plan["per_rank_budget"],
              "per_rank_need_bytes": {"mumps-cholesky": plan["direct_need"], "cg-gamg": plan["iterative_need"]},
              "distribution": distribution, "per_rank": records}
    return checked_pairs(K, M, lam[:keep], U[:, :keep], sigma, count, residual_limit, "slepc-" + plan["kind"],
                         "mpi", elapsed, {"factorization": records[0]["factor_seconds"] or 0.0},
                         {"solver": solver, "log": lines})
