"""Smoothed-aggregation AMG (pyamg, extra ``volume``) for problems too big to factorize.

Three pieces:

- the registry back-end ``"amg"``: ``factorize(A)`` builds a smoothed-aggregation
  hierarchy of A and ``solve(b)`` runs AMG-preconditioned conjugate gradients to
  a relative residual of 1e-12, so shift-invert Lanczos sees an (almost) exact
  inverse without any fill-in.  It has the lowest priority: ``"auto"`` never
  picks it while a direct solver is installed;
- :func:`lobpcg_lowest`, a blocked (BLAS-3) eigen-solver: scipy's LOBPCG with
  the AMG V-cycle of ``K - shift M`` as preconditioner.  A block that ends
  inside a degenerate multiplet stalls it (docs/MEASURED.md: block 60 on the sphere
  cuts l = 7), so a loose first pass locates the spectrum and the block is
  then ended at the first relative gap above the requested count;
- :func:`estimate_factor_memory`, a cheap estimate of the Cholesky factor's
  size under a nested-dissection ordering, to choose between the two paths.

References: Vanek, Mandel and Brezina, Computing 56 (1996) 179 (smoothed
aggregation); Knyazev, SIAM J. Sci. Comput. 23 (2001) 517 (LOBPCG); George,
SIAM J. Numer. Anal. 10 (1973) 345 and Lipton, Rose and Tarjan, SIAM J. Numer.
Anal. 16 (1979) 346 (nested dissection and its fill).
"""

from __future__ import annotations

import importlib.util
import warnings
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla
from scipy.sparse.csgraph import dijkstra

from shellmodes.eigen.backends.registry import register
from shellmodes.errors import SolverError

__all__ = ["factorize", "lobpcg_lowest", "estimate_factor_memory", "FactorEstimate", "BYTES_PER_ENTRY",
           "choose_eigen_path", "available_memory"]

#: bytes per stored entry of a supernodal Cholesky factor (float64 value; the
#: supernodal index overhead is small by comparison)
BYTES_PER_ENTRY = 8


def _available() -> bool:
    return importlib.util.find_spec("pyamg") is not None


def _hierarchy(A):
    import pyamg

    return pyamg.smoothed_aggregation_solver(sp.csr_matrix(A), symmetry="hermitian", max_coarse=500)


@register("amg", available=_available, priority=-10)
def factorize(A):
    """AMG-preconditioned CG as an inverse of the SPD matrix ``A`` (vector or (n, k) block)."""
    A = sp.csr_matrix(A)
    ml = _hierarchy(A)
    n = A.shape[0]

    def solve_one(b):
        residuals: list[float] = []
        x = ml.solve(b, tol=1e-12, maxiter=500, accel="cg", residuals=residuals)
        if residuals and residuals[-1] > 1e-9 * max(residuals[0], np.finfo(float).tiny):
            raise SolverError(f"AMG-preconditioned CG reached only a relative residual "
                              f"{residuals[-1] / residuals[0]:.1e} in 500 iterations; use a direct back-end")
        return x

    def solve(b):
        b = np.asarray(b, dtype=np.float64)
        if b.ndim == 1 or (b.ndim == 2 and b.shape[1] == 1 and b.shape[0] == n):
            return solve_one(b.reshape(n)).reshape(b.shape)
        return np.column_stack([solve_one(np.ascontiguousarray(b[:, j])) for j in range(b.shape[1])])

    return solve


def _first_gap(theta: np.ndarray, start: int, rel_gap: float) -> int | None:
    """Smallest j >= start with theta[j] - theta[j-1] > rel_gap * max(|theta[j]|, 1)."""
    for j in range(max(start, 1), len(theta)):
        if theta[j] - theta[j - 1] > rel_gap * max(abs(theta[j]), 1.0):
            return j
    return None


def _run_lobpcg(K, M, X, precond, tol, maxiter):
    from shellmodes.io import progress

    with progress.task(f"LOBPCG iterations (block {X.shape[1]}, at most)", maxiter, "it") as bar:
        # scipy's lobpcg has no callback: it applies the preconditioner once per iteration, so count those
        def counted(block):
            if bar.done < maxiter:
                bar.advance()
            return precond @ block if isinstance(precond, sla.LinearOperator) else precond(block)

        n = K.shape[0]
        ticking = sla.LinearOperator((n, n), matvec=counted, matmat=counted, dtype=float)
        with warnings.catch_warnings():
            # scipy warns on non-convergence; convergence is checked from the residuals below
            warnings.simplefilter("ignore", UserWarning)
            lam, U = sla.lobpcg(K, X, B=M, M=ticking, largest=False, tol=tol, maxiter=maxiter)
    order = np.argsort(lam)
    return lam[order], U[:, order]


def lobpcg_lowest(K, M, count: int, *, shift: float, tol: float = 1e-8, maxiter: int = 400,
                  rel_gap: float = 1e-2, seed: int = 20261202, preconditioner=None, start=None):
    """Lowest eigenpairs of K u = lam M u by LOBPCG with an AMG (or a given) preconditioner.

    Parameters
    ----------
    K, M
        Symmetric sparse matrices, M positive definite.
    count
        Number of modes wanted; more are returned so that the set ends at a gap.
    shift
        A value strictly below the lowest eigenvalue; the preconditioner is
        the AMG V-cycle of the positive definite ``K - shift M``.
    tol
        Residual tolerance passed to LOBPCG; pairs are checked against 100 tol.
    maxiter
        Iterations of the final pass.
    rel_gap
        Relative gap that ends the block: multiplets that the mesh splits by
        less than this (1 % by default) stay whole in the block.
    seed
        Seed of the random start block (results are reproducible).
    preconditioner
        A function or LinearOperator approximating ``(K - shift M)^-1`` on
        blocks; by default the AMG V-cycle.
    start
        Optional (n, j) start vectors (e.g. the modes of a nearby separable
        problem); random columns fill the block beyond them.

    Returns
    -------
    lam : (k,) ndarray
        Ascending eigenvalues, ``k >= count``, ending at a gap.
    U : (n, k) ndarray
        M-orthonormal eigenvectors.

    Raises
    ------
    SolverError
        No gap found, too many modes for the problem size, or no convergence.
    """
    K, M = sp.csr_matrix(K), sp.csr_matrix(M)
    n = K.shape[0]
    if count < 1 or 5 * (count + 8) > n:
        raise SolverError(f"LOBPCG needs 1 <= count and a block well below the size {n}; got count={count}")
    if preconditioner is None:
        precond = _hierarchy(K - shift * M).aspreconditioner(cycle="V")
    elif isinstance(preconditioner, sla.LinearOperator):
        precond = preconditioner
    else:
        precond = sla.LinearOperator((n, n), matvec=preconditioner, matmat=preconditioner, dtype=float)
    rng = np.random.default_rng(seed)
    pad = max(4, int(np.ceil(0.25 * count)))
    X = rng.standard_normal((n, count + pad))
    if start is not None:
        start = np.asarray(start, dtype=float)[:, :count + pad]
        X[:, :start.shape[1]] = start
    while True:
        # loose pass: only to see where the gaps are
        theta, X = _run_lobpcg(K, M, X, precond, tol=1e-3, maxiter=40)
        block = _first_gap(theta, count, rel_gap)
        if block is not None and block < len(theta):
            break
        if 5 * (len(theta) + pad) > n:
            raise SolverError(f"no spectral gap found above mode {count} within {len(theta)} modes")
        X = np.hstack([X, rng.standard_normal((n, pad))])
    lam, U = _run_lobpcg(K, M, X[:, :block], precond, tol=tol, maxiter=maxiter)
    R = K @ U - (M @ U) * lam
    scale = np.maximum(np.abs(lam), abs(shift)) * np.linalg.norm(M @ U, axis=0)
    worst = float(np.max(np.linalg.norm(R, axis=0) / scale))
    if worst > 100 * tol:
        raise SolverError(f"LOBPCG did not converge: largest relative residual {worst:.1e} after "
                          f"{maxiter} iterations (block {block}); use a direct back-end")
    return lam, U


@dataclass(frozen=True)
class FactorEstimate:
    """Estimated size of a Cholesky factor L (lower triangle with diagonal)."""

    nnz: int
    bytes: int
    ordering: str

    def __repr__(self) -> str:
        return f"FactorEstimate(nnz={self.nnz:.3g}, {self.bytes / 2**30:.2f} GiB, ordering={self.ordering!r})"


def _graph_coordinates(A, dims: int = 3) -> np.ndarray:
    """Graph-distance coordinates: hop counts from a few mutually far nodes."""
    pattern = sp.csr_matrix((np.ones(A.nnz), A.indices, A.indptr), shape=A.shape)
    sources, coords = [0], []
    for _ in range(dims + 1):
        dist = dijkstra(pattern, indices=sources[-1], unweighted=True)
        dist[~np.isfinite(dist)] = 0.0
        coords.append(dist)
        sources.append(int(np.argmax(np.min(np.array(coords), axis=0))))
    return np.column_stack(coords[1:])


def estimate_factor_memory(A, points: np.ndarray | None = None, leaf_size: int = 64) -> FactorEstimate:
    """Estimate the Cholesky factor of ``A`` under a nested-dissection ordering.

    Recursive bisection at the median of the longest extent of ``points``
    (or of graph-distance coordinates when none are given) yields vertex
    separators S; eliminating S after its two halves fills a dense triangle
    on S and couples S to the boundary B(D) of its subdomain D, so

        nnz(L) ~ sum over separators |S| (|S| + 1) / 2 + |S| |B(D)|,

    with leaves of at most ``leaf_size`` nodes treated as dense the same way.
    Costs a few sorts of the non-zeros per bisection level.

    Parameters
    ----------
    A
        Sparse symmetric matrix (its pattern is used).
    points
        (n, 3) coordinates of the unknowns (e.g. ``disc.nodes[free]``).
    leaf_size
        Subdomains this small are not split further.

    Returns
    -------
    FactorEstimate
    """
    A = sp.csr_matrix(A)
    n = A.shape[0]
    coo = A.tocoo()
    off = coo.row != coo.col
    rows, cols = coo.row[off].astype(np.int64), coo.col[off].astype(np.int64)
    pts = _graph_coordinates(A) if points is None else np.asarray(points, dtype=float)
    if pts.shape[0] != n:
        raise ValueError(f"points have {pts.shape[0]} rows for a matrix of size {n}")
    label = np.zeros(n, dtype=np.int64)  # -1 once a node sits in a separator
    nnz = 0.0

    def boundary_sizes(active):
        """|B(D)| for every domain label: distinct outside neighbours of D."""
        li, lj = label[rows], label[cols]
        cross = (li >= 0) & (li != lj) & active[np.maximum(li, 0)]
        pairs = np.unique(li[cross] * n + cols[cross])
        return np.bincount(pairs // n, minlength=len(active))

    while True:
        ndom = int(label.max()) + 1
        sizes = np.bincount(label[label >= 0], minlength=ndom)
        split = sizes > leaf_size
        leaves = (sizes > 0) & ~split
        if np.any(leaves):
            b = boundary_sizes(leaves)
            s = sizes[leaves].astype(float)
            nnz += float(np.sum(s * (s + 1) / 2 + s * b[leaves]))
            label[(label >= 0) & leaves[np.maximum(label, 0)]] = -1
        if not np.any(split):
            break
        boundary = boundary_sizes(split)
        members = np.nonzero(label >= 0)[0]
        dom = label[members]
        lo = np.full((ndom, pts.shape[1]), np.inf)
        hi = np.full((ndom, pts.shape[1]), -np.inf)
        np.minimum.at(lo, dom, pts[members])
        np.maximum.at(hi, dom, pts[members])
        axis = np.argmax(hi - lo, axis=1)
        key = pts[members, axis[dom]]
        order = np.lexsort((key, dom))
        rank = np.empty(len(members), dtype=np.int64)
        starts = np.concatenate([[0], np.cumsum(sizes)])
        rank[order] = np.arange(len(members)) - starts[dom[order]]
        side = np.zeros(n, dtype=np.int64)
        side[members] = rank >= sizes[dom] // 2
        # separator: nodes of the first half with a neighbour in the second half of the same domain
        same = (label[rows] >= 0) & (label[rows] == label[cols])
        cut = same & (side[rows] == 0) & (side[cols] == 1)
        separator = np.zeros(n, dtype=bool)
        separator[rows[cut]] = True
        ssize = np.bincount(label[separator], minlength=ndom).astype(float)
        nnz += float(np.sum((ssize * (ssize + 1) / 2 + ssize * boundary)[split]))
        new = np.where(label >= 0, 2 * label + side, -1)
        new[separator] = -1
        # relabel children compactly
        live = new >= 0
        _, compact = np.unique(new[live], return_inverse=True)
        label = np.full(n, -1, dtype=np.int64)
        label[live] = compact.ravel()
        if not np.any(live):
            break
    nnz_int = int(round(nnz))
    return FactorEstimate(nnz=nnz_int, bytes=BYTES_PER_ENTRY * nnz_int,
                          ordering="coordinate nested dissection" if points is not None
                          else "graph-distance nested dissection")


def available_memory() -> int:
    """Bytes the system reports as available (``MemAvailable``), or 4 GiB if it cannot tell."""
    try:
        with open("/proc/meminfo") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 4 * 2**30


def choose_eigen_path(A, count: int, points: np.ndarray | None = None,
                      memory_budget: int | None = None) -> tuple[str, FactorEstimate]:
    """``"shift-invert"`` if a Cholesky factor of ``A`` fits the budget, else ``"lobpcg-amg"``.

    The need is the estimated factor (:func:`estimate_factor_memory`) plus the
    Lanczos basis of about ``2 count + 32`` vectors; the budget defaults to
    half the available memory.
    """
    estimate = estimate_factor_memory(A, points)
    n = A.shape[0]
    need = estimate.bytes + 8 * n * (2 * count + 32)
    budget = available_memory() // 2 if memory_budget is None else int(memory_budget)
    return ("shift-invert" if need <= budget else "lobpcg-amg"), estimate
