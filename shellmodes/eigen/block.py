"""Blocked shift-invert eigen-iteration for large problems.

The lowest eigenpairs of K u = lam M u from one Cholesky factor of
A = K - sigma M (sigma strictly below the spectrum): block Lanczos on the
operator T = A^-1 M, which is self-adjoint in the M inner product, with full
reorthogonalisation and Krylov-Schur thick restarts (Stewart, SIAM J. Matrix
Anal. Appl. 23 (2001) 601; Saad, *Numerical Methods for Large Eigenvalue
Problems*, 2nd ed., SIAM 2011, sections 6.3 and 7.2).  Every step applies
A^-1 M to a whole block, so the factor solves many right-hand sides per pass,
and every other operation on n-vectors is a matrix-matrix product:

- Gram-Schmidt of the new block A^-1 M Q_j in the M inner product, first
  against Q_(j-1) and Q_j (the only blocks it couples with in exact
  arithmetic; after a restart, every kept vector), then once against the
  whole space, then SVQB inside the block (Stathopoulos and Wu, SIAM J. Sci.
  Comput. 23 (2002) 2165), with one more pass when the block is
  ill-conditioned;
- the projected matrix H = V^T M T V from those coefficients, its
  eigenpairs (mu, y) giving lam = sigma + 1/mu, and the residual estimate
  ||T x - mu x||_M = ||S^T y|| for free from the Krylov-Schur relation
  T V = V H + Q S^T;
- on a restart, the lowest Ritz vectors, cut at a gap between Ritz values so
  a multiplet is never split, computed in place.

The iteration stops when every wanted pair meets ARPACK's criterion (as the
Lanczos path in :mod:`shellmodes.eigen.solve` uses) and, checked once, the true
residuals of K and M; a final Rayleigh-Ritz on (K, M) gives the eigenvalues.
The set is extended past a multiplet cut by the count.  A block holds at most
``block`` vectors of one exactly degenerate eigenvalue, so the block size
follows the multiplets expected (:func:`default_block_size`).  Single-vector
Lanczos (ARPACK) spends most of its time in matrix-vector Gram-Schmidt on
large surfaces (docs/MEASURED.md); here that work is matrix-matrix.  The start block
is random with a fixed seed, so results are reproducible.
"""

from __future__ import annotations

import contextlib
import ctypes
import logging
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as la

from shellmodes.errors import SolverError
from shellmodes.io import progress

__all__ = ["BlockResult", "block_lowest", "default_block_size", "relative_residuals", "gram"]

log = logging.getLogger(__name__)

#: relative residual every returned pair reaches (or the rounding floor, whichever is larger); the
#: iteration stops on ARPACK's criterion (||A^-1 M x - mu x|| <= 1e-13 mu, as the Lanczos path) and
#: tightens that only when a true residual is above this
TOLERANCE = 1e-9
#: SVQB scales errors along the space up by 1 / sqrt(this ratio of the block's Gram eigenvalues);
#: below it another Gram-Schmidt pass follows
_ILL_CONDITIONED = 1e-4
#: directions of a new block whose Gram eigenvalue is below this, relative to the largest, are dependent
_DEPENDENT = 1e-12
#: rows per chunk of the in-place restart product
_ROWS = 8192
#: rounding floor of the relative residual, in units of lam_max / max(|lam|, |sigma|)
_FLOOR = 64 * np.finfo(float).eps


@dataclass(frozen=True, eq=False)
class BlockResult:
    """Converged eigenpairs (ascending, M-orthonormal) and what it took."""

    lam: np.ndarray
    vectors: np.ndarray
    residuals: np.ndarray
    next_ritz_value: float
    stats: dict = field(default_factory=dict)

    def __repr__(self):
        return (f"BlockResult(n={len(self.lam)}, max_residual={np.max(self.residuals):.2e}, "
                f"iterations={self.stats.get('iterations')}, solves={self.stats.get('solves')})")


def default_block_size(count: int) -> int:
    """Nominal block size for ``count`` wanted modes: 1.1 sqrt(count), between 8 and 32.

    About half the largest multiplet of a sphere-like spectrum up to that
    count (2l + 1 modes with l ~ sqrt(count)); rounding feeds the missing
    directions of a degenerate eigenvalue in, as it does for single-vector
    Lanczos.  Measured at 100k unknowns and 115 modes: blocks of 12 need 588
    solves and 14.1 s, blocks of 17 need 748 solves and 17.3 s
    (benchmarks/README.md).
    """
    return int(np.clip(np.ceil(1.1 * np.sqrt(count)), 8, 32))


@contextlib.contextmanager
def _reused_heap():
    """Serve large temporary arrays from the heap instead of fresh mmap pages, for this call only.

    glibc maps every allocation above 32 MB freshly and unmaps it on free, so
    each n x block temporary pays the page faults of new memory again.
    Measured here (VM, shared cores): allocating and filling a 136 MB array
    took 0.5-0.9 s against 0.01 s for refilling one, about as long as the
    block product that fills it.  The previous settings are restored and the
    heap is trimmed on exit.
    """
    try:
        libc = ctypes.CDLL("libc.so.6")
        mallopt, trim = libc.mallopt, libc.malloc_trim
    except (OSError, AttributeError):  # not glibc: nothing to tune
        yield
        return
    M_TRIM_THRESHOLD, M_MMAP_MAX = -1, -4
    mallopt(M_MMAP_MAX, 0)
    mallopt(M_TRIM_THRESHOLD, 2**62)
    try:
        yield
    finally:
        mallopt(M_MMAP_MAX, 65536)  # glibc's defaults
        mallopt(M_TRIM_THRESHOLD, 128 * 1024)
        trim(0)


def _project_out(W, MW, V, M):
    """W - V C with C = V^T M W (one block Gram-Schmidt pass); returns W, M W and C."""
    if not V.shape[1]:
        return W, MW, np.zeros((0, W.shape[1]))
    C = V.T @ MW
    W -= V @ C
    return W, M @ W, C


def _svqb(W, MW):
    """M-orthonormal basis of span(W) by SVQB on unit-normalised columns (Stathopoulos and Wu 2002).

    Directions whose singular value falls below ``_DEPENDENT`` relative to the
    largest are dropped.
    """
    norms = np.sqrt(np.maximum(np.einsum("ij,ij->j", W, MW), 0.0))
    scale = np.where(norms > 0, 1.0 / np.maximum(norms, 1e-300), 0.0)
    W, MW = W * scale, MW * scale
    G = W.T @ MW
    d, P = np.linalg.eigh(0.5 * (G + G.T))
    keep = d > _DEPENDENT * max(float(d[-1]), 1e-300)
    S = P[:, keep] / np.sqrt(d[keep])
    return W @ S, MW @ S, float(d[keep][0] / d[-1])


def _orthonormal_basis(W, MW, V, M, rng, again: bool = True):
    """An M-orthonormal basis Q of span(W), M-orthogonal to V, and R = Q^T M W (so W = Q R).

    ``W`` is already projected against V.  SVQB scales the error left along V
    up by 1 / sqrt(conditioning of the block), so another Gram-Schmidt pass
    and SVQB follow when ``again`` or when the block is ill-conditioned
    ("twice is enough", Parlett 1998, section 6.9); a precaution, not seen
    to be needed in the measured runs.  Directions lost to rank
    deficiency are replaced by random ones so the block keeps its size
    (their rows of R are zero).
    """
    b = W.shape[1]
    Q, MQ, conditioning = _svqb(W, MW)
    if (again or conditioning < _ILL_CONDITIONED) and V.shape[1] and Q.shape[1]:
        Q, MQ, _ = _project_out(Q, MQ, V, M)
        Q, MQ, _ = _svqb(Q, MQ)
    if Q.shape[1] < b:
        basis = np.hstack([V, Q])
        filler = rng.standard_normal((W.shape[0], b - Q.shape[1]))
        filler, mfill, _ = _project_out(filler, M @ filler, basis, M)
        fq, mfq, _ = _orthonormal_basis(filler, mfill, basis, M, rng)
        Q, MQ = np.hstack([Q, fq]), np.hstack([MQ, mfq])
    return Q, MQ, MQ.T @ W


#: columns per chunk of the products with K and M on many vectors: n x chunk temporaries instead of
#: n x k (at a million unknowns and 100 modes each full-width temporary is 0.8 GB)
_COLUMNS = 16


def relative_residuals(K, M, lam, X, floor: float) -> np.ndarray:
    """||K x - lam M x|| / (max(|lam|, floor) ||M x||), column by column, in chunks of columns.

    ``floor`` keeps the measure finite at lam = 0 (a constant mode); it is the
    distance of the shift from zero, a natural spectral scale of the problem.
    """
    lam = np.asarray(lam, dtype=float)
    out = np.empty(X.shape[1])
    for j in range(0, X.shape[1], _COLUMNS):
        cols = slice(j, j + _COLUMNS)
        MX = M @ X[:, cols]
        R = K @ X[:, cols] - MX * lam[cols]
        out[cols] = np.linalg.norm(R, axis=0) / (np.maximum(np.abs(lam[cols]), floor)
                                                 * np.linalg.norm(MX, axis=0))
    return out


def gram(A, X) -> np.ndarray:
    """X^H A X for a sparse A and an (n, k) block, in chunks of columns (no n x k temporary).

    Hermitian for complex blocks (modes in a magnetic field), X^T A X for real ones.
    """
    G = np.empty((X.shape[1], X.shape[1]), dtype=np.result_type(X, A.dtype))
    XH = X.T.conj() if np.iscomplexobj(X) else X.T
    for j in range(0, X.shape[1], _COLUMNS):
        G[:, j:j + _COLUMNS] = XH @ (A @ X[:, j:j + _COLUMNS])
    return G


def _keep_count(lam, wanted, limit, gap):
    """How many Ritz vectors a restart keeps: at least ``wanted``, at most ``limit``, ending at a gap."""
    if limit <= wanted:
        return limit
    ends = np.arange(wanted, limit + 1)
    rel = (lam[np.minimum(ends, len(lam) - 1)] - lam[ends - 1]) / np.maximum(np.abs(lam[ends - 1]), gap)
    rel[ends >= len(lam)] = np.inf
    return int(ends[np.argmax(rel)])


def block_lowest(K, M, count: int, sigma: float, solve: Callable, *, gap: float = 1e-4, scale: float = 1.0,
                 block: int | None = None, basis: int | None = None, tolerance: float = TOLERANCE,
                 seed: int = 20261202, max_solves: int | None = None) -> BlockResult:
    """Lowest ``count`` (or more) eigenpairs of K u = lam M u by blocked shift-invert Krylov-Schur.

    Parameters
    ----------
    K, M
        Symmetric sparse matrices, M positive definite, K - sigma M positive definite.
    count
        Number of lowest pairs wanted; more are returned when the last wanted one
        is followed by a relative gap smaller than ``gap`` (an unfinished multiplet).
    sigma
        The shift, strictly below the spectrum.
    solve
        ``solve(B)`` returns (K - sigma M)^-1 B for an (n, b) block
        (a :mod:`shellmodes.eigen.backends` factorization).
    gap, scale
        Relative gap, on the scale max(|lam|, ``scale``), that must follow the last returned pair.
    block
        Block size (default :func:`default_block_size`); larger than the largest
        multiplicity wanted, since a block Krylov space holds at most ``block``
        vectors of one exactly degenerate eigenvalue.
    basis
        Largest number of basis vectors before a thick restart
        (default about 2.2 count + 2 block, capped at n).
    tolerance
        The iteration stops when every wanted pair meets ARPACK's criterion
        ||A^-1 M x - mu x||_M <= 1e-13 mu (the Lanczos path's standard) and
        its relative residual ||K u - lam M u|| / (max(|lam|, |sigma|) ||M u||)
        is at most this or the rounding floor 64 eps lam_max / max(|lam|, |sigma|);
        otherwise the first criterion is tightened, down to 1e-15.
    seed
        Seed of the random start block.
    max_solves
        Give up (:class:`~shellmodes.errors.SolverError`) after this many
        right-hand sides (default 20 count + 400).

    Returns
    -------
    BlockResult

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> from shellmodes.eigen.backends import get_backend
    >>> n = 800
    >>> K = sp.diags(np.arange(n, dtype=float)).tocsr(); M = sp.identity(n, format="csr")
    >>> solve = get_backend("splu")[1](K + M)
    >>> block_lowest(K, M, 5, -1.0, solve).lam[:5].round(8).tolist()
    [0.0, 1.0, 2.0, 3.0, 4.0]
    """
    with _reused_heap():
        return _krylov_schur(K, M, count, sigma, solve, gap=gap, scale=scale, block=block, basis=basis,
                             tolerance=tolerance, seed=seed, max_solves=max_solves)


def _krylov_schur(K, M, count: int, sigma: float, solve: Callable, *, gap: float = 1e-4, scale: float = 1.0,
                 block: int | None = None, basis: int | None = None, tolerance: float = TOLERANCE,
                 seed: int = 20261202, max_solves: int | None = None) -> BlockResult:
    n = K.shape[0]
    if count > n:
        raise SolverError(f"{count} modes were requested from {n} degrees of freedom")
    b = min(block or default_block_size(count), max(1, n // 4))
    m_max = min(n - b, basis or int(2.2 * count) + 2 * b)
    if m_max < count + b:
        raise SolverError(f"a basis of {m_max} vectors cannot hold {count} modes in blocks of {b}; "
                          "use the dense or Lanczos path for so small a problem")
    max_solves = max_solves or 20 * count + 400
    floor_scale = abs(sigma) if sigma else 1.0
    # ||K u|| / ||M u|| reaches about the largest eigenvalue: row sums against the mass diagonal
    lam_top = float(np.max(np.asarray(abs(K).sum(axis=1)).ravel() / np.maximum(M.diagonal(), 1e-300)))
    t0 = time.perf_counter()
    stats = {"iterations": 0, "solves": 0, "restarts": 0, "block": b, "basis": m_max,
             "time_solve": 0.0, "time_orthogonalise": 0.0, "time_restart": 0.0}
    rng = np.random.default_rng(seed)
    V = np.empty((n, m_max + b))
    H = np.zeros((m_max + b, m_max + b))  # V^T M (A^-1 M) V, the shift-inverted operator projected
    S = np.zeros((m_max + b, b))  # A^-1 M V = V H + Q S^T
    m = 0
    Q = rng.standard_normal((n, b))
    Q, MQ, _ = _orthonormal_basis(Q, M @ Q, V[:, :0], M, rng)
    local = 0  # first column the next block is locally orthogonalised against
    tol_t = 1e-13  # ARPACK's tolerance on ||A^-1 M x - mu x||_M / mu, as in the Lanczos path
    while True:
        V[:, m:m + b] = Q
        m_old, m = m, m + b
        ts = time.perf_counter()
        W = solve(np.ascontiguousarray(MQ))
        stats["time_solve"] += time.perf_counter() - ts
        stats["solves"] += b
        tg = time.perf_counter()
        # Local pass first: in exact arithmetic A^-1 M Q_j couples only with Q_(j-1) and Q_j (with
        # every kept Ritz vector right after a restart), so the cancellation happens there; one full
        # pass after it then removes what rounding left along the whole space at the size of the
        # remainder, and normalising loses nothing (half the cost of two full passes).
        W, MW, C = _project_out(W, M @ W, V[:, local:m], M)
        W, MW, C_full = _project_out(W, MW, V[:, :m], M)
        C_full[local:m] += C
        C = C_full
        H[:m, m_old:m] = C
        H[m_old:m, :m] = C.T
        H[m_old:m, m_old:m] = 0.5 * (C[m_old:m] + C[m_old:m].T)
        Q, MQ, R = _orthonormal_basis(W, MW, V[:, :m], M, rng, again=False)
        local = m_old
        S[:m] = 0.0
        S[m_old:m] = R.T
        stats["time_orthogonalise"] += time.perf_counter() - tg
        stats["iterations"] += 1
        if m <= count + b and m + b <= m_max:
            continue  # no pair can be accepted yet (that needs count + b < m) and no restart is due

        mu, Y = la.eigh(H[:m, :m])
        mu, Y = mu[::-1], Y[:, ::-1]  # largest mu = lowest lam first
        lam = sigma + 1.0 / mu
        estimate = np.linalg.norm(S[:m].T @ Y, axis=0) / np.abs(mu)
        wanted = count
        while wanted < m - 1 and lam[wanted] - lam[wanted - 1] <= gap * max(abs(lam[wanted]), scale):
            wanted += 1  # never stop inside a multiplet
        converged = int(np.argmin(estimate[:wanted] <= tol_t)) if not np.all(estimate[:wanted] <= tol_t) \
            else wanted
        log.debug("block iteration %d: space %d, %d of %d wanted converged (estimate)", stats["iterations"], m,
                  converged, wanted)
        progress.stage(f"block iteration {stats['iterations']}: {converged} of {wanted} modes converged")
        if converged == wanted and wanted < m - b:
            U = V[:, :m] @ Y[:, :wanted]
            # Rayleigh-Ritz of (K, M) on the converged vectors: eigenvalues to second order
            lam_k, Z = la.eigh(gram(K, U), gram(M, U))
            U = U @ Z
            res = relative_residuals(K, M, lam_k, U, floor_scale)
            limit = np.maximum(tolerance, _FLOOR * lam_top / np.maximum(np.abs(lam_k), floor_scale))
            if np.all(res <= limit) or tol_t <= 1e-15:
                break
            log.debug("block iteration: true residual %.1e above %.1e; tightening", res.max(), limit.min())
            tol_t *= 0.1
        if stats["solves"] >= max_solves:
            raise SolverError(f"the block iteration did not converge: {converged} of {wanted} modes after "
                              f"{stats['solves']} solves; refine the mesh or ask for fewer modes")
        if m + b > m_max:  # Krylov-Schur thick restart on the lowest Ritz vectors, cut at a gap
            tr = time.perf_counter()
            least = min(m_max - 2 * b, max(wanted + b, int(0.6 * m_max)))
            keep = _keep_count(lam, least, min(least + b, m_max - 2 * b), gap)
            for r in range(0, n, _ROWS):  # in place, by rows: no n x keep temporary
                V[r:r + _ROWS, :keep] = V[r:r + _ROWS, :m] @ Y[:, :keep]
            H[:keep, :keep] = np.diag(mu[:keep])
            S[:keep] = (S[:m].T @ Y[:, :keep]).T
            m = keep
            local = 0  # the pending block couples with every kept vector
            stats["restarts"] += 1
            stats["time_restart"] += time.perf_counter() - tr
            H[:m, m:m + b] = S[:m]
            H[m:m + b, :m] = S[:m].T

    nxt = float(lam[wanted]) if wanted < m else float("inf")
    stats["time"] = time.perf_counter() - t0
    stats["space"] = m
    log.info("block iteration: %d pairs in %d iterations, %d solves, %d restarts, %.2f s",
             wanted, stats["iterations"], stats["solves"], stats["restarts"], stats["time"])
    return BlockResult(lam=lam_k, vectors=U, residuals=res, next_ritz_value=nxt, stats=stats)
