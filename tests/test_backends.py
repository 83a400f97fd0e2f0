"""Factorization back-ends: every installed one solves, blocks and vectors alike, and gives the same modes.

Optional back-ends (``cholmod-system``, ``pardiso``, ``mumps``) are tested where
they are installed and skipped, by name, where they are not; the registry
itself is tested everywhere.
"""

import numpy as np
import pytest
import scipy.sparse as sp

from shellmodes.eigen.backends import BACKENDS, available_backends, get_backend
from shellmodes.eigen.solve import lowest_modes
from shellmodes.errors import SolverError
from shellmodes.fem.forms import assemble_surface
from shellmodes.fem.surface import curved_surface
from shellmodes.harmonics import harmonic_labels, real_sph_harm, real_sph_harm_basis
from shellmodes.shapes import make_shape

DIRECT = ["cholmod", "cholmod-system", "pardiso", "mumps", "splu"]


def _installed(name):
    if not BACKENDS[name]["available"]():
        pytest.skip(f"back-end {name!r} is not installed here")


def _sphere(degree=2, level=3):
    sh = make_shape("sphere")
    return assemble_surface(curved_surface(*sh.reference(level), degree, project=sh.project))


def test_every_direct_backend_is_registered_and_auto_prefers_an_installed_one():
    assert set(DIRECT) <= set(BACKENDS)
    installed = available_backends()
    assert get_backend("auto")[0] == installed[0]
    # "auto" never picks AMG-preconditioned CG while a direct solver is installed
    assert installed[0] != "amg"


@pytest.mark.parametrize("name", DIRECT)
def test_backend_solves_vectors_and_blocks(name):
    _installed(name)
    p = _sphere()
    A = (p.K + p.spectral_scale * p.M).tocsc()
    rng = np.random.default_rng(3)
    B = rng.standard_normal((A.shape[0], 12))
    solve = get_backend(name)[1](A)
    X = solve(B)
    x = solve(B[:, 4])
    assert X.shape == B.shape and x.shape == (A.shape[0],)
    # backward stable direct solves: residual at rounding level times a modest growth factor (common practice)
    assert np.linalg.norm(A @ X - B) / np.linalg.norm(B) < 1e-11
    np.testing.assert_allclose(x, X[:, 4], rtol=0, atol=1e-11 * np.max(np.abs(X[:, 4])))
    # a right-hand side is not overwritten
    np.testing.assert_array_equal(B, np.random.default_rng(3).standard_normal(B.shape))


def test_pardiso_cholesky_refuses_an_indefinite_matrix():
    name = "pardiso"  # matrix type 2 (SPD); CHOLMOD's simplicial LDL^T solves this one correctly instead
    _installed(name)
    A = sp.diags([1.0, -2.0, 3.0] * 300).tocsc()
    with pytest.raises(SolverError, match="not positive definite|failed"):
        get_backend(name)[1](A)(np.ones(A.shape[0]))


@pytest.mark.parametrize("name", DIRECT)
@pytest.mark.parametrize("method", ["lanczos", "block"])
def test_backends_give_the_same_sphere_modes(name, method):
    _installed(name)
    p = _sphere(degree=2, level=3)  # 2562 unknowns
    e = lowest_modes(p.K, p.M, 16, scale=p.spectral_scale, backend=name, method=method)
    ref = lowest_modes(p.K, p.M, 16, scale=p.spectral_scale, backend="splu", method="lanczos")
    assert e.backend == name and len(e.lam) == len(ref.lam) == 16  # l = 0..3: 1 + 3 + 5 + 7
    # the same discrete eigenvalues whatever the factorization: both converge to ARPACK's 1e-13
    np.testing.assert_allclose(e.lam, ref.lam, rtol=1e-11, atol=1e-11)
    assert np.max(e.residuals) < 1e-9
    # exact sphere levels l(l+1) (the Laplace-Beltrami spectrum of the unit sphere, common practice),
    # degree 2 at level 3 is accurate to about 1e-3 for l <= 3 (tests/test_surface.py rates)
    l = np.floor(np.sqrt(np.arange(16)))
    np.testing.assert_allclose(e.lam[1:], (l * (l + 1))[1:], rtol=3e-3)


def test_harmonic_basis_matches_the_single_harmonics():
    rng = np.random.default_rng(0)
    theta = np.concatenate([[0.0, np.pi, 1e-9], rng.uniform(0, np.pi, 500)])
    phi = np.concatenate([[0.3, -2.0, 1.0], rng.uniform(-np.pi, np.pi, 500)])
    Y = real_sph_harm_basis(14, theta, phi)
    R = np.column_stack([real_sph_harm(l, m, theta, phi) for l, m in harmonic_labels(14)])
    # two evaluations of the same scipy.special normalised Legendre values (recurrence): rounding only
    np.testing.assert_allclose(Y, R, rtol=0, atol=1e-13)


def test_auto_method_takes_the_block_iteration_for_many_modes_with_the_same_eigenvalues():
    from shellmodes.limits import BLOCK_COUNT

    p = _sphere(degree=2, level=4)  # 10,242 unknowns, so a block of 100 modes fits (4 k < n)
    auto = lowest_modes(p.K, p.M, BLOCK_COUNT + 20, scale=p.spectral_scale)
    lanczos = lowest_modes(p.K, p.M, BLOCK_COUNT + 20, scale=p.spectral_scale, method="lanczos")
    assert auto.method == "block" and lanczos.method == "lanczos"
    assert lowest_modes(p.K, p.M, 16, scale=p.spectral_scale).method == "lanczos"
    # 100 modes = l = 0..9, each multiplet whole: both paths return the same set
    assert len(auto.lam) == len(lanczos.lam) == 100
    # both converge to ARPACK's criterion 1e-13 on the shift-inverted operator: equal to 1e-12 relative
    np.testing.assert_allclose(auto.lam, lanczos.lam, rtol=1e-12, atol=1e-12)


def test_chunked_residuals_and_gram_equal_the_direct_formulas():
    from shellmodes.eigen.block import gram, relative_residuals

    p = _sphere(degree=2, level=2)
    rng = np.random.default_rng(5)
    X = rng.standard_normal((p.K.shape[0], 37))  # not a multiple of the chunk width
    lam = rng.uniform(0.0, 10.0, 37)
    MX = p.M @ X
    direct = np.linalg.norm(p.K @ X - MX * lam, axis=0) / (np.maximum(lam, 1.0) * np.linalg.norm(MX, axis=0))
    # the same sums in another order: rounding only
    np.testing.assert_allclose(relative_residuals(p.K, p.M, lam, X, 1.0), direct, rtol=1e-12)
    np.testing.assert_allclose(gram(p.M, X), X.T @ MX, rtol=1e-12, atol=1e-12 * np.abs(X.T @ MX).max())
