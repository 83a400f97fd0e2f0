"""Balls and core/shell dots on layered prisms closed at the centre (one merged centre dof).

References: zeros of j_l (hard wall) and of j_l' (free wall) from
``references.ball_dirichlet`` / ``ball_neumann`` (scipy.special.spherical_jn with
a root finder; published in Abramowitz and Stegun Table 10.6, DLMF 10.21);
the BenDaniel-Duke matching condition of a core/shell dot
(``references.core_shell_dot_dirichlet``, BenDaniel and Duke, Phys. Rev. 152,
683 (1966), with j_l, y_l, i_l, k_l from scipy.special).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse.linalg as sla

from shellmodes.eigen.separable import BallPreconditioner, separable_modes
from shellmodes.fem.ball import free_space
from shellmodes.fem.prisms import assemble_prisms, kronecker_factors, prism_shell
from shellmodes.studies import references as ref


def levels(roots, l_max: int, n: int) -> np.ndarray:
    """Sorted eigenvalues k^2 with their (2l+1)-fold multiplicity for l <= l_max, n roots each."""
    return np.sort(np.concatenate([np.repeat(roots(l, n) ** 2, 2 * l + 1) for l in range(l_max + 1)]))


def ball_modes(level, degree, radial_degree, layers, dirichlet, count, walls=(None, 1.0), inverse_mass=None,
               offsets=None):
    disc = prism_shell(list(walls), level=level, layers_per_region=layers, degree=degree,
                       radial_degree=radial_degree)
    Ks, Ms, A, B, C = kronecker_factors(disc, inverse_mass or {}, offsets)
    found = separable_modes(Ks, Ms, A, B, C, free_space(disc, dirichlet).radial_free, count=count, centre=True)
    return found


def test_hard_wall_ball_matches_the_zeros_of_j_l():
    exact = levels(ref.ball_dirichlet, 8, 4)  # zeros of j_l (A&S Table 10.6; scipy.special root finder)
    found = ball_modes(1, 3, 6, 2, ["outer"], 20)
    err = np.abs(found.lam[:20] - exact[:20]) / exact[:20]
    # P3 x Q6 on 42-vertex directions: measured 3.6e-4 (the surface resolution of l = 3 limits it)
    assert np.max(err) < 1e-3
    assert np.max(found.residuals) < 1e-10


def test_free_wall_ball_matches_the_zeros_of_j_l_prime():
    exact = levels(ref.ball_neumann, 8, 4)  # zeros of j_l' (A&S Table 10.6; k = 0 for the constant mode)
    found = ball_modes(1, 3, 6, 2, [], 20)
    assert abs(found.lam[0]) < 1e-10  # the constant: exactly in the space through the merged centre dof
    err = np.abs(found.lam[1:20] - exact[1:20]) / exact[1:20]
    assert np.max(err) < 5e-3  # measured 1.7e-3 (surface resolution of l = 4 at 42 directions)


@pytest.mark.parametrize("degree, levels_, layers, expected", [(1, (2, 3, 4), 2, 2), (2, (1, 2, 3), 2, 4),
                                                                (3, (1, 2, 3), 1, 6)])
def test_ball_converges_at_order_2k(degree, levels_, layers, expected):
    # surface and radial h halve together; the fitted slope of log(max error) against log h over three
    # refinements, first 9 modes (l <= 2) against the j_l zeros (A&S Table 10.6)
    exact = levels(ref.ball_dirichlet, 4, 2)[:9]
    errors = []
    for i, level in enumerate(levels_):
        lam = ball_modes(level, degree, degree, layers * 2**i, ["outer"], 9).lam[:9]
        assert len(lam) == 9
        errors.append(np.max(np.abs(lam - exact) / exact))
    slope = np.polyfit(np.log([1.0, 0.5, 0.25]), np.log(errors), 1)[0]
    # measured 1.86, 3.82, 6.11: within 0.3 of 2k (pre-asymptotic coarse levels pull the fit down)
    assert slope > expected - 0.3, errors


def test_core_shell_reference_reduces_to_the_ball_for_equal_media():
    # equal masses, no offset: the matching condition is j_l(kc) = 0 (A&S Table 10.6)
    for l in range(3):
        np.testing.assert_allclose(ref.core_shell_dot_dirichlet(l, 4, 0.5, 1.0, 1.0, 1.0),
                                   ref.ball_dirichlet(l, 4) ** 2, rtol=1e-12)


def test_core_shell_dot_matches_ben_daniel_duke():
    # core r < 1 (mass 1), shell 1 < r < 2 (mass 2.5, offset 5), hard wall at 2; hbar^2/2 = 1
    exact = np.sort(np.concatenate([np.repeat(ref.core_shell_dot_dirichlet(l, 6, 1.0, 2.0, 1.0, 2.5, 5.0), 2 * l + 1)
                                    for l in range(12)]))
    found = ball_modes(1, 3, 6, [2, 2], ["outer"], 20, walls=(None, 1.0, 2.0), inverse_mass={0: 1.0, 1: 0.4},
                       offsets={1: 5.0})
    assert found.lam[0] < 5.0  # the 1s level lies below the offset: a state bound in the core
    err = np.abs(found.lam[:20] - exact[:20]) / exact[:20]
    assert np.max(err) < 1e-3, err  # measured 1.1e-4 at 42 directions (P3 x Q6)


def test_assembled_ball_equals_the_separated_one_and_the_preconditioner_is_exact():
    # the general quadrature on P^T K P must give the Kronecker (separated) eigenvalues to rounding,
    # and the bordered fast-diagonalisation inverse must invert P^T (K - shift M) P
    disc = prism_shell([None, 1.0, 1.6], level=1, layers_per_region=[1, 2], degree=2, radial_degree=3)
    mass, offsets = {0: 1.0, 1: 0.5}, {1: 2.0}
    K, M = assemble_prisms(disc, mass, offsets)
    space = free_space(disc, ["outer"])
    Kf, Mf = space.restrict(K), space.restrict(M)
    Ks, Ms, A, B, C = kronecker_factors(disc, mass, offsets)
    sep = separable_modes(Ks, Ms, A, B, C, space.radial_free, count=12, centre=True)
    lam = np.sort(sla.eigsh(Kf, 12, Mf, sigma=-1.0, which="LM", return_eigenvectors=False))
    np.testing.assert_allclose(lam, sep.lam[:12], rtol=1e-10)
    shift = -1.0
    apply_inverse = BallPreconditioner(Ks, Ms, A, B, C, space.radial_free, shift)
    x = np.random.default_rng(1).standard_normal((space.size, 2))
    assert np.linalg.norm(apply_inverse((Kf - shift * Mf) @ x) - x) < 1e-10 * np.linalg.norm(x)
    # separated vectors lie in the merged space: one value at the centre, P X = U
    U = sep.vectors
    np.testing.assert_allclose(space.expand(space.coordinates(U)), U, atol=1e-12)


@pytest.mark.slow
def test_spheroidal_core_shell_dot_converges_at_order_4_for_degree_2():
    # no closed form: self-convergence over three refinements (h halves in every direction);
    # degree-2 elements on degree-2 geometry converge at h^4 (as on surfaces, tests/test_surface.py)
    from shellmodes.case.model import wall_function
    from shellmodes.case.schema import Wall

    core = wall_function(Wall(shape="spheroid", equatorial_radius=0.5, polar_radius=0.6))
    outer = wall_function(Wall(shape="spheroid", equatorial_radius=1.0, polar_radius=1.2))
    runs = []
    for i, level in enumerate((0, 1, 2)):
        disc = prism_shell([None, core, outer], level=level, layers_per_region=2**i, degree=2, radial_degree=2)
        K, M = assemble_prisms(disc, {0: 1.0, 1: 0.4}, {1: 5.0})
        space = free_space(disc, ["outer"])
        runs.append(np.sort(sla.eigsh(space.restrict(K), 6, space.restrict(M), sigma=-1.0, which="LM",
                                      return_eigenvectors=False)))
    d = np.abs(np.diff(np.array(runs), axis=0))
    order = np.log2(d[0] / d[1])
    # measured 3.1-4.0 per level; the coarsest directions (12 vertices) are pre-asymptotic
    assert np.median(order) > 3.4 and np.min(order) > 2.8, order


def test_ball_case_runs_on_prisms_by_default_and_writes_centre_tetrahedra(tmp_path):
    import meshio

    from shellmodes.case.schema import case_from_dict
    from shellmodes.io.outputs import write_outputs
    from shellmodes.pipeline import run_case

    data = {"shell": {"outer": {"shape": "sphere", "radius": 2.0}, "layers": 2, "radial_degree": 4},
            "resolution": {"degree": 2, "subdivisions": 1}, "modes": {"count": 4}}
    spectrum = run_case(case_from_dict(data))
    mesh = spectrum.info["mesh"]
    assert mesh["cells"] == "prisms" and spectrum.info["solver"]["plan"]["path"] == "separable"
    k = ref.ball_dirichlet(0, 1, 2.0)[0]  # pi / 2 (A&S Table 10.6: zeros of j_0 are n pi)
    assert spectrum.eigenvalues[0] == pytest.approx(k**2, rel=1e-5)  # measured 1.5e-7 (l = 0: radial Q4 only)
    write_outputs(spectrum, tmp_path / "out")
    vtu = meshio.read(tmp_path / "out" / "modes.vtu")
    assert [c.type for c in vtu.cells] == ["tetra", "wedge"]
    tets = vtu.cells[0].data
    p = vtu.points[tets]
    volumes = np.einsum("td,td->t", np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), p[:, 3] - p[:, 0])
    assert np.all(volumes > 0)


def test_region_offsets_are_in_units_energy_whatever_potential_unit_says():
    # one rule: an offset is in units.energy.  A constant offset over the whole ball shifts every level by
    # exactly that energy (common practice: V = const commutes with the Hamiltonian)
    from shellmodes.case.schema import case_from_dict
    from shellmodes.pipeline import run_case

    def case(offset):
        return case_from_dict({"shell": {"outer": {"shape": "sphere", "radius": 5.0}, "layers": 1, "radial_degree": 4,
                                         "regions": [{"name": "dot", "offset": offset}]},
                               "units": {"length": "nm", "energy": "meV"},
                               "particle": {"mass": 1.0, "mass_unit": "electron"},
                               "potential": {"expression": "0 * r", "unit": "eV"},
                               "resolution": {"degree": 2, "subdivisions": 0}, "modes": {"count": 4}})

    shifted, plain = run_case(case(100.0)), run_case(case(0.0))
    np.testing.assert_allclose(shifted.energies - plain.energies, 100.0, rtol=1e-9)  # meV, not eV
    assert "units.energy" in case(1.0).model_json_schema()["$defs"]["Medium"]["properties"]["offset"]["description"]


def test_star_shaped_dot_lobpcg_with_the_ball_preconditioner_matches_shift_invert():
    # a deformed core/shell dot (star-shaped interface and outer wall): the LOBPCG path preconditioned by the
    # bordered mean-radius ball and the CHOLMOD shift-invert path solve the same assembled pencil
    from shellmodes.case.schema import case_from_dict
    from shellmodes.pipeline import run_case

    star = [{"l": 2, "m": 0, "amplitude": 0.1}, {"l": 3, "m": 2, "amplitude": 0.05}]
    data = {"shell": {"interfaces": [{"shape": "star", "radius": 0.5, "deformation": star}],
                      "outer": {"shape": "star", "radius": 1.0, "deformation": star}, "layers": [1, 1],
                      "radial_degree": 3, "regions": [{"effective_mass": 1.0}, {"effective_mass": 2.0, "offset": 4.0}]},
            "resolution": {"degree": 2, "subdivisions": 1}, "modes": {"count": 8}, "output": {"vtu": False}}
    direct = run_case(case_from_dict(data))
    data["modes"]["method"] = "lobpcg"
    iterative = run_case(case_from_dict(data))
    assert direct.info["solver"]["plan"]["path"] != "lobpcg-spherical"
    assert iterative.info["solver"]["plan"]["path"] == "lobpcg-spherical"
    n = min(len(direct.eigenvalues), len(iterative.eigenvalues))
    np.testing.assert_allclose(iterative.eigenvalues[:n], direct.eigenvalues[:n], rtol=1e-8)  # same pencil
    assert np.max(iterative.residuals) < 1e-6
