"""The eigen-solver: singular stiffness, multiplet completion, residuals, reproducibility."""

import warnings

import numpy as np
import pytest
import scipy.sparse as sp

from shellmodes.eigen.solve import group_multiplets, lowest_modes
from shellmodes.errors import DoubtfulResultWarning, SolverError
from shellmodes.fem.forms import assemble_surface
from shellmodes.fem.surface import curved_surface
from shellmodes.shapes import make_shape


def _sphere_problem(degree=2, level=2):
    sh = make_shape("sphere")
    return assemble_surface(curved_surface(*sh.reference(level), degree, project=sh.project))


@pytest.mark.parametrize("backend", ["splu", "cholmod"])
def test_singular_stiffness_zero_mode_and_orthonormality(backend):
    p = _sphere_problem()
    e = lowest_modes(p.K, p.M, 4, scale=p.spectral_scale, backend=backend)
    assert len(e.lam) == 4
    assert abs(e.lam[0]) < 1e-10  # constants are in the kernel of K on a closed surface (exact)
    G = e.vectors.T @ (p.M @ e.vectors)
    assert np.max(np.abs(G - np.eye(4))) < 1e-10  # M-orthonormal to rounding
    assert np.max(e.residuals) < 1e-9
    assert e.shift < 0  # strictly below the spectrum, so K - sigma M is positive definite


def test_count_inside_multiplet_is_extended_to_the_gap():
    p = _sphere_problem()
    e = lowest_modes(p.K, p.M, 5, scale=p.spectral_scale)  # l = 2 starts at mode 4 and has 5 members
    assert len(e.lam) == 9
    assert e.requested == 5


def test_below_returns_every_mode_under_the_bound():
    p = _sphere_problem(3, 2)
    e = lowest_modes(p.K, p.M, below=13.0, scale=p.spectral_scale)
    assert len(e.lam) == 16  # l = 0..3: 1 + 3 + 5 + 7 (exact degeneracies, l(l+1) = 12 < 13 < 20)
    assert np.all(e.lam < 13.0)


def test_reproducible_with_fixed_start_vector():
    p = _sphere_problem()
    a = lowest_modes(p.K, p.M, 9, scale=p.spectral_scale)
    b = lowest_modes(p.K, p.M, 9, scale=p.spectral_scale)
    np.testing.assert_array_equal(a.lam, b.lam)
    np.testing.assert_array_equal(a.vectors, b.vectors)


def test_more_modes_than_dofs_is_an_error():
    p = _sphere_problem(1, 0)
    with pytest.raises(SolverError, match="only 12 degrees of freedom"):
        lowest_modes(p.K, p.M, 13)


def test_dense_path_agrees_with_lanczos():
    p = _sphere_problem(2, 2)  # 642 dofs: above the dense limit
    lanczos = lowest_modes(p.K, p.M, 9, scale=p.spectral_scale)
    small = _sphere_problem(2, 1)  # 162 dofs: dense path
    dense = lowest_modes(small.K, small.M, 9, scale=small.spectral_scale)
    assert dense.backend == "dense" and lanczos.backend != "dense"
    exact = np.array([2, 2, 2, 6, 6, 6, 6, 6.0])  # l(l+1), l = 1, 2
    np.testing.assert_allclose(dense.lam[1:9], exact, rtol=2e-2)  # 162 P2 dofs: errors ~1e-2 (measured)
    np.testing.assert_allclose(lanczos.lam[1:9], exact, rtol=2e-3)  # 642 P2 dofs: ~1e-3


def test_doubtful_residual_warns():
    p = _sphere_problem()
    with pytest.warns(DoubtfulResultWarning, match="residual"):
        lowest_modes(p.K, p.M, 4, scale=p.spectral_scale, residual_limit=1e-30)


def test_group_multiplets_relative_and_absolute_scale():
    lam = np.array([0.0, 1e-14, 2.0, 2.0 + 1e-9, 2.1])
    groups = group_multiplets(lam, 1e-6, scale=1.0)
    assert [list(g) for g in groups] == [[0, 1], [2, 3], [4]]


def test_diagonal_problem_exact():
    K = sp.diags(np.arange(1.0, 2001.0)).tocsr()
    M = sp.identity(2000, format="csr")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        e = lowest_modes(K, M, 10)
    np.testing.assert_allclose(e.lam, np.arange(1.0, 11.0), rtol=1e-12)


def test_energy_window_with_no_mode_says_so(tmp_path):
    from shellmodes.case.schema import case_from_dict
    from shellmodes.pipeline import run_case

    case = case_from_dict({"surface": {"shape": "cap", "half_angle": 90.0}, "resolution": {"degree": 2,
                           "subdivisions": 2}, "modes": {"below": 1.0}})
    # the hard-rim hemisphere's lowest eigenvalue is 2 (l = 1, m = 0): nothing lies below 1
    with pytest.warns(UserWarning, match="no mode lies below"):
        spectrum = run_case(case)
    assert len(spectrum.eigenvalues) == 0
    assert any("lowest is 1.99" in w for w in spectrum.info["warnings"])  # coarse P2: 2 to ~1e-3
