"""Complex Hermitian modes: the Rayleigh-Ritz step, and spin 1/2 in a uniform field.

Modes in a magnetic field are complex; :func:`rayleigh_ritz` makes the
M-orthonormal basis the iteration returns an eigenbasis of K inside each
near-degenerate cluster (the Hermitian form of what the real path gets from
ARPACK directly).  :func:`spin_split` doubles every orbital mode into
m_s = -1/2, +1/2 with energies lam + shift m_s, and keeps the set complete.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import scipy.linalg as la

from shellmodes.eigen.block import gram, relative_residuals
from shellmodes.eigen.solve import Eigenpairs, group_multiplets

__all__ = ["rayleigh_ritz", "spin_split"]


def rayleigh_ritz(pairs: Eigenpairs, K, M) -> Eigenpairs:
    """Eigenpairs of K in the span of ``pairs.vectors`` (M-orthonormal), with fresh residuals."""
    U = pairs.vectors
    if not len(pairs.lam):
        return pairs
    H = gram(K, U)
    lam, W = la.eigh(0.5 * (H + H.conj().T))
    U = U @ W
    residuals = relative_residuals(K, M, lam, U, floor=abs(pairs.shift) if pairs.shift else 1.0)
    G = gram(M, U)
    orth = float(np.max(np.abs(G - np.eye(len(lam)))))
    return replace(pairs, lam=lam, vectors=U, residuals=residuals, orthogonality=orth,
                   method=pairs.method + " (complex Hermitian)")


def spin_split(pairs: Eigenpairs, shift: float, count: int | None, tolerance: float, scale: float):
    """Each orbital mode twice, at lam + shift m_s (m_s = -1/2, +1/2), and the columns that say so.

    A state of an orbital level above the solved ones lies at or above
    lam_last - |shift| / 2, so the combined list is cut there, and then at the
    requested count (completing the last multiplet).  Returns the pairs and
    per-mode columns ``m_s``, ``orbital_mode`` and ``spin_shift`` (lambda units).
    """
    n = len(pairs.lam)
    m_s = np.tile([-0.5, 0.5], n)
    source = np.repeat(np.arange(n), 2)
    lam = pairs.lam[source] + shift * m_s
    keep = np.flatnonzero(lam <= (pairs.lam[-1] - abs(shift) / 2 if n else 0.0))
    keep = keep[np.argsort(lam[keep], kind="stable")]
    if count is not None and len(keep) > count:  # the requested count, whole multiplets
        groups = group_multiplets(lam[keep], tolerance, scale)
        keep = keep[:next(g for g in groups if count - 1 in g)[-1] + 1]
    source, m_s, lam = source[keep], m_s[keep], lam[keep]
    out = replace(pairs, lam=lam, vectors=pairs.vectors[:, source], residuals=pairs.residuals[source])
    return out, {"m_s": m_s.tolist(), "orbital_mode": source.tolist(), "spin_shift": (shift * m_s).tolist()}
