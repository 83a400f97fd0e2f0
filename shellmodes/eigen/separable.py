"""Separable shells: modes of Kronecker-sum pencils, and the spherical preconditioner for deformed ones.

Between concentric spherical walls the prism matrices are
``K = Ks (x) B + Ms (x) A`` and ``M = Ms (x) C``
(:func:`shellmodes.fem.prisms.kronecker_factors`): a surface pencil on the
unit sphere times radial matrices.  :func:`separable_modes` solves such a
pencil exactly by separation; :class:`SphericalPreconditioner` inverts it by
fast diagonalisation, which preconditions LOBPCG on a deformed shell through
its mean-radius sphere (:func:`spherical_reference`).
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla

from shellmodes.eigen.resources import check_count
from shellmodes.errors import SolverError
from shellmodes.fem.prisms import PrismShell, kronecker_factors

__all__ = ["separable_modes", "SeparableModes", "spherical_reference", "SphericalPreconditioner", "BallPreconditioner"]


def spherical_reference(disc: PrismShell, inverse_mass: dict, offsets: dict | None = None):
    """Kronecker factors of the same prisms with every wall replaced by its mean-radius sphere.

    For a deformed shell this is the nearby separable problem: its modes
    start the iteration and its inverse preconditions it
    (:class:`SphericalPreconditioner`).
    """
    mean = np.repeat(disc.wall_values.mean(axis=1, keepdims=True), disc.wall_values.shape[1], axis=1)
    return kronecker_factors(dataclasses.replace(disc, wall_values=mean), inverse_mass, offsets)


class SphericalPreconditioner:
    """Exact inverse of ``Ks (x) B + Ms (x) (A - shift C)`` by fast diagonalisation.

    The radial pencil ``(A - shift C) w = theta B w`` (dense, ``W^T B W = I``)
    turns the Kronecker sum into independent surface problems
    ``(Ks + theta_j Ms) z_j = y_j``, one sparse factorization each (Lynch,
    Rice and Thomas, Numer. Math. 6 (1964) 185).  Applied to blocks of
    vectors on the free dofs ``surface * n_free + radial``.
    """

    name = "spherical-reference"

    def __init__(self, Ks, Ms, A, B, C, radial_free, shift: float, backend: str = "auto"):
        from shellmodes.eigen.backends import get_backend

        f = np.asarray(radial_free)
        theta, W = sla.eigh(A[np.ix_(f, f)] - shift * C[np.ix_(f, f)], B[np.ix_(f, f)])
        if np.min(theta) <= 0:
            raise SolverError(f"the reference radial pencil is not positive definite (theta {np.min(theta):.3g}); "
                              "the shift must lie below the spectrum")
        factorize = get_backend(backend)[1]
        self.W, self.ns, self.nr = W, Ks.shape[0], len(f)
        self.solves = [factorize((Ks + t * Ms).tocsc()) for t in theta]
        n = self.ns * self.nr
        self.shape = (n, n)

    def __call__(self, X):
        X = np.asarray(X, dtype=float)
        vector = X.ndim == 1
        X = X.reshape(self.ns, self.nr, -1)
        Y = np.einsum("srk,rj->sjk", X, self.W)
        Z = np.empty_like(Y)
        for j, solve in enumerate(self.solves):
            Z[:, j, :] = np.asarray(solve(np.ascontiguousarray(Y[:, j, :]))).reshape(self.ns, -1)
        out = np.einsum("sjk,rj->srk", Z, self.W).reshape(self.ns * self.nr, -1)
        return out[:, 0] if vector else out


@dataclass(frozen=True, eq=False)
class SeparableModes:
    """Eigenpairs of a separable shell with their surface and radial indices."""

    lam: np.ndarray
    vectors: np.ndarray
    residuals: np.ndarray
    orthogonality: float
    surface_index: np.ndarray
    radial_index: np.ndarray
    surface_lam: np.ndarray
    timings: dict

    def __repr__(self) -> str:
        lows = ", ".join(f"{v:.6g}" for v in self.lam[:4])
        worst = float(np.max(self.residuals)) if len(self.lam) else 0.0
        return (f"SeparableModes(n={len(self.lam)}, lam=[{lows}{', ...' if len(self.lam) > 4 else ''}], "
                f"max_residual={worst:.2e}, surface_modes={self.timings.get('surface_modes')})")


def separable_modes(Ks, Ms, A, B, C, radial_free: np.ndarray, count: int | None = None,
                    below: float | None = None, *, multiplet_tolerance: float = 1e-4, scale: float = 1.0,
                    surface_solver: Callable | None = None, centre: bool = False) -> SeparableModes:
    """Lowest modes of ``K = Ks (x) B + Ms (x) A``, ``M = Ms (x) C`` by separation.

    Each surface pair ``Ks y = mu Ms y`` gives radial problems
    ``(A + mu B) x = lam C x`` (on the ``radial_free`` dofs), and ``y (x) x``
    is an eigenvector of the full pencil.  Because ``lam_1(mu)`` grows with
    mu, the lowest ``count`` full modes use at most the lowest ``count``
    surface modes; the surface set is doubled until its last
    ``lam_1(mu)`` lies above every mode kept, so no mode is missed.
    Residuals are those of the full Kronecker operator.

    ``centre=True`` (a ball, :mod:`shellmodes.volume.ball`): radial dof 0 is
    the merged centre, one dof times the constant surface function.  Since
    ``Ks 1 = 0`` and every other surface mode is Ms-orthogonal to 1, it
    couples only to the constant mode (mu = 0, taken exactly), whose radial
    problem keeps it; every other surface mode drops it (u(0) = 0, the r^l
    behaviour at the centre).
    """
    from shellmodes.eigen.solve import group_multiplets, lowest_modes

    solver = surface_solver or (lambda k: lowest_modes(Ks, Ms, count=k, lower_bound=0.0, scale=1.0))
    f_all = np.asarray(radial_free)
    f_rest = f_all[f_all != 0] if centre else f_all
    t0 = time.perf_counter()
    # the top kept multiplet is often the last surface multiplet's n = 1 level, which would force a
    # second surface solve; asking 1.5 count + 8 at once usually settles it in one
    want = int(1.5 * count) + 8 if count is not None else 16
    n_full = Ks.shape[0] * len(f_rest) + (len(f_all) - len(f_rest))
    check_count(count, n_full)  # the rule of every path: never fewer modes than asked
    while True:
        surface = solver(min(want, Ks.shape[0]))
        mu, Y = np.array(surface.lam, dtype=float), np.array(surface.vectors, dtype=float)
        if centre:  # the constant surface mode, exactly (Ks 1 = 0), normalised in Ms
            one = np.ones(Ks.shape[0])
            mu[0], Y[:, 0] = 0.0, one / np.sqrt(one @ (Ms @ one))
        lam_list, si, ri, X = [], [], [], []
        for j, m in enumerate(mu):
            f = f_all if (j == 0 or not centre) else f_rest
            g = np.ix_(f, f)
            values, vectors = sla.eigh(A[g] + m * B[g], C[g])
            lam_list.append(values)
            si.append(np.full(len(values), j))
            ri.append(np.arange(len(values)))
            X.append(vectors)
        lam = np.concatenate(lam_list)
        order = np.argsort(lam, kind="stable")
        lam, si, ri = lam[order], np.concatenate(si)[order], np.concatenate(ri)[order]
        if below is not None:
            last = int(np.searchsorted(lam, below)) - 1
        else:
            last = min(count, len(lam)) - 1
        groups = group_multiplets(lam, multiplet_tolerance, scale)
        keep = 0 if last < 0 else next(g for g in groups if last in g)[-1] + 1
        # lam_1 of the last surface mode bounds every mode left out (none: a ball with only its centre free)
        ceiling = lam_list[-1][0] if len(lam_list[-1]) else np.inf
        complete = keep < len(lam) and (keep == 0 or lam[keep - 1] < ceiling * (1 - multiplet_tolerance))
        if complete or len(mu) >= Ks.shape[0]:
            break
        want = 2 * len(mu)
    if count is not None and keep < count and keep < n_full:
        raise SolverError(f"only {keep} separable modes found for {count} requested")
    lam, si, ri = lam[:keep], si[:keep], ri[:keep]
    nr = A.shape[0]
    Xk = np.zeros((nr, keep))  # radial factor of each kept mode, zero on the fixed radial dofs
    rows = [f_all if (centre and si[i] == 0) or not centre else f_rest for i in range(keep)]
    for i in range(keep):
        Xk[rows[i], i] = X[si[i]][:, ri[i]]
    Yk = Y[:, si]
    MsY, KsY = Ms @ Yk, Ks @ Yk
    AX, BX, CX = A @ Xk, B @ Xk, C @ Xk
    residuals = np.zeros(keep)
    for i in range(keep):
        # rows of the fixed radial dofs (Dirichlet walls; a ball's centre for mu > 0) are not equations
        f = rows[i]
        r = np.kron(KsY[:, i], BX[f, i]) + np.kron(MsY[:, i], AX[f, i] - lam[i] * CX[f, i])
        residuals[i] = np.linalg.norm(r) / (max(abs(lam[i]), scale) * np.linalg.norm(MsY[:, i])
                                            * np.linalg.norm(CX[f, i]))
    vectors = np.einsum("sk,rk->srk", Yk, Xk).reshape(Ks.shape[0] * nr, keep)
    gram = (Yk.T @ MsY) * (Xk.T @ (C @ Xk))
    orth = float(np.max(np.abs(gram - np.eye(keep)))) if keep else 0.0
    return SeparableModes(lam=lam, vectors=vectors, residuals=residuals, orthogonality=orth, surface_index=si,
                          radial_index=ri, surface_lam=mu[si],
                          timings={"eigensolve": time.perf_counter() - t0, "surface_modes": len(mu)})


class BallPreconditioner:
    """Exact inverse of a concentric-sphere ball's ``K - shift M`` on the merged space.

    With the centre first, the matrix is bordered:
    ``[[d, v^T], [v, T]]`` where ``T = Ks (x) B + Ms (x) a`` on the non-centre
    radial dofs (``a = A - shift C``; inverted by fast diagonalisation,
    :class:`~shellmodes.eigen.separable.SphericalPreconditioner`),
    ``v = (Ms 1) (x) a[rest, 0]`` (the ``Ks 1 (x) B`` part vanishes: Ks 1 = 0)
    and ``d = (1^T Ms 1) a[0, 0]``.  One solve with T per application, plus
    the Schur complement ``S = d - v^T T^-1 v`` (a number, formed once).
    """

    name = "spherical-reference-ball"

    def __init__(self, Ks, Ms, A, B, C, radial_free, shift: float, backend: str = "auto"):
        f = np.asarray(radial_free)
        rest = f[f != 0]
        self.inner = SphericalPreconditioner(Ks, Ms, A, B, C, rest, shift, backend=backend)
        a = A - shift * C
        m1 = Ms @ np.ones(Ks.shape[0])
        self.v = np.kron(m1, a[rest, 0])
        self.w = self.inner(self.v)
        self.schur = float(np.sum(m1) * a[0, 0] - self.v @ self.w)
        n = 1 + self.inner.shape[0]
        self.shape = (n, n)

    def __call__(self, X):
        X = np.asarray(X, dtype=float)
        vector = X.ndim == 1
        X = X.reshape(self.shape[0], -1)
        z = self.inner(X[1:])
        c = (X[0] - self.v @ z) / self.schur
        out = np.vstack([c[None, :], z - np.outer(self.w, c)])
        return out[:, 0] if vector else out
