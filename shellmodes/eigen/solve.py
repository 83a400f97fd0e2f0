"""The eigen-solver: lowest modes of K u = lambda M u, or all below a value.

Shift-invert Lanczos (scipy's ARPACK ``eigsh``) with the shift strictly below
the spectrum, so ``K - sigma M`` is positive definite even when K is singular
(closed surfaces, free rims) and a Cholesky factorization applies.  The start
vector is fixed, so results are reproducible.  The returned set never ends
inside a multiplet: it is extended to the next relative gap.  Every pair
carries its residual and the set is M-orthonormalised and checked.
Large problems may use the blocked shift-invert iteration of
:mod:`shellmodes.eigen.block` instead of Lanczos (``method``), from the
same factor, shift and checks.
"""

from __future__ import annotations

import logging
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp
import scipy.sparse.linalg as sla

from shellmodes.eigen.backends import get_backend
from shellmodes.eigen.block import block_lowest, gram, relative_residuals
from shellmodes.eigen.resources import check_count, check_growth
from shellmodes.errors import DoubtfulResultWarning, SolverError
from shellmodes.limits import BLOCK_COUNT, BLOCK_THRESHOLD, DENSE_LIMIT, WINDOW_START_COUNT

__all__ = ["Eigenpairs", "lowest_modes", "group_multiplets", "relative_residuals", "resolve_method", "first_size",
           "multiplet_end", "checked_pairs", "check_found"]

log = logging.getLogger(__name__)

#: iterations on assembled matrices ("separable" is a plan of :mod:`shellmodes.eigen.planner`, not an iteration)
METHODS = ("auto", "lanczos", "block", "lobpcg")


@dataclass(frozen=True, eq=False)
class Eigenpairs:
    """Eigenvalues (ascending), M-orthonormal vectors and their residuals.

    Attributes
    ----------
    lam : ndarray
        Eigenvalues, ascending.
    vectors : ndarray
        (n, k) M-orthonormal eigenvectors.
    residuals : ndarray
        Relative residuals ||K u - lam M u|| / (max(|lam|, |shift|) ||M u||).
    orthogonality : float
        Largest |U^T M U - I| entry.
    shift : float
        The shift of the spectral transformation.
    backend, method : str
        Factorization and eigen-iteration used.
    requested : int or None
        Modes asked for (None with ``below``).
    timings : dict
        Seconds per stage.
    """

    lam: np.ndarray
    vectors: np.ndarray
    residuals: np.ndarray
    orthogonality: float
    shift: float
    backend: str
    requested: int | None
    timings: dict = field(default_factory=dict)
    method: str = "lanczos"
    #: extra records of a solver path: ``"solver"`` (merged into the spectrum's solver record) and ``"log"``
    #: (lines for run.log)
    details: dict = field(default_factory=dict)

    def __repr__(self):
        lows = ", ".join(f"{v:.6g}" for v in self.lam[:4])
        return (f"Eigenpairs(n={len(self.lam)}, lam=[{lows}{', ...' if len(self.lam) > 4 else ''}], "
                f"max_residual={np.max(self.residuals):.2e}, backend={self.backend!r}, method={self.method!r})")


def resolve_method(n: int, method: str = "auto", count: int | None = None) -> str:
    """The eigen-iteration for ``n`` unknowns: ``"dense"`` at most :data:`DENSE_LIMIT`, else ``method``,
    with ``"auto"`` meaning ``"block"`` from :data:`BLOCK_THRESHOLD` unknowns or :data:`BLOCK_COUNT`
    modes on and ``"lanczos"`` below."""
    if method not in (*METHODS, "dense"):
        raise ValueError(f"unknown eigen-iteration {method!r}; allowed: {', '.join(METHODS)}")
    if n <= DENSE_LIMIT or method == "dense":
        return "dense"
    if method == "auto":
        return "block" if n >= BLOCK_THRESHOLD or (count or 0) >= BLOCK_COUNT else "lanczos"
    return method


def group_multiplets(lam: np.ndarray, tolerance: float, scale: float) -> list[np.ndarray]:
    """Split ascending eigenvalues into runs whose neighbours differ by <= tolerance * size.

    ``size`` is max(|lam|, scale), so near-zero eigenvalues group on an
    absolute scale.
    """
    if len(lam) == 0:
        return []
    gaps = np.diff(lam) > tolerance * np.maximum(np.abs(lam[1:]), scale)
    cuts = np.flatnonzero(gaps) + 1
    return np.split(np.arange(len(lam)), cuts)


def check_found(count, residuals, residual_limit: float) -> None:
    """Log a count extended to a whole multiplet; warn when a residual exceeds the limit."""
    keep = len(residuals)
    if count is not None and keep > count:
        log.info("extended %d requested modes to %d to complete the last multiplet", count, keep)
    worst = float(np.max(residuals)) if keep else 0.0
    if worst > residual_limit:
        warnings.warn(f"largest relative residual {worst:.2e} exceeds the limit {residual_limit:.1e} "
                      f"(mode {int(np.argmax(residuals))}); do not trust these modes without checking",
                      DoubtfulResultWarning, stacklevel=3)


def _m_orthonormalise(U, M):
    G = gram(M, U)
    error = float(np.max(np.abs(G - np.eye(G.shape[0])))) if G.size else 0.0
    if error > 1e-10:
        L = la.cholesky(0.5 * (G + G.T), lower=True)
        U = la.solve_triangular(L, U.T, lower=True).T
    return U, error


def _dense(K, M, k):
    lam, U = la.eigh(K.toarray(), M.toarray(), subset_by_index=[0, k - 1])
    return lam, U


def _shift_invert(K, M, k, sigma, factorize, v0):
    A = (K - sigma * M).tocsc()
    solve = factorize(A)
    n = K.shape[0]
    op = sla.LinearOperator((n, n), matvec=solve, matmat=solve, dtype=float)
    ncv = min(n, max(2 * k + 1, k + 32))
    try:
        lam, U = sla.eigsh(K, k=k, M=M, sigma=sigma, which="LM", OPinv=op, v0=v0, ncv=ncv,
                           tol=1e-13, maxiter=max(1000, 20 * k))
    except sla.ArpackNoConvergence as exc:
        raise SolverError(f"the Lanczos iteration did not converge for {k} modes "
                          f"({len(exc.eigenvalues)} converged); reduce the count or refine the mesh") from None
    order = np.argsort(lam)
    return lam[order], U[:, order]


def lowest_modes(K: sp.spmatrix, M: sp.spmatrix, count: int | None = None, below: float | None = None, *,
                 lower_bound: float = 0.0,
                 scale: float = 1.0, backend: str = "auto", multiplet_tolerance: float = 1e-4,
                 residual_limit: float = 1e-6, method: str = "auto",
                 preconditioner: Callable[[np.ndarray], np.ndarray] | None = None,
                 start: np.ndarray | None = None) -> Eigenpairs:
    """Lowest ``count`` eigenpairs of K u = lam M u (or all with lam < ``below``).

    Parameters
    ----------
    K, M
        Symmetric sparse stiffness (positive semi-definite up to a potential) and
        positive definite mass.
    count, below
        Give one: the number of lowest modes, or an upper bound on lam.
    lower_bound
        A guaranteed lower bound of the spectrum (0 without a potential, the
        potential's minimum otherwise).
    scale
        A typical eigenvalue spacing (e.g. 1/R^2); the shift is
        ``lower_bound - scale``, strictly below every eigenvalue.
    backend
        Linear solver for shift-invert (see :mod:`shellmodes.eigen.backends`).
    multiplet_tolerance
        Relative gap used to extend the set to a whole multiplet.
    residual_limit
        Residuals above this raise a :class:`DoubtfulResultWarning`.
    method
        ``"lanczos"`` (ARPACK), ``"block"`` (:mod:`shellmodes.eigen.block`) or
        ``"auto"``: block from :data:`BLOCK_THRESHOLD` degrees of freedom or :data:`BLOCK_COUNT`
        modes on.
        Problems below :data:`DENSE_LIMIT` are solved densely either way.
    preconditioner, start
        ``method = "lobpcg"`` only: a preconditioner approximating
        ``(K - shift M)^-1`` instead of AMG, and start vectors (see
        :func:`shellmodes.eigen.backends.lobpcg_amg.lobpcg_lowest`).

    Returns
    -------
    Eigenpairs

    Raises
    ------
    SolverError
        More modes than degrees of freedom, or no convergence.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> K = sp.diags([2.0, 1.0, 3.0]).tocsr(); M = sp.identity(3, format="csr")
    >>> lowest_modes(K, M, 2).lam.round(6).tolist()
    [1.0, 2.0]
    """
    n = K.shape[0]
    if (count is None) == (below is None):
        raise ValueError("give exactly one of count and below")
    check_count(count, n)
    method = resolve_method(n, method, count)
    K = sp.csr_matrix(K)
    M = sp.csr_matrix(M)
    sigma = float(lower_bound - scale)
    if method == "dense":
        name, factorize = "dense", None
    elif method == "lobpcg":  # no factorization: LOBPCG preconditioned by algebraic multigrid (or as given)
        name, factorize = ("amg" if preconditioner is None else getattr(preconditioner, "name", "given")), None
    else:
        name, factorize = get_backend(backend)
    solve = None  # the block path factorizes once and keeps the factor across extensions
    extra: dict = {}
    rng = np.random.default_rng(20261202)
    v0 = rng.standard_normal(n)
    t0 = time.perf_counter()
    k = first_size(n, count)
    while True:
        if name == "dense" or k >= n - 1:
            lam, U = _dense(K, M, min(k, n))
            name_used, method_used = "dense", "dense"
        elif method == "block" and 4 * k < n:
            if solve is None:
                t_factor = time.perf_counter()
                solve = factorize((K - sigma * M).tocsc())
                extra["factorization"] = time.perf_counter() - t_factor
            found = block_lowest(K, M, k, sigma, solve, gap=multiplet_tolerance, scale=scale)
            lam, U = found.lam, found.vectors
            extra["block"] = found.stats
            name_used, method_used = name, "block"
        elif method == "lobpcg":
            from shellmodes.eigen.backends.lobpcg_amg import lobpcg_lowest

            lam, U = lobpcg_lowest(K, M, k, shift=sigma, tol=1e-9, preconditioner=preconditioner, start=start)
            order = np.argsort(lam)
            lam, U = lam[order], U[:, order]
            name_used, method_used = name, "lobpcg"
        else:
            lam, U = _shift_invert(K, M, k, sigma, factorize, v0)
            name_used, method_used = name, "lanczos"
        keep, k = multiplet_end(lam, n, k, count, below, multiplet_tolerance, scale)
        if keep is not None:
            break
    return checked_pairs(K, M, lam[:keep], U[:, :keep], sigma, count, residual_limit, name_used, method_used,
                         time.perf_counter() - t0, extra)


def first_size(n: int, count: int | None) -> int:
    """How many pairs to compute first: the count and a margin for the multiplet that may straddle it."""
    target = count if count is not None else min(n, WINDOW_START_COUNT)
    return min(n, target + max(6, int(np.ceil(0.15 * target))))


def multiplet_end(lam, n: int, k: int, count: int | None, below: float | None, tolerance: float,
                  scale: float) -> tuple[int | None, int]:
    """``(keep, k)``: how many of the ascending ``lam`` to keep, or ``(None, larger k)`` to compute more.

    The kept set ends at the requested count or energy, extended to the end of
    the multiplet there; when that multiplet (or the window) may continue
    beyond the ``k`` pairs found, more are needed (the growth is capped by
    :func:`~shellmodes.eigen.resources.check_growth`).
    """
    if below is not None:
        inside = np.flatnonzero(lam < below)
        if len(inside) == len(lam) and len(lam) < n:
            k = min(n, 2 * k)
            check_growth(n, k, count, below, tolerance)
            return None, k
        last = inside[-1] if len(inside) else -1
    else:
        last = count - 1
    if last < 0:
        return 0, k
    group = next(g for g in group_multiplets(lam, tolerance, scale) if last in g)
    keep = group[-1] + 1
    if keep == len(lam) and len(lam) < n:  # the multiplet may continue beyond what we have
        k = min(n, k + max(8, len(group) + 8))
        check_growth(n, k, count, below, tolerance)
        return None, k
    return keep, k


def checked_pairs(K, M, lam, U, sigma: float, count: int | None, residual_limit: float, backend: str,
                  method: str, elapsed: float, timings: dict | None = None,
                  details: dict | None = None) -> Eigenpairs:
    """M-orthonormalised pairs with their residuals as an :class:`Eigenpairs`; large residuals warn."""
    keep = len(lam)
    U, orth = _m_orthonormalise(U, M)
    residuals = relative_residuals(K, M, lam, U, floor=abs(sigma) if sigma else 1.0)
    log.info("solved %d modes with %s (%s) in %.2f s", keep, backend, method, elapsed)
    check_found(count, residuals, residual_limit)
    return Eigenpairs(lam=lam, vectors=U, residuals=residuals, orthogonality=orth, shift=sigma, backend=backend,
                      requested=count, timings={"eigensolve": elapsed, **(timings or {})}, method=method,
                      details=details or {})
