"""|m| labels of shells and balls symmetric about z (prisms and tetrahedra), against independent references.

References:
- concentric spheres: every (n, l) level is (2l+1)-fold with L_z eigenvalues m = -l..l
  (separation in spherical harmonics, DLMF 14.30.1-14.30.11), so a complete multiplet's |m| are
  0, 1, 1, ..., l, l;
- the azimuthal form Q = integral (du/dphi)^2 checked on u = x, where du/dphi = -y exactly, so
  x^T Q x = integral y^2 dV; for the ellipsoid with semi-axes (a, a, c), integral y^2 dV =
  4 pi a^3 c / 15 (elementary integral: the unit ball's integral of y^2 is 4 pi / 15, scaled by the
  axes' Jacobian a a c and y = a y');
- a weakly deformed (spheroidal) hard-walled ball: first-order shifts of the j_l zeros by Hadamard's
  formula, lambda = k^2 (1 - 2 delta <cos^2 theta>_lm) (``references.spheroidal_first_order``,
  its derivation and sources in its docstring; <cos^2 theta>_lm by quadrature of scipy.special.lpmv):
  the axial deformation is diagonal in m, so each level is one |m| class, a +-m pair for m > 0, and on
  a prolate ball m = 0 lies lowest within every l, on an oblate one highest.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from shellmodes.case.schema import case_from_dict
from shellmodes.fem.azimuthal import prism_azimuthal_kronecker, prism_azimuthal_matrix, walls_axisymmetric
from shellmodes.fem.prisms import prism_shell
from shellmodes.pipeline import run_case
from shellmodes.studies import references as ref


def solve(shell, count, resolution=None, potential=None):
    data = {"shell": {"cells": "prisms", **shell}, "modes": {"count": count}}
    if resolution is not None:
        data["resolution"] = resolution
    if potential is not None:
        data["potential"] = potential
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return run_case(case_from_dict(data, "<test>"))


def sphere_pattern(l: int) -> tuple:
    """|m| of a complete l multiplet: 0, 1, 1, ..., l, l (DLMF 14.30)."""
    return (0,) + tuple(m for m in range(1, l + 1) for _ in range(2))


@pytest.mark.parametrize("shell", [
    {"inner": {"shape": "sphere", "radius": 1.0}, "outer": {"shape": "sphere", "radius": 2.0}, "layers": 2,
     "radial_degree": 4},
    {"outer": {"shape": "sphere", "radius": 1.0}, "layers": 2, "radial_degree": 4},  # a ball: merged centre dof
])
def test_concentric_spheres_give_every_multiplet_m_0_to_l(shell):
    spectrum = solve(shell, 25)
    assert spectrum.plan.path == "separable"
    complete = [m for m in spectrum.multiplets if m.l is not None and m.size == 2 * m.l + 1]
    assert len(complete) >= 5  # l = 0..4 at least (shell), or l = 0..3 and the second l = 0, 1 (ball)
    for m in complete:
        assert m.abs_m == sphere_pattern(m.l), (m.energy, m.l, m.abs_m)
    assert "|m|" in spectrum.info["mesh"]["labels"]
    column = spectrum.mode_columns["abs_m"]
    for m in complete:  # the per-mode column carries the subspace's sorted |m| (a set, basis-invariant)
        assert sorted(column[i] for i in m.members) == list(m.abs_m)


@pytest.mark.parametrize("walls", [[1.0, 2.0], [None, 1.0]])
def test_kronecker_azimuthal_matrix_equals_the_general_quadrature(walls):
    # two constructions of the same form on concentric spheres: Q_s (x) C and the prism map's
    # quadrature with the volume Jacobian; equal up to rounding (the assembly's own K and M agree
    # with their Kronecker forms the same way, tests/test_prisms.py)
    disc = prism_shell(walls, level=1, layers_per_region=2, degree=2, radial_degree=3)
    Q1, Q2 = prism_azimuthal_kronecker(disc), prism_azimuthal_matrix(disc)
    assert abs(Q1 - Q2).max() < 1e-12 * abs(Q1).max()


@pytest.mark.parametrize("cells", ["prisms", "tetrahedra"])
def test_azimuthal_matrix_of_x_is_the_integral_of_y_squared(cells):
    # u = x: du/dphi = -y, so x^T Q x = integral y^2 dV = 4 pi a^3 c / 15 on the spheroid (a, a, c)
    a, c = 1.0, 1.3
    from shellmodes.fem.discretisation import build_discretisation

    shell = {"cells": cells, "outer": {"shape": "spheroid", "equatorial_radius": a, "polar_radius": c}, "layers": 2}
    if cells == "prisms":
        shell["radial_degree"] = 3
    case = case_from_dict({"shell": shell, "resolution": {"degree": 2, "subdivisions": 2}}, "<test>")
    disc = build_discretisation(case)
    Q = disc.azimuthal_matrix()
    assert Q is not None
    x = disc.nodes[:, 0]
    exact = 4 * np.pi * a**3 * c / 15
    # the interpolant of x on curved degree-2 cells (162 directions) and the wall's geometry interpolation
    # limit it: measured 2.8e-5 (prisms), 2.0e-4 (tetrahedra); 10x margin
    assert abs(x @ (Q @ x) - exact) / exact < (3e-4 if cells == "prisms" else 2e-3)
    ones = np.ones(disc.ndofs)
    assert np.max(np.abs(Q @ ones)) < 1e-10  # constants do not depend on phi (rounding)


def test_triaxial_walls_and_phi_dependent_potentials_give_no_abs_m():
    triaxial = solve({"outer": {"shape": "ellipsoid", "axes": [1.0, 1.1, 1.2]}, "layers": 2, "radial_degree": 3},
                     6, {"degree": 2, "subdivisions": 1})
    assert all(m.abs_m is None for m in triaxial.multiplets) and "abs_m" not in triaxial.mode_columns
    ball = {"outer": {"shape": "sphere", "radius": 1.0}, "layers": 2, "radial_degree": 3}
    tilted = solve(ball, 6, {"degree": 2, "subdivisions": 1}, {"expression": "3 * x"})
    assert all(m.abs_m is None for m in tilted.multiplets)
    along_z = solve(ball, 6, {"degree": 2, "subdivisions": 1}, {"expression": "3 * z"})
    assert along_z.multiplets[0].abs_m == (0,)  # a field along z keeps L_z: the ground state is m = 0
    assert not walls_axisymmetric([None, lambda d: 1.0 + 0.1 * d[:, 0]])
    assert walls_axisymmetric([None, lambda d: 1.0 + 0.1 * d[:, 2] ** 2])
    from shellmodes.case.model import wall_function
    from shellmodes.case.schema import Wall

    def star(m):
        terms = ({"l": 2, "m": m, "amplitude": 0.1},)
        return wall_function(Wall(shape="deformed_sphere", radius=1.0, deformation=terms))

    assert walls_axisymmetric([None, star(0)]) and not walls_axisymmetric([None, star(2)])
    assert walls_axisymmetric([wall_function(Wall(shape="ellipsoid", axes=(1.0, 1.0, 1.5))), star(0)])


def spheroid_classes(inner: float, outer: float, polar_radius: float, l_max: int, n_max: int):
    """(first-order level, (l, n, m)) of every class of the hard-walled spheroidal ball or shell, sorted."""
    return sorted((ref.spheroidal_first_order(l, m, n_max + 1, outer, polar_radius, inner)[n], (l, n, m))
                  for l in range(l_max + 1) for n in range(n_max + 1) for m in range(l + 1))


def check_spheroids(inner, outer, delta, resolution, count, l_max, tolerance, radial_degree=4):
    """Prolate (1 + delta) and oblate (1 - delta) outer walls: |m| classes in the first-order order, pair
    sizes, and the symmetric shift (lambda(+delta) - lambda(-delta)) / 2 against the first-order shift."""
    found = {}
    for sign in (1, -1):
        c = outer * (1.0 + sign * delta)
        shell = {"outer": {"shape": "spheroid", "equatorial_radius": outer, "polar_radius": c}, "layers": 2,
                 "radial_degree": radial_degree}
        if inner:
            shell["inner"] = {"shape": "sphere", "radius": inner}
        spectrum = solve(shell, count, resolution)
        predicted = spheroid_classes(inner, outer, c, l_max, 1)[: len(spectrum.multiplets)]
        got = [(m.abs_m, m.size) for m in spectrum.multiplets[: len(predicted)]]
        expected = [(((key[2],) * (1 if key[2] == 0 else 2)), 1 if key[2] == 0 else 2) for _, key in predicted]
        assert got == expected, (c, got, expected)
        for m, (_, key) in zip(spectrum.multiplets, predicted):
            found.setdefault(key, []).append(m.eigenvalue)
    worst = 0.0
    for (l, n, m), (plus, minus) in ((k, v) for k, v in found.items() if len(v) == 2):
        k2 = spheroid_classes(inner, outer, outer, l, 1)  # delta = 0: the sphere's levels
        sphere = next(v for v, key in k2 if key == (l, n, m))
        first_order = ref.spheroidal_first_order(l, m, n + 1, outer, outer * (1 + delta), inner)[n] - sphere
        worst = max(worst, abs((plus - minus) / 2 - first_order) / abs(first_order))
    assert worst < tolerance, worst
    return worst


def test_spheroidal_balls_split_by_abs_m_as_first_order_theory_says():
    # delta = 0.02: the symmetric difference leaves O(delta^2) of the shift (4e-4) plus the mesh's error;
    # degree 2 on 42 directions resolves l <= 2: measured at most 8.3e-3 of the shift (l = 2, m = 2).
    # Classes within one l differ by >= 18 % of the larger shift (l = 2: m = 0 and 1), so 2e-2 tells them apart.
    check_spheroids(0.0, 1.0, 0.02, {"degree": 2, "subdivisions": 1}, 10, 2, 2e-2)


def test_spheroidal_shells_split_by_abs_m_as_first_order_theory_says():
    # a spherical inner wall (r = 1) inside a spheroidal outer wall (2, 2 (1 +- delta)): the lowest levels are
    # l = 0, 1, 2 of the first radial state (9 modes, 6 classes); measured at most 5.9e-3 of the shift
    check_spheroids(1.0, 2.0, 0.02, {"degree": 2, "subdivisions": 1}, 9, 3, 2e-2)


@pytest.mark.slow
def test_spheroidal_balls_split_by_abs_m_up_to_l_3():
    # 162 directions resolve l = 3 too: measured at most 5.4e-3 of the shift (the second l = 0 level)
    check_spheroids(0.0, 1.0, 0.02, {"degree": 2, "subdivisions": 2}, 20, 3, 1e-2)


def test_tetrahedral_spheroidal_ball_has_abs_m_classes():
    # curved P2 tetrahedra of a prolate ball (c/a = 1.2): the l = 1 level splits into m = 0 below a
    # +-1 pair (first-order order, references.spheroidal_first_order), and l = 2 into 0 < 1 < 2
    data = {"shell": {"cells": "tetrahedra", "outer": {"shape": "spheroid", "equatorial_radius": 1.0,
                                                        "polar_radius": 1.2}, "layers": 2},
            "resolution": {"degree": 2, "subdivisions": 2}, "modes": {"count": 9}}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        spectrum = run_case(case_from_dict(data, "<test>"))
    # the tetrahedral mesh is not exactly axisymmetric: it may split a +-m pair over two multiplets,
    # so compare the |m| of the states in energy order (each multiplet's sorted set, basis-invariant)
    got = [v for m in spectrum.multiplets for v in m.abs_m][:9]
    assert got == [0, 0, 1, 1, 0, 1, 1, 2, 2]



def surface(shape, count, potential=None):
    data = {"surface": shape, "resolution": {"degree": 2, "subdivisions": 2}, "modes": {"count": count}}
    if potential is not None:
        data["potential"] = potential
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return run_case(case_from_dict(data, "<test>"))


def test_surfaces_symmetric_about_z_by_their_parameters_get_abs_m():
    # a deformed sphere with only m = 0 terms and an ellipsoid with equal x and y axes are surfaces of
    # revolution: the l = 1 triplet splits into m = 0 and a +-1 pair (L_z commutes with the operator)
    for shape in ({"shape": "deformed_sphere", "radius": 1.0, "deformation": [{"l": 2, "m": 0, "amplitude": 0.1}]},
                  {"shape": "ellipsoid", "axes": [1.0, 1.0, 1.2]}):
        spectrum = surface(shape, 4)
        assert sorted(v for m in spectrum.multiplets[1:] for v in m.abs_m) == [0, 1, 1], shape
    tilted = surface({"shape": "deformed_sphere", "radius": 1.0, "deformation": [{"l": 2, "m": 2, "amplitude": 0.1}]},
                     4)
    assert all(m.abs_m is None for m in tilted.multiplets)
    field = surface({"shape": "sphere", "radius": 1.0}, 4, {"expression": "2 * y"})
    assert all(m.abs_m is None for m in field.multiplets)  # a potential along y breaks the symmetry about z
