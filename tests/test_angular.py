"""Angular content of finite-element modes (shellmodes.spectrum.angular)."""

from __future__ import annotations

import doctest
import warnings

import numpy as np
import pytest
import scipy.sparse.linalg
import skfem
from scipy.special import sph_harm_y
from skfem import asm
from skfem.models.poisson import laplace, mass

import shellmodes.spectrum.angular
from shellmodes.errors import MeshQualityWarning
from shellmodes.fem.surface import curved_surface
from shellmodes.harmonics import angles, harmonic_labels, real_sph_harm, real_sph_harm_basis
from shellmodes.shapes.reference import icosphere
from shellmodes.spectrum.angular import angular_content, harmonic_projector, multiplet_content
from shellmodes.spectrum.perturbation import sphere_quadrature


def _unit(x):
    return x / np.linalg.norm(x, axis=1)[:, None]


def _lowest_modes(project, level, degree, k):
    s = curved_surface(*icosphere(level), degree, project=project)
    K = asm(laplace, s.basis)
    M = asm(mass, s.basis)
    lam, U = scipy.sparse.linalg.eigsh(K, k, M, sigma=-0.5, v0=np.ones(K.shape[0]))
    return s.nodes, lam, U, M


@pytest.fixture(scope="module")
def sphere_modes():
    """36 lowest modes (l = 0..5) of the unit sphere, P2 on P2-curved icosphere level 3 (2562 DOFs)."""
    nodes, lam, U, M = _lowest_modes(_unit, 3, 2, 36)
    # parent degree from the eigenvalue l(l+1) (exact sphere spectrum, common practice)
    l = np.rint((-1.0 + np.sqrt(1.0 + 4.0 * lam)) / 2.0).astype(int)
    return nodes, lam, U, M, l


SPHERE_BLOCKS = [list(range(l * l, (l + 1) ** 2)) for l in range(6)]  # 2l+1 modes of degree l


# Tolerance for the sphere: the weight deficit 1 - w_l is quadratic in the L2
# error of the discrete eigenfunction and of the interpolated harmonics, both
# O(h^3) for P2 on P2 geometry, so O(h^6); measured <= 4e-8 here (l <= 5), and
# 1e-6 leaves a factor 25 while any real mixing of degrees shows at the 1e-3 level.
SPHERE_TOL = 1e-6


def test_doc_examples_run():
    assert doctest.testmod(shellmodes.spectrum.angular).failed == 0


def test_real_harmonics_orthonormal_by_quadrature():
    l_max = 6
    theta, phi, w = sphere_quadrature(2 * l_max)  # exact for products of two degree-6 harmonics
    Y = real_sph_harm_basis(l_max, theta, phi)
    assert Y.shape == (len(w), (l_max + 1) ** 2)
    # 1e-13: rounding in a sum of ~100 terms of size ~1
    np.testing.assert_allclose(Y.T @ (w[:, None] * Y), np.eye(Y.shape[1]), atol=1e-13)


def test_real_harmonics_against_scipy_complex():
    rng = np.random.default_rng(7)
    theta = np.arccos(rng.uniform(-1, 1, 50))
    phi = rng.uniform(-np.pi, np.pi, 50)
    for l in range(5):
        # per m > 0 the real pair spans the complex pair: Y_lm^2 + Y_l-m^2 = 2 |Y_l^m|^2
        for m in range(1, l + 1):
            pair = real_sph_harm(l, m, theta, phi) ** 2 + real_sph_harm(l, -m, theta, phi) ** 2
            np.testing.assert_allclose(pair, 2 * np.abs(sph_harm_y(l, m, theta, phi)) ** 2, atol=1e-13)
        # addition theorem: sum_m Y_lm^2 = (2l+1)/(4 pi) (DLMF 14.30.9 with theta = 0)
        total = sum(real_sph_harm(l, m, theta, phi) ** 2 for m in range(-l, l + 1))
        np.testing.assert_allclose(total, (2 * l + 1) / (4 * np.pi), rtol=1e-13)
    # l = 1 closed forms sqrt(3/(4 pi)) (x, y, z) for m = 1, -1, 0 (DLMF 14.30 with the
    # sign convention of shellmodes.harmonics)
    x = np.column_stack([np.sin(theta) * np.cos(phi), np.sin(theta) * np.sin(phi), np.cos(theta)])
    c = np.sqrt(3 / (4 * np.pi))
    for m, axis in ((1, 0), (-1, 1), (0, 2)):
        np.testing.assert_allclose(real_sph_harm(1, m, theta, phi), c * x[:, axis], atol=1e-14)


def test_sphere_modes_sit_on_their_own_degree(sphere_modes):
    nodes, lam, U, M, l = sphere_modes
    assert len(l) == 36
    assert np.array_equal(np.bincount(l), 2 * np.arange(6) + 1)  # the spectrum l(l+1), (2l+1)-fold
    with warnings.catch_warnings():
        warnings.simplefilter("error", MeshQualityWarning)
        c = angular_content(nodes, U, M, l_max=8, axisymmetric=True)
    assert c.weights.shape == (36, 9)
    assert np.array_equal(c.dominant_l, l)
    own = c.weights[np.arange(36), l]
    assert np.all(own > 1 - SPHERE_TOL), own.min()
    assert np.all(c.unresolved < SPHERE_TOL)
    assert np.all(c.weights >= 0)
    # <L^2> = l(l+1) (hbar = 1); same relative tolerance as the weights
    np.testing.assert_allclose(c.mean_L2, l * (l + 1.0), rtol=SPHERE_TOL, atol=SPHERE_TOL)


def test_sphere_multiplets_are_pure(sphere_modes):
    nodes, lam, U, M, l = sphere_modes
    rows = multiplet_content(nodes, U, M, SPHERE_BLOCKS, l_max=8)
    assert len(rows) == len(SPHERE_BLOCKS)
    for degree, row in enumerate(rows):
        assert row["size"] == 2 * degree + 1
        assert row["l"] == degree
        assert row["purity"] > 1 - SPHERE_TOL
        assert row["weights"].shape == (9,)


def test_content_does_not_depend_on_basis_inside_a_multiplet(sphere_modes):
    nodes, lam, U, M, l = sphere_modes
    rng = np.random.default_rng(2024)
    mixed = U.copy()
    for block in SPHERE_BLOCKS:
        Q, _ = np.linalg.qr(rng.standard_normal((len(block), len(block))))
        mixed[:, block] = U[:, block] @ Q
    before = angular_content(nodes, U, M, l_max=6)
    after = angular_content(nodes, mixed, M, l_max=6)
    # exact invariance needs an exactly invariant multiplet; the icosahedral mesh leaves
    # admixtures of other degrees at the discretisation level (measured 3e-9), hence SPHERE_TOL
    np.testing.assert_allclose(after.weights, before.weights, atol=SPHERE_TOL)
    # per-group weights are subspace properties: invariant to rounding (1e-10), even for a
    # group that straddles two degrees
    group = [[1, 2, 3, 4, 5, 6, 7, 8]]
    mixed_group = U.copy()
    Q, _ = np.linalg.qr(rng.standard_normal((8, 8)))
    mixed_group[:, 1:9] = U[:, 1:9] @ Q
    a = multiplet_content(nodes, U, M, group, l_max=6)[0]["weights"]
    b = multiplet_content(nodes, mixed_group, M, group, l_max=6)[0]["weights"]
    np.testing.assert_allclose(b, a, atol=1e-10)
    # 3 of 8 states have l = 1, 5 have l = 2 (sphere): weights 3/8 and 5/8.  Across degrees
    # the split follows the coefficients' sphere norms, which carry the mass error of the
    # interpolated harmonics (diagonal of G - I, O(h^3): measured 6.7e-4 at l = 5, the
    # split is off by 6e-6 here); tolerance 1e-4
    np.testing.assert_allclose(a[1:3], [3 / 8, 5 / 8], atol=1e-4)


def test_mixed_function_gives_its_mixture(sphere_modes):
    nodes, lam, U, M, l = sphere_modes
    theta, phi = angles(nodes)
    alpha = 0.3
    u = np.cos(alpha) * real_sph_harm(1, 0, theta, phi) + np.sin(alpha) * real_sph_harm(3, -2, theta, phi)
    c = angular_content(nodes, 5.0 * u, M, l_max=5, axisymmetric=True)
    # u lies in the span of the analysing functions: the least-squares fit recovers its
    # coefficients exactly, so only rounding (1e-10) separates the weights from cos^2, sin^2
    np.testing.assert_allclose(c.weights[0, [1, 3]], [np.cos(alpha) ** 2, np.sin(alpha) ** 2], atol=1e-10)
    assert c.unresolved[0] < 1e-10
    assert c.dominant_l[0] == 1 and c.abs_m[0] == 0
    np.testing.assert_allclose(c.mean_L2[0], 2 * np.cos(alpha) ** 2 + 12 * np.sin(alpha) ** 2, rtol=1e-10)


def test_spheroid_modes_descend_from_their_parent():
    # prolate spheroid, semi-axes (1, 1, 1.2): small enough that no multiplets up to l = 3 cross
    nodes, lam, U, M = _lowest_modes(lambda x: _unit(x) * np.array([1.0, 1.0, 1.2]), 3, 2, 16)
    parent = np.repeat(np.arange(4), 2 * np.arange(4) + 1)
    c = angular_content(nodes, U, M, l_max=8, axisymmetric=True)
    assert len(c.dominant_l) == len(parent)
    assert np.array_equal(c.dominant_l, parent)
    # the l +- 2 admixture is first order in the deformation (0.2), its weight second order:
    # measured 0.993 at worst; 0.95 still separates it from any real mixing of parents
    assert np.all(c.dominant_weight > 0.95)
    # the constant ground state is exactly Y_00 in any radial map: pure l = 0 up to rounding
    assert c.weights[0, 0] > 1 - 1e-10
    assert np.all(c.weights.sum(axis=1) <= 1 + 1e-12)
    # axial symmetry: each parent l holds |m| = 0 once and every 1..l twice
    for degree in range(4):
        got = np.sort(c.abs_m[parent == degree])
        expected = np.sort(np.r_[0, np.repeat(np.arange(1, degree + 1), 2)])
        assert np.array_equal(got, expected)
    groups = [list(np.flatnonzero(parent == degree)) for degree in range(4)]
    rows = multiplet_content(nodes, U, M, groups, l_max=8)
    assert [row["l"] for row in rows] == [0, 1, 2, 3]
    assert all(row["purity"] > 0.95 for row in rows)


def _shell_mesh(level, radii):
    """Tetrahedral spherical shell: prisms over an icosphere split into 3 tets each.

    Sorting each triangle's vertices makes the split of every shared quadrilateral
    face the same from both sides (common practice), so the mesh is conforming.
    """
    p, t = icosphere(level)
    n = len(p)
    points = np.vstack([r * p for r in radii])
    t = np.sort(t, axis=1)
    tets = []
    for k in range(len(radii) - 1):
        a, b, c = (t + k * n).T
        A, B, C = a + n, b + n, c + n
        tets += [np.column_stack(q) for q in ((a, b, c, A), (b, c, A, B), (c, A, B, C))]
    return skfem.MeshTet(np.ascontiguousarray(points.T), np.ascontiguousarray(np.vstack(tets).T))


def test_shell_volume_modes_need_radial_factors():
    # Neumann shell 0.5 < r < 1, P2 tetrahedra (5778 DOFs); the 26th mode is the first
    # radial excitation of l = 0 (lambda ~ 44, near (pi / 0.5)^2 = 39.5 plus curvature)
    basis = skfem.Basis(_shell_mesh(2, np.linspace(0.5, 1.0, 5)), skfem.ElementTetP2())
    K = asm(laplace, basis)
    M = asm(mass, basis)
    lam, U = scipy.sparse.linalg.eigsh(K, 26, M, sigma=-0.5, v0=np.ones(K.shape[0]))
    nodes = basis.doflocs.T
    parent = np.r_[np.repeat(np.arange(5), 2 * np.arange(5) + 1), 0]
    flat = angular_content(nodes, U, M, l_max=6)
    radial = angular_content(nodes, U, M, l_max=6, radial_degree=4)
    assert len(radial.dominant_l) == len(parent)
    assert np.array_equal(radial.dominant_l, parent)
    # with radial factors every mode is resolved (measured >= 0.9998 for these modes);
    # 0.999 is the discretisation error of faceted P2 tets with margin
    assert np.all(radial.dominant_weight > 0.999)
    # without them the radial node makes the l = 0 excitation invisible (measured 1e-4)
    assert flat.weights[25, 0] < 0.01
    assert flat.unresolved[25] > 0.99


def test_full_ball_with_a_node_at_the_centre():
    # Neumann ball (scikit-fem's init_ball, one node at the origin), P2: the lowest
    # modes are l = 0 (constant), l = 1 (j_1' zero, lambda = 4.33) and l = 2 (11.17)
    # (zeros of j_l': Abramowitz and Stegun table 10.6, recalled from memory)
    basis = skfem.Basis(skfem.MeshTet.init_ball(3), skfem.ElementTetP2())
    nodes = basis.doflocs.T
    assert np.min(np.linalg.norm(nodes, axis=1)) == 0.0  # the case under test
    K = asm(laplace, basis)
    M = asm(mass, basis)
    lam, U = scipy.sparse.linalg.eigsh(K, 9, M, sigma=-0.5, v0=np.ones(K.shape[0]))
    c = angular_content(nodes, U, M, l_max=4, radial_degree=4)
    parent = np.repeat(np.arange(3), 2 * np.arange(3) + 1)
    assert np.array_equal(c.dominant_l, parent)
    # coarse faceted mesh (6017 DOFs): measured deficit 1.6e-5 (radial degree 4; 0.07 with
    # radial degree 0, the radial profiles j_l(kr) are not constant); 1e-3 with margin
    assert np.all(c.dominant_weight > 1 - 1e-3)


def test_warns_when_mesh_cannot_resolve_l_max():
    p, t = icosphere(1)  # 42 vertices
    s = curved_surface(p, t, 1, project=_unit)
    M = asm(mass, s.basis)
    with pytest.warns(MeshQualityWarning, match="cannot resolve"):
        harmonic_projector(s.nodes, M, l_max=3)  # 16 functions > 42 / 8
    with pytest.warns(MeshQualityWarning) as record:
        harmonic_projector(s.nodes, M, l_max=7)  # 64 functions > 42 nodes: singular Gram
    messages = [str(w.message) for w in record]
    assert len(messages) == 2
    assert "cannot resolve" in messages[0] and "condition number" in messages[1]
    with warnings.catch_warnings():
        warnings.simplefilter("error", MeshQualityWarning)
        harmonic_projector(s.nodes, M, l_max=1)  # 4 functions: fine


def test_bad_input_is_refused(sphere_modes):
    nodes, lam, U, M, l = sphere_modes
    with pytest.raises(ValueError, match="shape"):
        angular_content(nodes[:, :2], U, M, 3)
    with pytest.raises(ValueError, match="modes must have shape"):
        angular_content(nodes, U[:-1], M, 3)
    with pytest.raises(ValueError, match="centre"):
        angular_content(np.zeros_like(nodes), U, M, 3)
    with pytest.raises(ValueError, match="l_max"):
        angular_content(nodes, U, M, -1)
    with pytest.raises(ValueError, match="radial_degree"):
        angular_content(nodes, U, M, 3, radial_degree=2)  # a surface has no radial spread
    with pytest.raises(ValueError, match="empty"):
        multiplet_content(nodes, U, M, [[]], 3)
    with pytest.raises(ValueError, match="outside"):
        multiplet_content(nodes, U, M, [[0, 36]], 3)
    with pytest.raises(ValueError, match="dependent"):
        multiplet_content(nodes, np.column_stack([U[:, 1], U[:, 1]]), M, [[0, 1]], 3)


def test_labels_match_projector_columns():
    p, t = icosphere(2)
    s = curved_surface(p, t, 2, project=_unit)
    proj = harmonic_projector(s.nodes, asm(mass, s.basis), l_max=3)
    labels = harmonic_labels(3)
    assert len(proj.l) == len(labels)
    assert [(int(a), int(b)) for a, b in zip(proj.l, proj.m)] == labels


def test_center_of_the_radial_map():
    # unit sphere centred at c0: analysed about c0 its modes are as pure as at the origin
    # (P2, icosphere level 2: measured deficit <= 1.6e-8 for l <= 2, tolerance 1e-6 as above);
    # analysed about the origin the direction map is wrong and the degrees mix.  Inside a
    # degenerate multiplet the eigen-solver's basis is arbitrary (it depends on BLAS kernels and
    # library builds), so the mixing is judged on each multiplet's whole subspace, which is
    # basis-independent: measured purity 0.906 (l = 1) and 0.741 (l = 2) about the origin
    c0 = np.array([0.3, -0.2, 0.1])
    nodes, lam, U, M = _lowest_modes(lambda x: _unit(x) + c0, 2, 2, 9)
    parent = np.repeat(np.arange(3), 2 * np.arange(3) + 1)
    centred = angular_content(nodes, U, M, l_max=6, center=c0)
    assert np.array_equal(centred.dominant_l, parent)  # any vector of a pure multiplet is pure
    assert np.all(centred.dominant_weight > 1 - SPHERE_TOL)
    groups = [[0], [1, 2, 3], [4, 5, 6, 7, 8]]
    about_c0 = multiplet_content(nodes, U, M, groups, l_max=6, center=c0)
    assert all(row["purity"] > 1 - SPHERE_TOL for row in about_c0)
    off = multiplet_content(nodes, U, M, groups, l_max=6)
    # the constant is Y_00 about any centre; the others mix: 0.95 lies between 0.906 and a pure 1
    assert off[0]["purity"] > 1 - SPHERE_TOL
    assert all(row["purity"] < 0.95 for row in off[1:])
