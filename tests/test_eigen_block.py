"""The blocked shift-invert iteration against dense and Lanczos results on small problems."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as la
import scipy.sparse as sp

from shellmodes.eigen.backends import get_backend
from shellmodes.eigen.block import block_lowest
from shellmodes.eigen.solve import lowest_modes
from shellmodes.errors import SolverError
from shellmodes.fem.forms import assemble_surface
from shellmodes.fem.surface import curved_surface
from shellmodes.shapes.reference import icosphere


def _sphere(level: int, degree: int):
    p, t = icosphere(level)
    surface = curved_surface(p, t, degree, project=lambda x: x / np.linalg.norm(x, axis=1)[:, None])
    problem = assemble_surface(surface)
    return problem.K, problem.M


@pytest.fixture(scope="module")
def sphere_p2():
    # 2,562 degrees of freedom: P2 on an icosphere of level 3; read-only in every test
    return _sphere(3, 2)


def _chain(n: int):
    """-u'' on (0, 1) (eigenvalues near (pi j)^2) plus an irregular potential in [0, 1): simple eigenvalues."""
    rng = np.random.default_rng(7)
    h2 = (1.0 / (n + 1)) ** 2
    K = sp.diags([-np.ones(n - 1) / h2, 2.0 * np.ones(n) / h2 + rng.random(n), -np.ones(n - 1) / h2], [-1, 0, 1])
    return sp.csr_matrix(K), sp.identity(n, format="csr")


def test_block_agrees_with_dense_on_a_chain():
    K, M = _chain(1500)
    sigma = -1.0
    solve = get_backend("splu")[1]((K - sigma * M).tocsc())
    found = block_lowest(K, M, 40, sigma, solve, block=8)
    exact = la.eigh(K.toarray(), eigvals_only=True, subset_by_index=[0, 39])
    assert len(found.lam) >= 40
    # relative 1e-10: residuals reach ~1e-11, the eigenvalue error is their square times the gaps
    assert np.max(np.abs(found.lam[:40] - exact) / exact) < 1e-10
    G = found.vectors.T @ (M @ found.vectors)
    assert np.max(np.abs(G - np.eye(len(G)))) < 1e-10  # M-orthonormal
    # ||K|| ~ 4 (n+1)^2 ~ 9e6 here, so rounding alone leaves ~eps 9e6 / 10 ~ 2e-10 at lam ~ 10
    assert np.max(found.residuals) <= 1e-8


def test_block_agrees_with_dense_and_lanczos_on_the_sphere(sphere_p2):
    K, M = sphere_p2
    dense = la.eigh(K.toarray(), M.toarray(), eigvals_only=True, subset_by_index=[0, 49])
    block = lowest_modes(K, M, 36, scale=1.0, method="block")
    lanczos = lowest_modes(K, M, 36, scale=1.0, method="lanczos")
    assert block.method == "block" and lanczos.method == "lanczos"
    assert len(block.lam) == len(lanczos.lam) == 36  # 36 = l <= 5 exactly, a gap follows
    # relative 1e-10: both converge to residuals ~1e-12 of well-separated multiplets
    assert np.max(np.abs(block.lam - dense[:36]) / np.maximum(np.abs(dense[:36]), 1.0)) < 1e-10
    assert np.max(np.abs(block.lam - lanczos.lam) / np.maximum(np.abs(lanczos.lam), 1.0)) < 1e-10
    assert np.max(block.residuals) <= 1e-10
    # the same subspace per multiplet: projections of one basis on the other have unit singular values
    for lo, hi in [(1, 4), (9, 16), (25, 36)]:
        P = block.vectors[:, lo:hi].T @ (M @ lanczos.vectors[:, lo:hi])
        assert np.allclose(la.svdvals(P), 1.0, atol=1e-8)


def test_block_completes_the_cut_multiplet(sphere_p2):
    K, M = sphere_p2
    # 30 modes end inside l = 5 (modes 25..35): the set must grow to 36
    pairs = lowest_modes(K, M, 30, scale=1.0, method="block")
    assert len(pairs.lam) == 36
    assert pairs.requested == 30
    l = np.floor(np.sqrt(np.arange(36)))
    # P2 on 2,562 dofs is accurate to ~1e-4 relative (docs/MEASURED.md); 1e-3 leaves margin
    assert np.max(np.abs(pairs.lam[1:] - l[1:] * (l[1:] + 1)) / (l[1:] * (l[1:] + 1))) < 1e-3


def test_block_handles_singular_stiffness(sphere_p2):
    K, M = sphere_p2
    # closed surface: K has the constants in its kernel, lam_0 = 0
    pairs = lowest_modes(K, M, 4, scale=1.0, method="block")
    assert pairs.shift < 0
    assert abs(pairs.lam[0]) < 1e-10
    assert len(pairs.lam) == 4
    u0 = pairs.vectors[:, 0]
    assert np.std(u0) < 1e-8 * np.max(np.abs(u0))  # the constant mode


def test_block_is_reproducible(sphere_p2):
    K, M = sphere_p2
    a = lowest_modes(K, M, 16, scale=1.0, method="block")
    b = lowest_modes(K, M, 16, scale=1.0, method="block")
    assert len(a.lam) == len(b.lam)
    assert np.array_equal(a.lam, b.lam)
    assert np.array_equal(a.vectors, b.vectors)


def test_method_is_validated_and_auto_stays_lanczos_when_small(sphere_p2):
    K, M = sphere_p2
    with pytest.raises(ValueError, match="allowed: auto, lanczos, block"):
        lowest_modes(K, M, 4, method="arnoldi")
    assert lowest_modes(K, M, 4, scale=1.0).method == "lanczos"


def test_too_small_a_basis_is_refused():
    K, M = _chain(700)
    solve = get_backend("splu")[1]((K + M).tocsc())
    with pytest.raises(SolverError, match="cannot hold"):
        block_lowest(K, M, 40, -1.0, solve, block=8, basis=44)


def test_block_finds_all_modes_below_a_value(sphere_p2):
    K, M = sphere_p2
    # below 15: l <= 3, 16 modes (the l = 4 multiplet sits near 20)
    block = lowest_modes(K, M, below=15.0, scale=1.0, method="block")
    lanczos = lowest_modes(K, M, below=15.0, scale=1.0, method="lanczos")
    assert len(block.lam) == len(lanczos.lam) == 16
    assert np.max(np.abs(block.lam - lanczos.lam) / np.maximum(np.abs(lanczos.lam), 1.0)) < 1e-10
